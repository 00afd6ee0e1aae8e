"""What every command that runs the sweep engine shares: opening the back-end through the
registry, waiting for the engine with SIGINT (Ctrl-C), SIGTERM and SIGHUP as an emergency
halt (outputs to zero at once, the record in progress kept as interrupted), and the clean-up
that runs on every exit path.

Used by ``sweep``, ``resume`` and ``reacquire``. Must not import Qt.
"""

from __future__ import annotations

import signal
import threading
from pathlib import Path
from typing import Any, Callable

from app.errors import FlamebodeError
from drivers import safety
from drivers.registry import close_backend, open_backend

SIMULATED = "simulated"
STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


def open_device(name: str, rig: Any, scenario: Path | None = None, fast: bool = False, seed: int | None = None) -> Any:
    """Open back-end ``name`` for ``rig`` (registered with drivers.safety by the registry)."""
    options: dict[str, Any] = {}
    if name == SIMULATED:
        options = {"scenario": str(scenario) if scenario else None, "real_time": not fast, "seed": seed}
        if seed is None:   # the same simulated rig, new noise every sweep (a re-acquire is a new measurement)
            import secrets

            options["noise_seed"] = secrets.randbits(31)
    return open_backend(name, rig, **options)


class StoppedBySignal(FlamebodeError):
    """The sweep was halted by a signal; the command exits with 128 + the signal's number."""

    def __init__(self, signum: int, reason: str):
        self.signum = signum
        self.exit_code = 128 + signum
        name = signal.Signals(signum).name
        super().__init__(f"{name} received: outputs zeroed at once, the record in progress kept as interrupted, "
                         f"every stored point kept (sweep {reason})")


class StopSignals:
    """SIGINT, SIGTERM and SIGHUP halt the engine: outputs to zero at once, no traceback.

    The handler first zeroes every registered output lock-free (drivers.safety), then halts
    the engine (its guard latches, so nothing can ask for drive again), and returns: the
    main thread's wait sees the engine end, the closers run, and the command exits. A signal
    that was ignored when the command started (SIGINT in a background job, SIGHUP under
    nohup) stays ignored: such a job is stopped with SIGTERM.
    """

    def __init__(self, engine: Any) -> None:
        self.engine = engine
        self.received: int | None = None
        self._previous: dict[int, Any] = {}

    def _handler(self, signum: int, frame: Any) -> None:
        safety.halt_all()
        if self.received is None:
            self.received = signum
        self.engine.halt(f"{signal.Signals(signum).name} received")

    def __enter__(self) -> "StopSignals":
        if threading.current_thread() is threading.main_thread():
            for signum in STOP_SIGNALS:
                current = signal.getsignal(signum)
                if current == signal.SIG_IGN:
                    continue
                self._previous[signum] = current
                signal.signal(signum, self._handler)
        return self

    def __exit__(self, *exc: Any) -> None:
        for signum, previous in self._previous.items():
            signal.signal(signum, previous if previous is not None else signal.SIG_DFL)
        self._previous.clear()


def wait_for(engine: Any) -> None:
    """Wait for a started engine (a signal handler halts it meanwhile)."""
    while not engine.join(0.25):
        pass


def run_engine(engine: Any, device: Any, closers: tuple[Callable[[], None], ...] = ()) -> str:
    """Run ``engine`` on its worker thread until it ends; always zero and close the device.

    ``closers`` (the progress display, the run writer) are closed after the engine has ended
    and before the device is released, whatever happened. Raises :class:`StoppedBySignal`
    when a signal halted the sweep (after everything is closed).
    """
    with StopSignals(engine) as stops:
        try:
            engine.start()
            wait_for(engine)
        except BaseException as exc:
            engine.halt(f"internal error in the command: {exc!r}")
            raise
        finally:
            if not engine.join(5.0):
                engine.halt("the sweep did not end within 5 s of being stopped")
                engine.join(5.0)
            for close in closers:
                close()
            close_backend(device)
    if stops.received is not None:
        raise StoppedBySignal(stops.received, engine.finish_reason or "halted")
    return engine.finish_reason or "fault"
