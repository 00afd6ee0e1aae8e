"""Entry point of the window: build the QApplication, the main window, and run it.

The CLI checks for a display first (``app.commands.window.have_display``): Qt aborts the
whole process when no platform is usable.

Imports: PySide6 and ``app.ui.window``; the standard library otherwise.
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEMO_RIG = ROOT / "configs" / "demo-rig.toml"
DEMO_PLAN = ROOT / "configs" / "demo-ftf-plan.toml"


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
    code = int(app.exec())
    _dispose(win)
    return code


def _dispose(win: "object") -> None:
    """Delete the window through Qt's own deferred deletion (pyqtgraph's view registry and queued
    events learn of it), not by dropping the last Python reference."""
    from PySide6.QtCore import QCoreApplication, QEvent

    win.deleteLater()  # type: ignore[attr-defined]
    QCoreApplication.sendPostedEvents(None, QEvent.Type.DeferredDelete)
    QCoreApplication.processEvents()
