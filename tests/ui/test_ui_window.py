"""The window driven like an operator would: a complete fast sweep, pause/resume and abort,
a fault injected in the simulator, and the review actions (reject, re-acquire, reprocess,
export). Every wait is qtbot.waitUntil with a generous timeout; nothing sleeps.

Safety expectations are common practice for forced-flame rigs: pause, abort and faults
leave the drive at zero and keep every point already stored.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PySide6.QtCore import Qt

from app.storage.reader import open_run
from conftest import CONFIGS, write_plan, write_scenario

LONG_MS = 60_000
RESULT = ("kept", "flagged")      # a point with a result; flagged when its attempt or its result warns


def _click(qtbot, win, action) -> None:
    """Click the control strip's button of ``action`` (what an operator does)."""
    button = win.controls.button_for(action)
    assert button is not None and button.isEnabled(), action.text()
    qtbot.mouseClick(button, Qt.MouseButton.LeftButton)


def _finished(win, n: int = 1) -> bool:
    """The n-th sweep of this window has ended and its engine, writer and back-end are closed."""
    return win.sweeps_closed >= n


def test_fast_sweep_through_the_window(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan)
    assert "SIMULATED" in win.sim_label.text()
    assert win.halt_button.isVisible() and win.halt_action.isEnabled()
    _click(qtbot, win, win.start_action)
    qtbot.waitUntil(lambda: _finished(win) and win.review.run is not None, timeout=LONG_MS)
    assert win.status.finish_reason == "complete"
    assert not win.prescan.isVisible() and not win.notice.isVisible()   # no pre-scan asked: no empty plot
    live = [r.status for r in win.points.rows]
    assert set(live) <= {"kept", "flagged"} and len(live) == 3
    curves = win.points.curves()
    assert len(curves) == 1 and list(next(iter(curves.values()))["freq_hz"]) == [200.0, 400.0, 600.0]
    qtbot.waitUntil(lambda: 0.05 in win.response._items and len(win.response._items[0.05][0].getData()[0]) == 3,
                    timeout=LONG_MS)
    x, y = win.response._items[0.05][0].getData()
    assert np.all(np.isfinite(y))
    # no block dropped between the engine and the plots: every acquired sample reached the trace buffer
    device = win.session.device
    assert win.traces_buffer.total_samples == round(device.time_s * device.sample_rate_hz)
    assert win.traces.frames >= 1
    run = open_run(win.last_run_dir)
    assert sorted(run.accepted()) == [0, 1, 2]
    # one face: the live table, the review table and the stored run agree on which points are flagged
    assert [r.status for r in win.review.points.rows] == live
    assert [i for i, st in enumerate(live) if st == "flagged"] == run.flagged_points()


def test_pause_resume_then_abort_mid_point(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan, fast=False)                       # real time: commands land mid-point
    win.start_sweep()
    qtbot.waitUntil(lambda: win.status.state == "tuning", timeout=LONG_MS)
    _click(qtbot, win, win.pause_action)
    qtbot.waitUntil(lambda: win.status.state == "paused", timeout=LONG_MS)
    assert win.session.device.drive_status().amplitude_v == 0.0     # paused means drive at zero
    assert win.status.drive_v == 0.0
    assert win.pause_action.text() == "Resume"
    assert win.traces.stopped_text.startswith("paused — not live")   # no new signal while paused
    qtbot.keyClick(win, Qt.Key.Key_F6)                               # resume by shortcut
    qtbot.waitUntil(lambda: win.points.row(1).status == "measuring", timeout=LONG_MS)
    assert not win.traces.stopped_text and not win.traces.overlay.isVisible()
    assert win.points.row(0).status in RESULT         # point 1 has its result (flagged or not)
    qtbot.keyClick(win, Qt.Key.Key_F8)                               # abort by shortcut, mid-point 2
    qtbot.waitUntil(lambda: _finished(win), timeout=LONG_MS)
    assert win.status.finish_reason == "aborted"
    assert "aborted" in win.traces.stopped_text and not win.halt_banner.isVisible()
    status = win.session.device.drive_status()
    assert status.amplitude_v == 0.0 and status.target_amplitude_v == 0.0
    run = open_run(win.last_run_dir)
    assert sorted(run.accepted()) == [0]                             # the stored point is kept
    assert win.points.row(0).status == ("flagged" if run.flagged_points() == [0] else "kept")
    assert win.points.row(1).status == "planned" and win.points.row(2).status == "planned"


