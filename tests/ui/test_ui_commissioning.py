"""The set-up tab says what the rig's commissioning record lacks (docs/commissioning.md), beside the
pre-run checklist: a reminder that follows the record, never a reason to refuse Start."""

from __future__ import annotations

from pathlib import Path

from app.commissioning_record import Check, append_check, now_utc, record_path_for


def test_the_setup_tab_names_missing_commissioning_checks_and_follows_the_record(qtbot, make_window, tiny_plan):
    win = make_window(tiny_plan)
    rig_path = Path(win.setup.rig_editor.path)
    notes = win.setup.refresh_commissioning()
    assert any("no dark offset" in n for n in notes)
    assert "no dark offset" in win.setup.commissioning.text()
    results = {"dark-offset": {"mean_v": 0.021, "u_mean_v": 1e-6}, "light-linearity": {"slope_v_per_w": 1e-4},
               "pressure-calibration": {"file": "cal.toml"}}
    for kind, result in results.items():
        append_check(record_path_for(rig_path), "", Check(kind, now_utc(), "simulated", "", result))
    assert win.setup.refresh_commissioning() == []
    assert "recent" in win.setup.commissioning.text()
    assert win.start_action.isEnabled()            # a reminder only: the simulated sweep may start


def test_the_sensors_tab_draws_the_calibration_and_names_drifted_sensors(qtbot, tmp_path, demo_rig_path):
    # a rig naming a calibration file, and a record whose newest calibration says p3 drifted
    from app.ui.window import MainWindow
    from conftest import write_plan, write_scenario
    from test_calibration_file import _rig_naming, _write
    from app.rig import load_rig

    cal = _write(load_rig(demo_rig_path), tmp_path / "cal.toml")
    rig = _rig_naming(tmp_path, demo_rig_path)
    append_check(record_path_for(rig), "", Check("pressure-calibration", now_utc(), "simulated", "",
                                                 {"file": str(cal.resolve()), "drifted": ["p3"]}))
    plan = write_plan(tmp_path / "plan.toml", write_scenario(tmp_path / "s.toml"))
    win = MainWindow(rig, plan, runs_root=tmp_path / "runs", fast=True)
    qtbot.addWidget(win)
    win.show()
    win.tabs.setCurrentWidget(win.sensors)
    assert win.sensors.sensors == ("p1", "p2", "p3", "p4")
    assert win.sensors.drifted == ("p3",) and "Drifted since the previous calibration: p3" in win.sensors.caption.text()
    assert len(win.sensors.gain_plot.listDataItems()) == 4
    # a rig without a calibration says so in words
    win.setup.rig_editor.load(demo_rig_path)
    win.tabs.setCurrentIndex(0)
    win.tabs.setCurrentWidget(win.sensors)
    assert "names no calibration file" in win.sensors.caption.text() and win.sensors.sensors == ()
    assert win.sensors.layout_widget.isHidden()           # no empty plots with a 0-1 Hz axis
