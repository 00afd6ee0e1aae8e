"""The window remembers its layout and choices between launches, but never the safety checklist.

Launches are real: each is a child process running `flamebode window` offscreen (hidden
--start off), closed by SIGTERM once open; the settings live in the test's own
XDG_CONFIG_HOME (Qt keeps them in $XDG_CONFIG_HOME/flamebode/flamebode.ini on Linux).
Qt's QSettings is the store (common practice for Qt applications).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def _window(tmp_path: Path, code: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "FLAMEBODE_SETTINGS": "", "XDG_CONFIG_HOME": str(tmp_path / "config"),
           "QT_QPA_PLATFORM": "offscreen"}
    return subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True,
                          timeout=120)


FIRST = """
import sys
from PySide6.QtWidgets import QApplication
app = QApplication(sys.argv[:1])
from app.ui.window import MainWindow
from app.ui import settings
win = MainWindow("configs/demo-rig.toml", "configs/demo-ftf-plan.toml", runs_root=sys.argv[0])
settings.restore(win)
win.show(); app.processEvents()
win.resize(777, 555)
win.tabs.setCurrentIndex(1); app.processEvents()
win.setup.fast.setChecked(True)
win.setup.scenario.setText("configs/resonant-scenario.toml")
for box in win.setup.checks.values():
    box.setChecked(True)
split = [s for s in win.findChildren(__import__("PySide6.QtWidgets", fromlist=["QSplitter"]).QSplitter)
         if s.objectName() == "sweep-split"][0]
print("default", split.sizes())
split.setSizes([800, 100])
app.processEvents()
print("sizes", split.sizes())
win.tabs.setCurrentIndex(2); app.processEvents()
win.close()
from app.ui.app import _dispose
_dispose(win)
"""

SECOND = """
import sys
from PySide6.QtWidgets import QApplication, QSplitter
app = QApplication(sys.argv[:1])
from app.ui.window import MainWindow
from app.ui import settings
win = MainWindow("configs/demo-rig.toml", "configs/demo-ftf-plan.toml")
settings.restore(win, explicit=set(sys.argv[1:]))
win.show(); app.processEvents()
split = [s for s in win.findChildren(QSplitter) if s.objectName() == "sweep-split"][0]
print("size", win.width(), win.height())
print("tab", win.tabs.currentIndex())
print("fast", win.setup.fast.isChecked())
print("scenario", win.setup.scenario.text())
print("ticked", sum(b.isChecked() for b in win.setup.checks.values()))
win.tabs.setCurrentIndex(1); app.processEvents()
print("sizes", split.sizes())
win.close()
from app.ui.app import _dispose
_dispose(win)
"""


@pytest.mark.timeout(300)
def test_a_second_launch_comes_back_as_the_first_was_left(tmp_path: Path) -> None:
    first = _window(tmp_path, FIRST)
    assert first.returncode == 0, first.stderr[-2000:]
    assert (tmp_path / "config" / "flamebode" / "flamebode.ini").is_file()
    second = _window(tmp_path, SECOND)
    assert second.returncode == 0, second.stderr[-2000:]
    out = dict(line.split(" ", 1) for line in second.stdout.splitlines() if " " in line)
    assert out["size"] == "777 555"   # inside the offscreen screen: Qt keeps a restored window on screen
    assert out["tab"] == "2"                  # read before the test itself switched tabs
    assert out["fast"] == "True"
    assert out["scenario"] == "configs/resonant-scenario.toml"
    before = dict(line.split(" ", 1) for line in first.stdout.splitlines() if " " in line)
    assert before["sizes"] != before["default"]          # the first launch moved the splitter ...
    assert out["sizes"] == before["sizes"]               # ... and the second comes back with it
    assert out["ticked"] == "0"          # the safety checklist is never remembered


@pytest.mark.timeout(300)
def test_what_the_command_line_names_wins(tmp_path: Path) -> None:
    assert _window(tmp_path, FIRST).returncode == 0
    second = _window(tmp_path, SECOND.replace("explicit=set(sys.argv[1:])", "explicit={'fast'}"))
    out = dict(line.split(" ", 1) for line in second.stdout.splitlines() if " " in line)
    assert out["fast"] == "False" and out["tab"] == "2"


def test_a_remembered_back_end_that_is_not_here_and_a_vanished_run_are_ignored(qtbot, tmp_path: Path) -> None:
    from app.ui import settings
    from app.ui.window import MainWindow

    s = settings.store()
    s.setValue("setup/backend", "daqmx")                      # unavailable on this machine
    s.setValue("review/last_run", str(tmp_path / "gone"))     # deleted since
    s.sync()
    win = MainWindow(ROOT / "configs" / "demo-rig.toml", ROOT / "configs" / "demo-ftf-plan.toml",
                     runs_root=tmp_path / "runs")
    qtbot.addWidget(win)
    daqmx = [i for i in win.setup.backends if i.name == "daqmx"]
    if daqmx and daqmx[0].availability.available:
        pytest.skip("an NI-DAQmx runtime is installed here")
    settings.restore(win)
    assert win.setup.backend_name() == "simulated"
    assert win.last_run_dir is None