def test_injected_fault_shows_its_banner(qtbot, make_window, tmp_path: Path) -> None:
    scenario = write_scenario(tmp_path / "faulty.toml", 'flame_out = { enabled = true, time = "4 s" }')
    win = make_window(write_plan(tmp_path / "plan.toml", scenario))
    win.start_sweep()
    qtbot.waitUntil(lambda: _finished(win), timeout=LONG_MS)
    assert win.status.finish_reason == "fault"
    assert win.banner.isVisible()
    assert win.traces.stopped_text == "stopped — not live (ended by a fault — drive at zero)"
    assert "flame-out" in win.banner.title.text()
    assert "zero" in win.banner.action.text()                        # what the tool did
    assert win.banner.advice.text().startswith("What you can do:")
    hit = win.banner.last.point_index
    assert hit is not None and win.points.row(hit).status == "fault"
    assert all(win.points.row(i).status in RESULT for i in range(hit))
    assert win.session.device.drive_status().amplitude_v == 0.0


def test_review_reject_reacquire_reprocess_export(qtbot, make_window, tiny_plan, tmp_path: Path) -> None:
    from app.cli import main

    run_dir = tmp_path / "stored"
    assert main(["sweep", str(tiny_plan), "--fast", "--out", str(run_dir)]) == 0   # made headless
    win = make_window(tiny_plan)
    win.open_review(run_dir)
    qtbot.waitUntil(lambda: win.review.run is not None and win.review.accept_button.isEnabled(), timeout=LONG_MS)
    review = win.review
    assert len(review.points.rows) == 3
    review.point_list.select_points([1])
    qtbot.waitUntil(lambda: "p1" in review.record.curves and review.record.curves["p1"].getData()[0] is not None,
                    timeout=LONG_MS)
    old = review.run
    qtbot.mouseClick(review.reject_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: review.run is not old, timeout=LONG_MS)
    assert review.points.row(1).status == "rejected"
    assert 1 not in open_run(run_dir).accepted()

    review.point_list.select_points([1])
    qtbot.mouseClick(review.reacquire_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: _finished(win) and review.run is not None and review.points.row(1).attempts == 2,
                    timeout=LONG_MS)
    run = open_run(run_dir)
    assert sorted(run.accepted()) == [0, 1, 2] and len(run.attempts_of(1)) == 2
    assert run.accepted()[1]["seq"] == 2                              # the person's rejection of attempt 1 holds
    assert review.points.row(1).status == ("flagged" if 1 in run.flagged_points() else "kept")

    review.point_list.select_points([1])                             # choose the first attempt again
    qtbot.waitUntil(lambda: review.attempt_box.count() == 2, timeout=LONG_MS)
    first = run.attempts_of(1)[0]["attempt_id"]
    review.attempt_box.setCurrentIndex(review.attempt_box.findData(first))
    old = review.run
    qtbot.mouseClick(review.accept_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: review.run is not old, timeout=LONG_MS)
    assert open_run(run_dir).accepted()[1]["attempt_id"] == first

    rig_text = (CONFIGS / "demo-rig.toml").read_text(encoding="utf-8").replace('"14.2 mV/Pa"', '"14.9 mV/Pa"')
    new_rig = tmp_path / "edited-rig.toml"
    new_rig.write_text(rig_text, encoding="utf-8")
    before = review.run
    win.reprocess(new_rig)
    qtbot.waitUntil(lambda: review.run is not before, timeout=LONG_MS)
    assert all(a["analysis"].get("rig_sha256") for a in review.run.attempts if a["record_status"] == "ok")

    qtbot.mouseClick(review.export_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: (run_dir / "export" / "points.csv").exists() and "Exported" in review.message.text(),
                    timeout=LONG_MS)
    assert len((run_dir / "export" / "points.csv").read_text().splitlines()) == 4


def test_setup_lists_config_problems_with_file_and_key(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan)
    ed = win.setup.rig_editor
    ed.editor.setPlainText(ed.text().replace('ceiling = "2.0 V"', 'ceiling = "two volts"'))
    assert not ed.check()
    lines = [ed.problems.item(i).text() for i in range(ed.problems.count())]
    assert any("demo-rig.toml" in t and "drive.ceiling" in t for t in lines), lines
    assert not win.start_sweep()                                     # unsaved and invalid: refused
    assert win.session is None


