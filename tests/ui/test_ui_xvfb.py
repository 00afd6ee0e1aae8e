"""One check under a real X server (Xvfb, xcb platform) besides the offscreen tests: the
window opens, runs a short fast sweep to its end and closes (the offscreen platform hides
some X-only problems, e.g. missing xcb libraries; pytest-qt documentation). The start-up
probe must find that the window can start there, on the xcb platform."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

SCRIPT = """
import sys
from app.ui.preflight import Probe
verdict = Probe().verdict()
print("probe", verdict.ok, verdict.platform)
from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QApplication
from app.ui.window import MainWindow
app = QApplication([])
win = MainWindow(sys.argv[1], sys.argv[2], runs_root=sys.argv[3], fast=True)
win.show()
def poll():
    if win.sweeps_closed:
        print(app.platformName(), win.status.finish_reason, len(win.points.curves()[0.05]['freq_hz']))
        win.close()
        app.quit()
    else:
        QTimer.singleShot(50, poll)
win.start_sweep()
QTimer.singleShot(50, poll)
QTimer.singleShot(60000, app.quit)
app.exec()
"""


@pytest.mark.skipif(shutil.which("xvfb-run") is None, reason="xvfb-run is not installed")
def test_window_runs_a_sweep_under_xvfb(tiny_plan: Path, tmp_path: Path) -> None:
    from conftest import CONFIGS

    env = {k: v for k, v in os.environ.items() if k not in ("QT_QPA_PLATFORM", "DISPLAY", "WAYLAND_DISPLAY")}
    out = subprocess.run(["xvfb-run", "-a", sys.executable, "-c", SCRIPT, str(CONFIGS / "demo-rig.toml"),
                          str(tiny_plan), str(tmp_path / "runs")], env=env, capture_output=True, text=True,
                         timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    assert out.stdout.split()[-3:] == ["xcb", "complete", "3"], out.stdout + out.stderr[-2000:]
    assert "probe True xcb" in out.stdout
