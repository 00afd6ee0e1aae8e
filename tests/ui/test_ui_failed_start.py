"""A Start that fails (here: a scenario file that is not there) shows in the state line and in
the banner with what happened, what the tool did and what to do; not only in the status bar."""

from __future__ import annotations

from pathlib import Path


def test_a_failed_start_is_named_in_the_state_line_and_the_banner(make_window, tiny_plan, qtbot, tmp_path: Path):
    win = make_window(tiny_plan)
    win.setup.scenario.setText(str(tmp_path / "no-such-scenario.toml"))
    win.start_sweep()
    qtbot.waitUntil(lambda: win.status.state == "could not start", timeout=20000)
    qtbot.waitUntil(lambda: win.banner.isVisible(), timeout=5000)
    assert win.banner.title.text() == "Could not start the sweep"
    assert "no-such-scenario.toml" in win.banner.message.text()
    assert "nothing was driven" in win.banner.action.text()
    win._frame()
    assert "could not start" in win.state_label.text()
    assert win.tabs.currentWidget() is win.sweep_tab
