"""Entry point of the window: build the QApplication, the main window, and run it.

``have_display()`` tells the CLI whether a window can be opened at all (Qt aborts the
whole process when no platform is usable).

Imports: PySide6 and ``app.ui.window``; the standard library otherwise.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEMO_RIG = ROOT / "configs" / "demo-rig.toml"
DEMO_PLAN = ROOT / "configs" / "demo-ftf-plan.toml"


def have_display() -> bool:
    """A window can be shown: an X or Wayland display, or an explicit Qt platform."""
    return any(os.environ.get(k) for k in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM"))


def run_window(rig_path: str | Path | None = None, plan_path: str | Path | None = None,
               run_dir: str | Path | None = None, runs_root: str | Path = "runs", fast: bool = False,
               backend: str = "simulated") -> int:
    """Open the window (on the simulated burner by default) and run until it is closed."""
    from PySide6.QtWidgets import QApplication

    from .window import MainWindow

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("flamebode")
    win = MainWindow(rig_path or DEMO_RIG, plan_path or DEMO_PLAN, runs_root=runs_root, backend=backend, fast=fast)
    if run_dir is not None:
        win.open_review(Path(run_dir))
    win.show()
    return int(app.exec())
