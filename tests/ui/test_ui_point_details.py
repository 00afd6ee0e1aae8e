"""Point details in review: the quality figures in words with each limit and pass/fail (the
limits of the run's own plan), and no internal attempt ids where a person reads."""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

from app.plan import Quality
from app.ui.models import quality_rows
from app.ui.views.review import ReviewView


def test_quality_rows_judge_each_figure_against_its_limit():
    rows = {r.label: r for r in quality_rows({"snr_db_pressure_min": 14.0, "pair_spread": 0.05, "cond": 1.4},
                                             Quality(snr_db_min=20.0, pair_spread_max=0.2))}
    assert rows["lowest pressure SNR"].ok is False and rows["lowest pressure SNR"].limit == "≥ 20 dB"
    assert rows["sensor-pair spread"].ok is True and rows["sensor-pair spread"].value == "0.05"
    assert rows["fit condition number"].ok is True


def test_review_details_are_a_table_without_attempt_ids(qtbot, tmp_path: Path):
    attempt = {"seq": 1, "attempt_id": "w20261203-090420-p0006-bd385594", "decision": "accepted",
               "decision_reason": "newest attempt", "drive_v": 0.158, "flags": ["pair-spread"], "record_status": "ok",
               "analysis": {"gain": 1.22, "gain_ci95": 0.02, "phase_rad": 2.3232, "phase_ci95_rad": 0.023,
                            "quality": {"pair_spread": 0.31, "snr_db_pressure_min": 55.9}}}
    run = SimpleNamespace(attempts_of=lambda i: [attempt])
    view = ReviewView()
    qtbot.addWidget(view)
    view.run, view.thresholds = run, Quality()
    # the curve shows this point on the branch below -180 degrees (unwrapped along frequency)
    view.points.shown_phase_rad = lambda: {6: -3.96}
    view.show_attempts(6)
    html = view.details.toHtml()
    text = view.details.toPlainText()
    assert "Point 7" in text and "attempt 1" in text
    assert "bd385594" not in text                      # no internal id
    assert "sensor-pair spread" in text and "FAIL" in text and "pass" in text
    assert "<table" in html
    assert "phase -226.9°" in text                      # stored wrapped (+133.1°); read as on the curve
