"""What every command that runs the sweep engine shares: opening the back-end through the
registry, waiting for the engine with Ctrl-C as a ramped abort (a second Ctrl-C halts at
once), SIGTERM as an immediate zero, and the clean-up that runs on every exit path.

Used by ``sweep``, ``resume`` and ``reacquire``. Must not import Qt.
"""

from __future__ import annotations

import signal
import sys
import threading
from pathlib import Path
from typing import Any, Callable

from drivers import safety
from drivers.registry import close_backend, open_backend

SIMULATED = "simulated"


def open_device(name: str, rig: Any, scenario: Path | None = None, fast: bool = False, seed: int | None = None) -> Any:
    """Open back-end ``name`` for ``rig`` (registered with drivers.safety by the registry)."""
    options: dict[str, Any] = {}
    if name == SIMULATED:
        options = {"scenario": str(scenario) if scenario else None, "real_time": not fast, "seed": seed}
    return open_backend(name, rig, **options)


def wait_for(engine: Any) -> None:
    """Wait for a started engine; Ctrl-C aborts (ramped), a second Ctrl-C halts at once."""
    interrupts = 0
    while True:
        try:
            if engine.join(0.25):
                return
        except KeyboardInterrupt:
            interrupts += 1
            if interrupts == 1:
                print("\ninterrupted: ramping the drive to zero; press Ctrl-C again to halt at once",
                      file=sys.stderr)
                engine.abort()
            else:
                engine.halt()


def run_engine(engine: Any, device: Any, closers: tuple[Callable[[], None], ...] = ()) -> str:
    """Run ``engine`` on its worker thread until it ends; always zero and close the device.

    ``closers`` (the progress display, the run writer) are closed after the engine has ended
    and before the device is released, whatever happened.
    """
    own_handlers = threading.current_thread() is threading.main_thread() and not safety.signal_handlers_installed()
    if own_handlers:
        safety.install_signal_handlers((signal.SIGTERM,))
    try:
        engine.start()
        wait_for(engine)
    finally:
        if not engine.join(30.0):
            engine.halt()
        for close in closers:
            close()
        close_backend(device)
        if own_handlers:
            safety.uninstall_signal_handlers()
    return engine.finish_reason or "fault"