def test_emergency_halt_by_shortcut_zeroes_at_once(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan, fast=False)
    win.start_sweep()
    qtbot.waitUntil(lambda: win.status.state == "tuning" and win.status.drive_v > 0, timeout=LONG_MS)
    qtbot.keyClick(win, Qt.Key.Key_Escape)
    qtbot.waitUntil(lambda: _finished(win), timeout=LONG_MS)
    assert win.status.finish_reason == "halted"
    status = win.session.device.drive_status()
    assert status.amplitude_v == 0.0 and status.target_amplitude_v == 0.0
    qtbot.waitUntil(lambda: "HALTED" in win.state_label.text() and "drive 0.000 V" in win.state_label.text(),
                    timeout=LONG_MS)


def test_fdf_plan_draws_one_curve_per_amplitude(qtbot, make_window, tmp_path: Path) -> None:
    plan = write_plan(tmp_path / "fdf.toml", write_scenario(tmp_path / "s.toml"), freqs=(250.0, 500.0),
                      amps=(0.03, 0.08), record="0.3 s")
    win = make_window(plan)
    win.start_sweep()
    qtbot.waitUntil(lambda: _finished(win), timeout=LONG_MS)
    assert win.status.finish_reason == "complete"
    qtbot.waitUntil(lambda: "FDF" in win.response.caption.text() and "4 of 4" in win.response.caption.text(),
                    timeout=LONG_MS)
    assert sorted(win.response._items) == [0.03, 0.08]
    for gain_item, *_ in win.response._items.values():
        assert len(gain_item.getData()[0]) == 2


def test_real_hardware_needs_the_checklist_and_unavailable_backends_are_greyed(qtbot, tiny_plan, tmp_path) -> None:
    from drivers.protocols import Availability
    from drivers.registry import BackendInfo

    from app.ui.window import MainWindow

    infos = [BackendInfo("bench-card", "a card", Availability(True, "found"), "x:Y"),
             BackendInfo("simulated", "sim", Availability(True, "built-in simulator"), "x:Z"),
             BackendInfo("scope", "a scope", Availability(False, "vendor runtime not installed"), "x:W")]
    win = MainWindow(CONFIGS / "demo-rig.toml", tiny_plan, runs_root=tmp_path / "runs", backend="bench-card",
                     backends=infos)
    qtbot.addWidget(win)
    item = win.setup.backend.model().item(2)
    assert not item.isEnabled() and "vendor runtime" in win.setup.backend_reasons.text()
    assert "REAL HARDWARE" in win.sim_label.text()
    assert not win.start_action.isEnabled() and not win.start_sweep() and win.session is None
    for box in win.setup.checks.values():
        box.setChecked(True)
    assert win.start_action.isEnabled()
    win.setup.backend.setCurrentIndex(1)                    # back to the simulator: no checklist needed
    for box in win.setup.checks.values():
        box.setChecked(False)
    assert win.start_action.isEnabled() and "SIMULATED" in win.sim_label.text()


def test_closing_the_window_mid_sweep_halts_and_leaves_no_thread(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan, fast=False)
    win.start_sweep()
    qtbot.waitUntil(lambda: win.status.state == "tuning" and win.status.drive_v > 0, timeout=LONG_MS)
    session = win.session
    win.close()                                    # halts (zero at once), waits for the clean-up
    assert session.closed and session.engine.finish_reason == "halted"
    info = open_run(session.request.run_dir).info
    assert info["last_finish_reason"] == "halted" and info["last_finish_detail"] == "window closed during the sweep"
    status = session.device.drive_status()
    assert status.amplitude_v == 0.0 and status.target_amplitude_v == 0.0
    # the autouse fixture then checks that no sweep, writer or worker thread is left


def test_the_flags_column_is_in_view_in_a_1400_px_window(qtbot, make_window, tiny_plan) -> None:
    # seen: at 1400 px the long headers pushed the Flags column past the table's right edge, so a
    # point's flags could only be read after scrolling sideways
    win = make_window(tiny_plan)
    win.resize(1400, 900)
    _click(qtbot, win, win.start_action)
    qtbot.waitUntil(lambda: _finished(win) and win.review.run is not None, timeout=LONG_MS)
    win.tabs.setCurrentWidget(win.sweep_tab)
    qtbot.wait(50)
    view = win.point_list.view
    from app.ui.views.points import COLUMNS

    flags = COLUMNS.index("Flags")
    left = view.columnViewportPosition(flags)
    assert 0 <= left and left + 80 <= view.viewport().width(), (left, view.viewport().width())
    assert view.horizontalScrollBar().value() == 0
