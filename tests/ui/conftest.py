"""Fixtures for the window tests: a tiny plan and scenario in tmp_path, the window itself,
and an autouse guard that closes every window and fails a test that leaves a non-daemon
thread, a sweep/writer thread or a QThread running (a thread alive at teardown can abort the
whole test run: pytest-qt's documentation on threads).

Tests run under QT_QPA_PLATFORM=offscreen (set in tests/conftest.py).
"""

from __future__ import annotations

import gc
import threading
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
CONFIGS = ROOT / "configs"
OUR_DAEMONS = ("sweep-engine", "run-writer", "ui-")


def _live_threads() -> set[threading.Thread]:
    return {t for t in threading.enumerate() if t.is_alive() and t is not threading.main_thread()}


def _running_qthreads() -> list[object]:
    from PySide6.QtCore import QThread

    return [o for o in gc.get_objects() if isinstance(o, QThread) and o.isRunning()]


@pytest.fixture(autouse=True)
def no_threads_left(request: pytest.FixtureRequest):
    """Close windows after the test; then no new non-daemon thread, sweep thread or QThread may run."""
    before = _live_threads()
    yield
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance()
    if app is not None:
        from PySide6.QtCore import QEvent

        for w in app.topLevelWidgets():
            w.close()
            w.deleteLater()
        app.sendPostedEvents(None, QEvent.Type.DeferredDelete)
        app.processEvents()
    for t in _live_threads() - before:
        t.join(10.0)
    left = [t for t in _live_threads() - before
            if not t.daemon or t.name.startswith(OUR_DAEMONS)]
    assert not left, f"threads still running after the test: {[t.name for t in left]}"
    qthreads = _running_qthreads() if app is not None else []
    assert not qthreads, f"QThreads still running after the test: {qthreads}"


def write_plan(path: Path, scenario: Path, freqs: tuple[float, ...] = (200.0, 400.0, 600.0),
               amps: tuple[float, ...] = (0.05,), record: str = "0.5 s") -> Path:
    path.write_text(
        f'name = "ui test"\nrig = "{CONFIGS / "demo-rig.toml"}"\nscenario = "{scenario}"\n'
        f"[frequencies]\nvalues = {list(freqs)}\n"
        f'[amplitude]\nvalues = {list(amps)}\nbasis = "peak"\n'
        f'[timing]\nrecord = "{record}"\nsettle = "0.3 s"\ntuning_window = "0.3 s"\ntuning_discard = "0.05 s"\n',
        encoding="utf-8")
    return path


def write_scenario(path: Path, faults: str = "") -> Path:
    """The demo scenario with an absolute rig path and, optionally, a replaced [faults] table."""
    text = (CONFIGS / "demo-scenario.toml").read_text(encoding="utf-8")
    text = text.replace('rig = "demo-rig.toml"', f'rig = "{CONFIGS / "demo-rig.toml"}"')
    if faults:
        text = text[:text.index("[faults]")] + "[faults]\n" + faults + "\n"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture
def tiny_plan(tmp_path: Path) -> Path:
    return write_plan(tmp_path / "plan.toml", write_scenario(tmp_path / "scenario.toml"))


@pytest.fixture
def make_window(qtbot, tmp_path: Path):
    """make_window(plan_path, fast=True) -> MainWindow, shown, storing runs under tmp_path/runs."""
    from app.ui.window import MainWindow

    def make(plan_path: Path, fast: bool = True) -> MainWindow:
        win = MainWindow(CONFIGS / "demo-rig.toml", plan_path, runs_root=tmp_path / "runs", fast=fast)
        qtbot.addWidget(win)
        win.show()
        return win

    return make
