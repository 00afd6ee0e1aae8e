"""The window shows what the pre-scan, the multi-sine survey and adaptive refinement do: the
pre-scan's transfer plot appears when the engine reports it, the survey's linear-only caution
shows as a notice, and a point the plan did not list (refinement) gets a row of its own."""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import numpy as np

from conftest import write_plan, write_scenario

LONG_MS = 90_000


def test_prescan_plot_and_survey_notice_appear_in_the_sweep_tab(qtbot, make_window, tmp_path: Path) -> None:
    plan = write_plan(tmp_path / "plan.toml", write_scenario(tmp_path / "s.toml"), freqs=(200.0, 300.0, 400.0))
    plan.write_text(plan.read_text() + "[prescan]\nenabled = true\n[survey]\nenabled = true\n")
    win = make_window(plan)
    assert not win.prescan.isVisible() and not win.notice.isVisible()
    win.start_sweep()
    qtbot.waitUntil(lambda: win.sweeps_closed >= 1, timeout=LONG_MS)
    assert win.status.finish_reason == "complete", win.status.finish_reason
    assert win.prescan.isVisible() and "Pre-scan" in win.prescan.caption.text()
    x, y = win.prescan.curve.getData()
    assert x is not None and len(x) >= 1 and np.all(np.isfinite(y))
    assert win.notice.isVisible() and "linear" in win.notice.text().lower(), win.notice.text()
    assert all(r.status in ("kept", "flagged") for r in win.points.rows)


def test_a_point_the_plan_did_not_list_gets_its_own_row(qtbot) -> None:
    from app.ui.models import PointTable

    table = PointTable()
    table.set_plan([SimpleNamespace(index=0, freq_hz=200.0, amplitude_ratio=0.05),
                    SimpleNamespace(index=1, freq_hz=400.0, amplitude_ratio=0.05)])
    result = SimpleNamespace(gain=1.1, phase_rad=-1.0, gain_ci95=0.05, phase_ci95_rad=0.03, warnings=(),
                             velocity=SimpleNamespace(amplitude_ratio=0.05))
    ev = SimpleNamespace(point_index=2, freq_hz=300.0, target_ratio=0.05, flags=("refined",), result=result,
                         drive_v=0.02, attempt_id="a", record=None)
    table.on_settled(ev)
    row = table.row(2)
    # shown with its mark, which flags nothing (app.core.flagging.MARKS)
    assert row is not None and row.freq_hz == 300.0 and row.status == "kept" and "refined" in row.flags
    curve = table.curves()[0.05]
    assert sorted(curve["freq_hz"]) == [300.0]            # only points with a result are on the curve
