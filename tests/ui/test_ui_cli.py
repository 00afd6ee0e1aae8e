"""``flamebode`` with no arguments: the window when a display exists, else the headless demo;
``flamebode window`` refuses plainly without a display (Qt would abort the process)."""

from __future__ import annotations

from pathlib import Path

from app.cli import main
from app.commands import window as window_command
from app.storage.reader import open_run

DISPLAY_VARS = ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM")


def test_no_arguments_without_display_runs_the_headless_demo(monkeypatch, tmp_path: Path, tiny_plan,
                                                              capsys) -> None:
    for var in DISPLAY_VARS:
        monkeypatch.delenv(var, raising=False)
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(window_command, "DEMO_PLAN", tiny_plan)      # the demo, shortened for the test
    assert main([]) == 0
    runs = sorted((tmp_path / "runs").iterdir())
    assert len(runs) == 1 and sorted(open_run(runs[0]).accepted()) == [0, 1, 2]
    out = capsys.readouterr().out
    assert f"the demo run is in {Path('runs') / runs[0].name}" in out
    assert "simulated burner" in out


def test_window_command_without_display_is_a_plain_error(monkeypatch, capsys) -> None:
    for var in DISPLAY_VARS:
        monkeypatch.delenv(var, raising=False)
    assert main(["window"]) == 2
    assert "no display" in capsys.readouterr().err


def test_no_arguments_with_a_display_opens_the_window_on_the_simulator(qapp, monkeypatch, tmp_path: Path) -> None:
    from PySide6.QtCore import QTimer
    from PySide6.QtWidgets import QApplication

    monkeypatch.setenv("QT_QPA_PLATFORM", "offscreen")
    monkeypatch.chdir(tmp_path)
    seen: list[str] = []

    def look_and_close() -> None:
        wins = [w for w in QApplication.topLevelWidgets() if w.isVisible() and hasattr(w, "sim_label")]
        if not wins:
            QTimer.singleShot(20, look_and_close)
            return
        seen.append(wins[0].sim_label.text())
        wins[0].close()

    QTimer.singleShot(0, look_and_close)
    assert main([]) == 0
    assert seen and "SIMULATED" in seen[0]
