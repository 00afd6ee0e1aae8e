"""Entry point of the window: build the QApplication, the main window, and run it.

The CLI decides first whether the window can start at all (``app.commands.window`` with
``app.ui.preflight``): Qt aborts the whole process when no platform is usable.

SIGINT, SIGTERM and SIGHUP are routed by ``app.ui.stop_signals``: each one halts a running
sweep at once from the router's own thread (outputs to zero, as the halt button does), then
the window closes on the GUI thread (the engine stores the record in progress as
interrupted, the writer flushes) and the application quits; the process exits with 128 +
the signal number and a one-line message, never a traceback.

Imports: PySide6 and ``app.ui.window``; the standard library otherwise.
"""

from __future__ import annotations

import signal
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEMO_RIG = ROOT / "configs" / "demo-rig.toml"
DEMO_PLAN = ROOT / "configs" / "demo-ftf-plan.toml"
OPEN_LINE = "flamebode window: open; closing it, Ctrl-C, SIGTERM or SIGHUP halts any sweep (outputs to zero at once)"


def load_window_code() -> None:
    """Import everything the window needs (Qt, pyqtgraph, the views) without starting Qt.
    Importing never aborts; creating the application can (see ``app.ui.preflight``)."""
    from PySide6 import QtWidgets  # noqa: F401

    from . import window  # noqa: F401


def application_exists() -> bool:
    """A QApplication already runs in this process (tests): the platform is known to work."""
    if "PySide6.QtWidgets" not in sys.modules:
        return False
    from PySide6.QtWidgets import QApplication

    return QApplication.instance() is not None


def run_window(rig_path: str | Path | None = None, plan_path: str | Path | None = None,
               run_dir: str | Path | None = None, runs_root: str | Path = "runs", fast: bool | None = None,
               backend: str | None = None, start: bool = False) -> int:
    """Open the window (on the simulated burner by default) and run until it is closed.

    ``start`` presses Start as soon as the event loop runs (for tests and scripted rehearsals;
    the same refusals apply as to the button). ``backend`` and ``fast`` left as None take what
    the window remembered from its last launch (``app.ui.settings``), else the simulated burner
    in real time."""
    from PySide6.QtCore import QTimer
    from PySide6.QtWidgets import QApplication

    from .stop_signals import StopSignals
    from .window import MainWindow

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("flamebode")
    windows: list[MainWindow] = []

    def halt_now(signum: int) -> None:          # the router's thread, at once
        for w in windows:
            w.halt_now(f"{signal.Signals(signum).name} received")

    stops = StopSignals(act=halt_now, parent=app)
    stops.install()                # before the window: a signal during its construction is not lost
    try:
        from . import settings

        win = MainWindow(rig_path or DEMO_RIG, plan_path or DEMO_PLAN, runs_root=runs_root,
                         backend=backend or "simulated", fast=bool(fast))
        settings.restore(win, explicit={name for name, value in (("backend", backend), ("fast", fast),
                                                                 ("run", run_dir)) if value is not None})
        windows.append(win)

        def on_signal(signum: int) -> None:     # the GUI thread, when it gets there
            win.halt_and_quit(f"{signal.Signals(signum).name} received", 128 + signum)

        stops.received.connect(on_signal)
        if run_dir is not None:
            win.open_review(Path(run_dir))
        win.show()
        QTimer.singleShot(0, lambda: print(OPEN_LINE, flush=True))     # the event loop runs: signals are routed
        if start:
            QTimer.singleShot(0, win.start_sweep)
        code = int(app.exec())
        if win.exit_code is not None:
            win.close()            # already closed by the signal; harmless
            code = win.exit_code
            where = f"; the run is in {win.session.request.run_dir}" if win.session is not None else ""
            print(f"flamebode window: {win.quit_message}{where}", file=sys.stderr, flush=True)
        _dispose(win)
    finally:
        stops.uninstall()
        stops.deleteLater()
    return code


def _dispose(win: "object") -> None:
    """Delete the window through Qt's own deferred deletion (pyqtgraph's view registry and queued
    events learn of it), not by dropping the last Python reference."""
    from PySide6.QtCore import QCoreApplication, QEvent

    win.deleteLater()  # type: ignore[attr-defined]
    QCoreApplication.sendPostedEvents(None, QEvent.Type.DeferredDelete)
    QCoreApplication.processEvents()
