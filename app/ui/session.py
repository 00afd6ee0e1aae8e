"""One sweep driven from the window: back-end, run writer and engine, opened and closed on a
worker thread (never on the GUI thread).

It mirrors ``flamebode sweep``: the run writer subscribes to the bus before the engine
starts, the back-end is registered with the safety net, and closing joins the engine,
flushes the writer and stops the back-end. Re-acquiring points of a stored run uses the
run's own snapshots and back-end, as ``flamebode reacquire`` does.

Imports: the engine, plan/rig, the run services (``app.services.sweeps``: the run writer, a
run's back-end), the driver registry and the standard library. Never Qt (the window hands these
calls to its task runner) and never ``app.storage`` directly.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from app.engine.events import BlockAcquired, EventBus
from app.engine.sweep import SweepEngine
from app.errors import FlamebodeError
from app.plan import Plan, load_plan
from app.rig import Rig, load_rig


class SessionError(FlamebodeError):
    """A sweep cannot be started from the window (back-end, run folder...)."""


@dataclass
class SweepRequest:
    """What the window asks for: files, back-end, where to store, which points."""

    rig_path: Path
    plan_path: Path
    run_dir: Path
    backend: str = "simulated"
    scenario_path: Path | None = None
    fast: bool = False
    seed: int | None = None
    points: list[int] | None = None
    existing_run: bool = False     # re-acquire: append attempts to run_dir with its own snapshots
    yield_per_block_s: float = 0.0  # engine thread pauses this long after each block (0: never)


class GiveWay:
    """Bus subscriber, last in line: after each acquired block the engine's thread sleeps a
    little, so the GUI thread gets the interpreter lock at once instead of after a switch
    interval. Only worth it when the simulator runs faster than real time (1 ms per 0.1 s
    block costs a fast rehearsal ~10 % of its speed and shortens the GUI's worst pauses);
    in real time the back-end's own waits leave the GUI free anyway.
    """

    def __init__(self, seconds: float, sleep: Callable[[float], None] = time.sleep) -> None:
        self.seconds = float(seconds)
        self._sleep = sleep

    def __call__(self, event: Any) -> None:
        if isinstance(event, BlockAcquired):
            self._sleep(self.seconds)


class SweepSession:
    """Owns the device, writer and engine of one sweep."""

    def __init__(self, request: SweepRequest, subscriber: Callable[[Any], None]) -> None:
        self.request = request
        self.bus = EventBus()
        self.bus.subscribe(subscriber)
        self.device: Any = None
        self.writer: Any = None
        self.engine: SweepEngine | None = None
        self.rig: Rig | None = None
        self.plan: Plan | None = None
        self.closed = False
        self.final_drive_v: float | None = None
        self.halt_why: str | None = None     # set by halt(): no engine may start afterwards
        self._start_lock = threading.Lock()

    # -------------------------------------------------------------- any thread
    def halt(self, why: str = "emergency halt") -> None:
        """Outputs to zero at once (``SweepEngine.halt``), from the caller's thread.

        Also covers a sweep still being opened: once this has been called, ``open_and_start``
        never starts the engine, and an engine started just before is halted here."""
        with self._start_lock:
            self.halt_why = self.halt_why or why
            engine = self.engine
        if engine is not None:
            engine.halt(self.halt_why)

    # -------------------------------------------------------------- worker thread
    def open_and_start(self) -> "SweepSession":
        """Load files, open the back-end and the run writer, start the engine's thread."""
        from app.services import sweeps
        from drivers import safety

        req = self.request
        if self.halt_why is not None:
            raise SessionError(f"not started: halted before the sweep was opened ({self.halt_why})")
        self.rig = load_rig(req.rig_path)
        self.plan = load_plan(req.plan_path, self.rig)
        if req.existing_run:
            self.writer = sweeps.existing_run_writer(req.run_dir, self.bus)
        else:
            self.writer = sweeps.new_run_writer(req.run_dir, req.rig_path, req.plan_path, self.bus,
                                                scenario_path=req.scenario_path,
                                                options={"backend": req.backend, "fast": "1" if req.fast else "0",
                                                         "started_from": "window"})
        self.writer.start()
        self.bus.subscribe(self.writer)
        if req.yield_per_block_s > 0:
            self.bus.subscribe(GiveWay(req.yield_per_block_s))
        try:
            self.device = self._open_device()
            safety.register(self.device)      # harmless when the registry did it already
            label = time.strftime("w%Y%m%d-%H%M%S")
            with self._start_lock:
                if self.halt_why is not None:
                    raise SessionError(f"not started: halted while the sweep was being opened ({self.halt_why})")
                self.engine = SweepEngine(self.plan, self.rig, self.device, self.bus, backend_name=req.backend,
                                          run_label=label, wait_for_store=True, points=req.points)
                self.engine.start()
        except BaseException:
            self.close()
            raise
        return self

    def _open_device(self) -> Any:
        """The back-end through the registry (registered with the safety net there)."""
        from drivers.registry import open_backend

        req = self.request
        name, scenario, fast = req.backend, req.scenario_path, req.fast
        if req.existing_run:           # the run's own back-end and scenario snapshot, as `reacquire` does
            from app.services.sweeps import run_backend

            name, scenario = run_backend(Path(req.run_dir))
        options: dict[str, Any] = {}
        if name == "simulated":
            options = {"scenario": str(scenario) if scenario else None, "real_time": not fast, "seed": req.seed}
            if req.seed is None:   # the same simulated rig, new noise every sweep (as the command line does)
                import secrets

                options["noise_seed"] = secrets.randbits(31)
        return open_backend(name, self.rig, **options)

    def close(self, timeout_s: float = 30.0) -> str | None:
        """Join the engine (halting it if it does not end), flush the writer, stop the back-end."""
        from drivers import safety

        if self.closed:
            return self.engine.finish_reason if self.engine else None
        self.closed = True
        try:
            if self.engine is not None and not self.engine.join(timeout_s):
                self.engine.halt(self.halt_why or f"the sweep did not end within {timeout_s:g} s of closing")
                self.engine.join(10.0)
        finally:
            if self.writer is not None:
                self.writer.close()
            if self.device is not None:
                try:
                    self.final_drive_v = self._read_drive_v()
                    stop = getattr(self.device, "stop", None)
                    if callable(stop):
                        stop()
                finally:
                    safety.unregister(self.device)
        if self.engine is not None and self.engine.error is not None:
            raise SessionError(f"the sweep ended with an internal error: {self.engine.error!r}; "
                               f"the drive was brought to zero")
        return self.engine.finish_reason if self.engine else None

    def _read_drive_v(self) -> float | None:
        """What the output really does at the end (a halt publishes no drive event); None if unknown."""
        from drivers.errors import DriverError

        try:
            return float(self.device.drive_status().amplitude_v)
        except (DriverError, AttributeError):
            return None

    @property
    def storage_fault(self) -> str | None:
        return self.writer.fault if self.writer is not None else None
