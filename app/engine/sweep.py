"""The sweep engine: runs a plan on a back-end, step by step, publishing what happens.

Per point: preparing -> tuning (short windows, drive adjusted by the amplitude controller)
-> settling -> recording -> evaluating -> storing, then the next point; at the end the
drive is ramped to zero. Every state change goes through the table in ``states.py``.

Optional, when the plan asks for them: a transfer pre-scan before the first point
(``prescan``: a low multi-sine seeds the amplitude controller), a multi-sine survey of the
linear FTF (``survey``) and adaptive refinement after the plan's points (``refine``).

Commands (thread-safe, for a window or a signal handler on another thread):

* ``pause()`` takes effect at the next step boundary: the drive is ramped to zero and held
  there; ``resume()`` re-tunes the point (or starts the next one if paused between points).
  A record in progress is finished, evaluated and stored before the pause.
* ``stop()`` finishes the point in progress, then ends.
* ``abort()`` ends at the next block: the drive is ramped down now; stored points are kept.
* ``halt()`` zeroes the outputs at once from the caller's thread (EmergencyHalt when the
  back-end has it), then the engine ends.

All clean-up (drive to zero, final state, ``SweepFinished``) lives in the one ``finally``
of :meth:`SweepEngine.run`, which runs on every exit path. Waiting while paused uses a
``threading.Condition``, never a sleep loop. Every record and tuning window holds an
integer number of drive periods (to within one sample).

Imports: numpy, ``drivers.protocols`` / ``drivers.errors`` (protocols only, never a concrete
back-end), ``app.core.response`` (lazily), the plan/rig descriptions and this package.
Never Qt, never storage.
"""

from __future__ import annotations

import math
import threading
from collections import deque
import time
import uuid
from dataclasses import dataclass, field, replace
from typing import Any, Callable

import numpy as np

from app.core.point import FtfPoint
from app.core.quality import quality_flags
from app.errors import FlamebodeError
from drivers.errors import BackendTimeout, DriverError
from drivers.protocols import (Acquirer, Advisories, Armable, EmergencyHalt, Identified, OutputConfirmation,
                               SineDrive)

from . import states as S
from .controller import AmplitudeController, ControllerSettings, Decision, PointTuner
from .events import (BlockAcquired, DriveChanged, EventBus, FaultRaised, PointSettled, SweepFinished,
                     SweepStarted, TransferMeasured, TuningStep, Notice)
from .faults import FAULTS, Finding, SignalChecks, ended_action, fault_event
from .ramp import DriveChange, settle_credit


def integer_period_samples(freq_hz: float, sample_rate_hz: float, min_duration_s: float,
                           max_extra: float = 0.1) -> tuple[int, int]:
    """(periods, samples) for a window of at least ``min_duration_s`` holding a whole number of
    periods: among up to ``max_extra`` more periods, the count whose length in samples is
    closest to an integer (common practice: whole periods avoid leakage)."""
    p0 = max(1, math.ceil(min_duration_s * freq_hz - 1e-9))
    periods = np.arange(p0, p0 + max(1, int(p0 * max_extra)) + 1)
    exact = periods * sample_rate_hz / freq_hz
    err = np.abs(exact - np.round(exact))
    best = int(np.argmax(err <= err.min() + 1e-3))   # first one within a thousandth of the best
    return int(periods[best]), int(round(exact[best]))


OUTPUT_MONITOR_MEMORY_S = 1.0    # the output monitor compares with the largest command of this long


class _Halt(Exception):
    pass


class _Abort(Exception):
    pass


class _Stopped(Exception):
    pass


class _Fatal(Exception):
    def __init__(self, event: FaultRaised):
        super().__init__(event.message)
        self.event = event


class _Skip(Exception):
    """The point is skipped (flagged); the sweep goes on."""


@dataclass
class _Recording:
    """The record in progress: what is needed to store it as interrupted if it is cut short."""

    point: Any
    drive_v: float
    started_wall_s: float
    parts: list[np.ndarray] = field(default_factory=list)
    from_window_s: float = 0.0     # the record begins with the accepted tuning window, this long


@dataclass(frozen=True)
class _WindowHead:
    """A tuning window that began after the whole settle time: the record may start with it
    (``timing.record_from_window``) if it is accepted and the drive is not changed after it."""

    point_index: int
    drive_v: float
    requests: int                  # drive requests made before it (none may follow)
    samples: np.ndarray


@dataclass
class SweepStats:
    """Time accounting in samples (simulated time on a paced back-end)."""

    drive_on_samples: int = 0
    recorded_samples: int = 0
    sample_rate_hz: float = 1.0
    tuning_steps: list[int] = field(default_factory=list)   # windows per point, in order
    settled: int = 0

    @property
    def overhead(self) -> float:
        """(drive-on time - recording time) / recording time."""
        if self.recorded_samples == 0:
            return math.nan
        return (self.drive_on_samples - self.recorded_samples) / self.recorded_samples


class _Commands:
    """Operator commands, shared between the engine thread and callers."""

    def __init__(self) -> None:
        self.cond = threading.Condition(threading.RLock())
        self.pause = self.stop = self.abort = self.halt = False


class SweepEngine:
    """Runs one plan once. ``run()`` blocks; ``start()`` runs it on a worker thread.

    ``points`` restricts the run to those plan indices (re-acquiring or resuming a run);
    ``wait_for_store`` makes the store step wait for a storing subscriber's acknowledgement;
    ``prior`` is a (freq_hz, ratio per volt) table from an earlier run on the same rig, made
    ``prior_age_s`` seconds ago (None: unknown); a fresh one makes the pre-scan unnecessary.
    """

    def __init__(self, plan: Any, rig: Any, drive: SineDrive, bus: EventBus, *,
                 acquirer: Acquirer | None = None, controller: AmplitudeController | None = None,
                 prior: tuple[tuple[float, float], ...] = (), backend_name: str = "",
                 run_label: str = "", wait_for_store: bool = False, points: list[int] | None = None,
                 measure: Callable[..., Any] | None = None, evaluate: Callable[..., Any] | None = None,
                 prior_age_s: float | None = None):
        if not isinstance(drive, SineDrive):
            raise TypeError("the back-end cannot produce a sine drive (SineDrive)")
        self.plan, self.rig, self.bus = plan, rig, bus
        self.drive = drive
        self.acquirer = acquirer if acquirer is not None else drive
        if not isinstance(self.acquirer, Acquirer):
            raise TypeError("the back-end cannot acquire channels (Acquirer)")
        if measure is None or evaluate is None:
            from app.core import response
            measure = measure or response.measure_velocity
            evaluate = evaluate or response.evaluate_point
        self._measure, self._evaluate = measure, evaluate
        self.ceiling_v = plan.ceiling_v(rig)
        t = plan.tuning
        self.controller = controller or AmplitudeController(
            ControllerSettings(ceiling_v=self.ceiling_v, tolerance=t.tolerance, max_steps=t.max_steps,
                               first_drive_fraction=t.first_drive_fraction, max_step_factor=t.max_step_factor),
            prior=tuple(t.prior) + tuple(prior))
        self.backend_name, self.run_label = backend_name, run_label or time.strftime("run-%Y%m%d-%H%M%S")
        self.wait_for_store = wait_for_store
        self._all_points = plan.points()
        wanted = None if points is None else set(points)
        self.points = [p for p in self._all_points if wanted is None or p.index in wanted]
        self.checks = SignalChecks(rig, plan)
        self.stats = SweepStats()
        self.machine = S.StateMachine(bus.publish)
        self.finish_reason: str | None = None
        self.error: BaseException | None = None
        self.tuning_history: dict[int, tuple[tuple[float, float, float], ...]] = {}
        self._cmd = _Commands()
        self._why = ""                 # why the sweep was halted or aborted (for SweepFinished.detail)
        self._thread: threading.Thread | None = None
        self._ended = threading.Event()
        self._pending: np.ndarray | None = None
        self._channels: tuple[str, ...] = ()
        self._fs = 1.0
        self._drive_on = False
        self._freq_hz = 0.0
        self._drive_v = 0.0
        self._since_settled = 0
        self._change: DriveChange | None = None   # the last sine request, for the settle credit of its ramp
        self._requests = 0             # drive requests so far (a record from a window needs none after it)
        self._head: _WindowHead | None = None
        self._ramp_rate_v_per_s = float(rig.drive.ceiling) / float(rig.drive.ramp_time)
        self._overflows = 0
        self._point_index: int | None = None
        self._point_flags: list[str] = []
        self._recording: _Recording | None = None
        # commanded output envelope over the last second of blocks: what a back-end renders ahead
        # (a sound card's output lead, a card's queue) reaches the drive reference later
        monitor_blocks = max(4, math.ceil(OUTPUT_MONITOR_MEMORY_S / max(rig.acquisition.block_duration, 1e-3)))
        self._recent_drive_v: deque[float] = deque([0.0], maxlen=monitor_blocks)
        self._fatal_event: FaultRaised | None = None
        self._prior = tuple(t.prior) + tuple(prior)
        self._prior_age_s = prior_age_s
        self.transfer: TransferMeasured | None = None   # the pre-scan's result (or why it was skipped)
        self.auto_settle: Any = None        # settle.AutoSettle with ``timing.settle = "auto"``
        self._prescan_due = False
        self._surveyed: set[int] = set()     # points measured by the multi-sine survey
        self._refined: set[int] = set()      # points inserted by the refinement
        self._results: dict[int, Any] = {}   # point index -> its latest stored result (for refinement)

    # ================================================================== commands
    @property
    def state(self) -> str:
        return self.machine.state

    def pause(self) -> None:
        with self._cmd.cond:
            self._cmd.pause = True
            self._cmd.cond.notify_all()

    def resume(self) -> None:
        with self._cmd.cond:
            self._cmd.pause = False
            self._cmd.cond.notify_all()

    def stop(self) -> None:
        with self._cmd.cond:
            self._cmd.stop = True
            self._cmd.cond.notify_all()

    def abort(self, why: str = "abort requested") -> None:
        with self._cmd.cond:
            self._cmd.abort = True
            self._why = self._why or why
            self._cmd.cond.notify_all()

    def halt(self, why: str = "emergency halt") -> None:
        """Outputs to zero at once, from the caller's thread (a signal handler too); the engine then ends.

        The flag is raised first, then the back-end is halted; the back-end's guard latches, so
        whatever the engine's thread is doing can no longer bring the drive back. Never waits
        long on the engine: the wake-up of a paused engine is skipped if the lock is busy
        (the engine sees the flag at its next block anyway)."""
        self._cmd.halt = True
        self._why = self._why or why
        self._zero_now()
        if self._cmd.cond.acquire(timeout=0.2):
            try:
                self._cmd.cond.notify_all()
            finally:
                self._cmd.cond.release()

    def start(self) -> threading.Thread:
        self._ended.clear()
        self._thread = threading.Thread(target=self._run_quietly, name="sweep-engine", daemon=True)
        self._thread.start()
        return self._thread

    def join(self, timeout_s: float | None = None) -> bool:
        """Wait for a started sweep; True when it has ended.

        Waits on an event set by the worker as its very last step, not on Thread.join: a
        Ctrl-C that interrupts Thread.join can leave the thread looking finished while it
        still runs (CPython 3.11), and then the caller would close the writer under it.
        """
        if self._thread is None:
            return True
        if not self._ended.wait(timeout_s):
            return False
        self._thread.join(1.0)
        return True

    def _run_quietly(self) -> None:
        try:
            self.run()
        except BaseException as exc:  # kept for the caller; never raised on the worker thread
            self.error = exc
        finally:
            self._ended.set()

    # ================================================================== the run
    def run(self) -> str:
        """Run the whole plan; returns the finish reason (complete, stopped, aborted, halted, fault)."""
        reason = "fault"
        try:
            self._begin()
            if self._survey_possible():
                from .survey import Survey

                Survey(self).run()
            for point in self.points:
                if self._cmd.stop:
                    raise _Stopped()
                if point.index in self._surveyed:
                    continue
                self._measure_point(point)
            if self.plan.refinement.enabled and not self._cmd.stop:
                self._refine()
            reason = "stopped" if self._cmd.stop else "complete"
        except _Stopped:
            reason = "stopped"
        except _Abort:
            reason = "aborted"
        except _Halt:
            reason = "halted"
        except _Fatal as exc:
            reason = self._ending_reason() or self._fatal(exc.event)
        except BackendTimeout as exc:
            reason = self._ending_reason() or self._fatal(
                fault_event("backend-timeout", f"{exc} ({self._label()})", self._point_index))
        except DriverError as exc:     # a back-end may name its own fault kind (e.g. audio-server-lost)
            name = getattr(exc, "fault_name", "driver-error")
            reason = self._ending_reason() or self._fatal(
                fault_event(name if name in FAULTS else "driver-error", f"{exc} ({self._label()})",
                            self._point_index))
        except BaseException as exc:   # a bug or an interpreter exit: outputs to zero at once, then re-raise
            self._cmd.halt = True
            self._why = self._why or f"internal error: {exc!r}"
            reason = "halted"
            raise
        finally:
            self._finish(reason)
        return reason

    def _ending_reason(self) -> str | None:
        """'halted' or 'aborted' when an operator command is why the back-end or a check failed
        (a halted guard refuses the next request; a window cut short by a halt looks dead)."""
        if self._cmd.halt:
            return "halted"
        if self._cmd.abort:
            return "aborted"
        return None

    def _fatal(self, event: FaultRaised) -> str:
        """Keep a fatal fault to publish once the outputs are at zero (its action says how that went)."""
        self._fatal_event = event
        self._why = self._why or event.name
        return "fault"

    def _begin(self) -> None:
        identity = self.drive.identity() if isinstance(self.drive, Identified) else {}
        self.bus.publish(SweepStarted(run_label=self.run_label, n_points=len(self.points),
                                      backend=self.backend_name, identity=dict(identity),
                                      plan=self.plan, rig=self.rig))
        self._identity = dict(identity)
        self._set_state(S.PREPARING)
        for text in (self.drive.warnings if isinstance(self.drive, Advisories) else ()):
            self.bus.publish(fault_event("backend-warning", text, None))
        if isinstance(self.drive, Armable):     # clear a halt latch; the guard takes this sweep's ceiling
            self.drive.arm(self.ceiling_v)
        self.acquirer.start()
        self._channels = tuple(self.acquirer.channels)
        self._fs = float(self.acquirer.sample_rate_hz)
        self.stats.sample_rate_hz = self._fs
        missing = [c for c in self.rig.input_channels if c not in self._channels]
        if missing:
            raise DriverError(f"the back-end does not deliver channel(s) {', '.join(missing)} named in the rig")
        # drive off: the light level with a burning flame, and every sensor alive
        base = self._take(int(round(max(0.2, self.plan.timing.tuning_window) * self._fs)), S.PREPARING)
        self._react(self.checks.set_baseline(base, self._channels), skip_ok=False)
        if self.points:
            self._prescan(return_to=S.PREPARING)

    def _prescan(self, return_to: str) -> None:
        """The transfer pre-scan (``prescan``), or a TransferMeasured saying why there is none."""
        from . import prescan

        why = prescan.skip_reason(self.plan, self.drive, self._prior, self._prior_age_s)
        if why:
            self.transfer = TransferMeasured((), (), (), (), 0.0, 0.0, 0.0, 0, skipped=why)
        else:
            self._set_state(S.PRESCAN)
            self.transfer = prescan.PreScan(self).run()
            self._set_state(return_to)
        self.bus.publish(self.transfer)
        if self.plan.timing.settle_auto:
            self._update_auto_settle()

    def _update_auto_settle(self) -> None:
        """``settle = "auto"``: settle times from the pre-scan's decay (the plan's settle without one)."""
        from . import settle

        t, tr = self.plan.timing, self.transfer
        if tr is None or tr.skipped or not tr.freqs_hz:
            self.auto_settle = settle.no_measured_decay(t.settle)
        else:
            self.auto_settle = settle.auto_settle(tr.freqs_hz, tr.ratio_per_volt, tr.phase_rad, tr.rel_sigma, fallback_s=t.settle,
                                                  k=t.settle_k, min_periods=t.settle_min_periods,
                                                  floor_s=t.settle_floor)
        self.bus.publish(Notice("settle-auto", self.auto_settle.summary()))

    def settle_time_s(self, freq_hz: float) -> float:
        """The settle time at ``freq_hz``: the plan's, or with ``settle = "auto"`` the measured one."""
        t = self.plan.timing
        measured = self.auto_settle.at(freq_hz) if (t.settle_auto and self.auto_settle is not None) else None
        return t.settle_s(freq_hz) if measured is None else measured

    def _refine(self) -> None:
        """Adaptive refinement (``refine``): rounds of inserted points, up to the plan's budget; how
        many were inserted is said in a notice (also when none was)."""
        settings = self.plan.refinement
        left = settings.budget
        try:
            self._refine_rounds(settings, left)
        finally:
            n = len(self._refined)
            self.bus.publish(Notice("refinement", f"{n} of at most {settings.budget} points inserted"
                                    + ("" if n else " (no neighbours differ beyond the plan's thresholds and their "
                                                     "uncertainty)")))

    def _refine_rounds(self, settings: Any, left: int) -> None:
        from app.plan import PlanPoint

        from . import refine

        while left > 0 and not self._cmd.stop:
            new: list[Any] = []
            for amplitude in sorted({p.amplitude_ratio for p in self._all_points}):
                measured = [refine.from_result(r) for i, r in self._results.items()
                            if self._all_points[i].amplitude_ratio == amplitude]
                wanted = refine.candidates(measured, settings.model_copy(update={"budget": left - len(new)}),
                                           [p.freq_hz for p in self._all_points if p.amplitude_ratio == amplitude])
                peak = amplitude * self.plan.amplitude.to_peak
                for f in wanted:
                    new.append(PlanPoint(len(self._all_points) + len(new), f, amplitude, peak))
            if not new:
                return
            self._all_points.extend(new)
            for point in new:
                self._refined.add(point.index)
                self._measure_point(point)
                if self._cmd.stop:
                    return
            left -= len(new)

    def _survey_possible(self) -> bool:
        """True when the plan asks for the multi-sine survey and it can run; else said why (sines follow)."""
        if not self.plan.survey.enabled:
            return False
        from .survey import CAUTION, unavailable_reason

        why = unavailable_reason(self.plan, self.drive)
        if why:
            self.bus.publish(Notice("survey-unavailable", f"multi-sine survey not made: {why}; measuring with sines"))
            return False
        self.bus.publish(Notice("survey-linear-only", CAUTION))
        return True

    def _set_multisine(self, grid: Any, amplitudes_v: Any, phases_rad: Any) -> float:
        """Request a multi-sine (through the back-end's guard); returns its peak volts."""
        with self._cmd.cond:
            self._raise_if_ending()
            peak_v = float(self.drive.set_multisine(grid.period_samples, tuple(grid.harmonics),
                                                    tuple(float(a) for a in amplitudes_v),
                                                    tuple(float(p) for p in phases_rad)))
            self._change = None          # a multi-sine's ramp earns no settle credit
            self._requests += 1
            self._freq_hz, self._drive_v = grid.grid_hz, peak_v
            if peak_v > 0:
                self._drive_on = True
        self.bus.publish(DriveChanged(freq_hz=grid.grid_hz, amplitude_v=peak_v, ceiling_v=self.ceiling_v))
        return peak_v

    def _finish(self, reason: str) -> None:
        """The one clean-up: drive to zero (ramped, or at once on halt and after a driver error),
        the record in progress stored as interrupted, the fault published with what was really
        done to the output, final state, SweepFinished."""
        try:
            if not self._cmd.halt and reason not in ("halted",):
                if self.machine.state != S.WINDING_DOWN and self.machine.can_go(S.WINDING_DOWN):
                    self._set_state(S.WINDING_DOWN)
                try:
                    self._ramp_to_zero(S.WINDING_DOWN)
                except (DriverError, _Fatal, _Skip, _Halt, _Abort):
                    self._zero_now()      # the ramp could not be carried out: zero at once
        finally:
            self._drive_on = False
            if self._cmd.halt or reason == "halted":
                self._zero_now()
                reason = "halted"
            confirmed = self._confirm_zero()
            if self._fatal_event is not None:
                ev = self._fatal_event
                self.bus.publish(replace(ev, action=ended_action(confirmed)))
            elif not confirmed:
                self.bus.publish(fault_event("output-unconfirmed", f"after the sweep ended ({reason}) the back-end "
                                             f"could not confirm its output at zero", self._point_index))
            self._store_interrupted(reason)
            final = {"complete": S.FINISHED, "stopped": S.FINISHED, "aborted": S.ABORTED,
                     "halted": S.HALTED, "fault": S.FAULTED}[reason]
            if self.machine.state not in S.TERMINAL:
                if not self.machine.can_go(final):
                    self.machine.set(S.WINDING_DOWN, self._point_index)
                self.machine.set(final, self._point_index)
            self.finish_reason = reason
            self.bus.publish(SweepFinished(reason=reason, n_settled=self.stats.settled, n_points=len(self.points),
                                           detail=self._why))

    def _confirm_zero(self, wait_s: float = 0.5) -> bool:
        """True when the back-end reports its output at zero (polled briefly: a card's queue drains)
        and, where it can say so (OutputConfirmation), the instrument has confirmed it."""
        deadline = time.monotonic() + wait_s
        while True:
            try:
                status = self.drive.drive_status()
                confirmed = (self.drive.output_confirmed_off if isinstance(self.drive, OutputConfirmation)
                             else True)
                if status.amplitude_v == 0.0 and status.target_amplitude_v == 0.0 and confirmed:
                    return True
            except DriverError:
                return False
            if time.monotonic() >= deadline:
                return False
            time.sleep(0.02)

    def _store_interrupted(self, reason: str) -> None:
        """A record cut short (halt, abort, fatal fault) is stored as evidence, flagged
        ``interrupted`` (never accepted). Its partial data are evaluated where they can be."""
        rec, self._recording = self._recording, None
        if rec is None or not rec.parts:
            return
        data = np.concatenate(rec.parts, axis=1)
        cause = self._fatal_event.name if self._fatal_event is not None else reason
        result = None
        try:
            result = self._evaluate(data, self._channels, self._fs, rec.point.freq_hz, self.rig)
        except Exception:       # too short or no flame: the raw record is the evidence
            result = None
        attempt_id = f"{self.run_label}-point{rec.point.index + 1:04d}-{uuid.uuid4().hex[:8]}"
        flags = tuple(dict.fromkeys(["interrupted", cause] + self._point_flags))
        self.bus.publish(PointSettled(
            attempt_id=attempt_id, point_index=rec.point.index, freq_hz=rec.point.freq_hz,
            target_ratio=rec.point.amplitude_ratio, drive_v=rec.drive_v, record=data, channels=self._channels,
            sample_rate_hz=self._fs, result=result, tuning=self.tuning_history.get(rec.point.index, ()),
            flags=flags, overflows=self._overflows, identity=getattr(self, "_identity", {}),
            started_wall_s=rec.started_wall_s, recorded_wall_s=time.time(), from_window_s=rec.from_window_s))
        if self.wait_for_store:    # briefly: a halted process must exit within seconds
            self.bus.wait_ack(attempt_id, min(1.5, self.plan.faults.store_timeout))

    # ================================================================== one point
    def _measure_point(self, point: Any) -> None:
        self._point_index = point.index
        self._point_flags = []
        self._set_state(S.PREPARING)
        self._boundary(resume_to=S.PREPARING)
        attempt_start = time.time()
        try:
            drive_v = self._tune_and_settle(point)
        except _Skip:
            self.stats.tuning_steps.append(len(self._tuner.history))
            return
        self.stats.tuning_steps.append(len(self._tuner.history))
        self._set_state(S.RECORDING)
        _, n_record = integer_period_samples(point.freq_hz, self._fs, self.plan.timing.record, max_extra=0.01)
        head = self._record_head(point, drive_v)
        if head is None:
            self._recording = _Recording(point, drive_v, attempt_start)
            record = self._take(n_record, S.RECORDING)
        else:     # the accepted window's samples, then the rest: contiguous, at the same drive
            self._recording = _Recording(point, drive_v, attempt_start, parts=[head],
                                         from_window_s=head.shape[1] / self._fs)
            record = np.concatenate([head, self._take(n_record - head.shape[1], S.RECORDING)], axis=1)
        self.stats.recorded_samples += n_record
        recorded_wall_s = time.time()
        self._react(self.checks.check_window(record, self._channels, drive_v, f"record of {self._label()}"))
        self._set_state(S.EVALUATING)
        self._recording = None     # complete: from here on it is stored (or flagged) as a whole record
        result = self._evaluate_record(point, record)
        if result is None:
            return
        self._set_state(S.STORING)
        self._store(point, drive_v, record, result, attempt_start, recorded_wall_s,
                    from_window_s=0.0 if head is None else head.shape[1] / self._fs)
        self._boundary(resume_to=S.PREPARING)

    def _tune_and_settle(self, point: Any) -> float:
        """Tune, then settle; a pause in between re-tunes. Returns the drive voltage to record at."""
        self._set_state(S.TUNING)
        while True:
            if self._prescan_due:         # paused for long: the speaker and the flame may have changed
                self._prescan_due = False
                self._prescan(return_to=S.TUNING)
            self._tuner = self.controller.start_point(point.freq_hz, point.peak_ratio)
            decision = self._tune(point)
            if decision is None:          # paused and resumed: tune again
                continue
            drive_v = self._act_on(decision, point)
            self._set_state(S.SETTLING)
            self._settle(point, drive_v)
            if self._boundary(resume_to=S.TUNING):
                continue
            return drive_v

    def _tune(self, point: Any) -> Decision | None:
        tuner: PointTuner = self._tuner
        drive_v = tuner.first_drive()
        self._head = None
        while True:
            estimate, window_s = self._tuning_window(point, drive_v, settled=not tuner.history)
            ratio = float(estimate.amplitude_ratio)
            if not ratio < self.controller.settings.noise_sigmas * float(estimate.sigma_ratio):
                self.controller.learn(point.freq_hz, point.peak_ratio, drive_v, ratio)
            decision = tuner.update(drive_v, ratio, window_s, float(estimate.sigma_ratio))
            k = self.plan.amplitude.to_peak
            self.bus.publish(TuningStep(point_index=point.index, step=len(tuner.history), drive_v=drive_v,
                                        measured_ratio=ratio / k, target_ratio=point.amplitude_ratio,
                                        tolerance=self.plan.tuning.tolerance, window_s=window_s,
                                        within_tolerance=decision.kind == "converged"))
            self.tuning_history[point.index] = tuple((s.drive_v, s.measured_ratio / k, s.window_s)
                                                     for s in tuner.history)
            if decision.kind != "measure":
                return decision
            self._head = None            # a window that was not accepted starts no record
            if self._boundary(resume_to=S.TUNING):
                return None
            drive_v = decision.drive_v

    def _tuning_window(self, point: Any, drive_v: float, settled: bool = False) -> tuple[Any, float]:
        """One tuning window at ``drive_v``; with ``settled`` (a point's first window) it may wait
        the whole settle first so that an accepted window can begin the record (``_may_head``)."""
        timing = self.plan.timing
        self._set_drive(point.freq_hz, drive_v)
        self._wait_drive_settled(S.TUNING)
        self._discard(int(round(timing.tuning_discard * self._fs)), S.TUNING)
        _, n = integer_period_samples(point.freq_hz, self._fs, timing.tuning_window)
        head = settled and self._may_head(point, n)
        if head:
            self._discard(int(round(self.settle_time_s(point.freq_hz) * self._fs)) - self._settled_samples(),
                          S.TUNING)
        window = self._take(n, S.TUNING)
        if head:
            self._head = _WindowHead(point.index, drive_v, self._requests, window)
        where = f"tuning {self._label()}"
        self._react(self.checks.check_window(window, self._channels, drive_v, where))
        estimate = self._measure(window, self._channels, self._fs, point.freq_hz, self.rig)
        self._react(self.checks.check_pressure(float(estimate.pressure_peak_pa), where)
                    + self.checks.check_response(estimate, drive_v, self.ceiling_v, where))
        return estimate, n / self._fs

    def _may_head(self, point: Any, n_window: int) -> bool:
        """True when the plan lets a record begin with its accepted first window and waiting the
        settle before that window costs little: what is left of it then is no longer than the tuning
        discard and half a window (else the settle after the window would cover it anyway, and a
        window that misses would have waited for nothing)."""
        t = self.plan.timing
        _, n_record = integer_period_samples(point.freq_hz, self._fs, t.record, max_extra=0.01)
        left = self.settle_time_s(point.freq_hz) * self._fs - self._settled_samples()
        return t.record_from_window and n_window <= n_record and left <= 0.5 * n_window

    def _record_head(self, point: Any, drive_v: float) -> np.ndarray | None:
        """The accepted window the record begins with, or None (not asked, not accepted, drive changed)."""
        head, self._head = self._head, None
        if (head is None or head.point_index != point.index or head.requests != self._requests
                or not math.isclose(head.drive_v, drive_v, rel_tol=1e-12)):
            return None
        return head.samples

    def _act_on(self, decision: Decision, point: Any) -> float:
        """The voltage to record at; flags and skips per the plan for unreachable/not converged."""
        if decision.kind == "converged":
            return decision.drive_v
        name = "target-unreachable" if decision.kind == "unreachable" else "tuning-not-converged"
        message = f"{self._label()}: {decision.reason}"
        if name == "target-unreachable" and self.plan.tuning.when_unreachable == "skip":
            self._publish_finding(Finding(name, message), action="point skipped and flagged; sweep continues")
            self._set_drive(point.freq_hz, 0.0)
            self._set_state(S.PREPARING)
            raise _Skip()
        action = ("recorded at the ceiling; point flagged" if name == "target-unreachable"
                  else "recorded at the closest voltage found; point flagged")
        self._publish_finding(Finding(name, message), action=action)
        if not math.isclose(decision.drive_v, self._drive_v, rel_tol=1e-9):
            self._set_drive(point.freq_hz, decision.drive_v)
            self._wait_drive_settled(S.TUNING)
        return decision.drive_v

    def _settle(self, point: Any, drive_v: float) -> None:
        """Wait what is left of the settle time since the drive began its final approach (the ramp at the
        new frequency, the rest of its last block and the last window count; see ``ramp.py``)."""
        left = int(round(self.settle_time_s(point.freq_hz) * self._fs)) - self._settled_samples()
        if left > 0:
            self._discard(left, S.SETTLING)

    def _settled_samples(self) -> int:
        """Samples from the start of the drive's final approach to the next sample a take returns:
        those read since, less the ones read but not yet taken (held back from the last block)."""
        held = 0 if self._pending is None else self._pending.shape[1]
        return max(0, self._since_settled - held)

    def _evaluate_record(self, point: Any, record: np.ndarray) -> FtfPoint | None:
        try:
            result = self._evaluate(record, self._channels, self._fs, point.freq_hz, self.rig)
        except (ArithmeticError, ValueError, np.linalg.LinAlgError, FlamebodeError) as exc:
            self._publish_finding(Finding("evaluation-failed", f"{self._label()}: {exc}"))
            return None
        self._react(self.checks.check_result(result, f"record of {self._label()}"), skip_ok=False)
        achieved = float(result.velocity.amplitude_ratio)
        self.controller.learn(point.freq_hz, point.peak_ratio, self._drive_v, achieved)
        if abs(achieved / point.peak_ratio - 1.0) > self.plan.tuning.tolerance:
            self._point_flags.append("amplitude-off-target")
        return result

    def _store(self, point: Any, drive_v: float, record: np.ndarray, result: FtfPoint, started_wall_s: float,
               recorded_wall_s: float, from_window_s: float = 0.0) -> None:
        flags = tuple(dict.fromkeys(self._point_flags + list(quality_flags(result.quality, self.plan.quality))))
        if point.index in self._refined:
            flags += ("refined",)
        self._results[point.index] = result
        attempt_id = f"{self.run_label}-point{point.index + 1:04d}-{uuid.uuid4().hex[:8]}"
        self.bus.publish(PointSettled(
            attempt_id=attempt_id, point_index=point.index, freq_hz=point.freq_hz,
            target_ratio=point.amplitude_ratio, drive_v=drive_v, record=record, channels=self._channels,
            sample_rate_hz=self._fs, result=result, tuning=self.tuning_history.get(point.index, ()),
            flags=flags, overflows=self._overflows, identity=self._identity, started_wall_s=started_wall_s,
            recorded_wall_s=recorded_wall_s, from_window_s=from_window_s))
        self._overflows = 0
        if self.wait_for_store:
            acked, error = self.bus.wait_ack(attempt_id, self.plan.faults.store_timeout)
            if not acked or error:
                why = error or f"no acknowledgement within {self.plan.faults.store_timeout:g} s"
                raise _Fatal(fault_event("store-failed", f"{self._label()} was not stored: {why}", point.index))
        self.stats.settled += 1

    # ================================================================== faults and boundaries
    def _react(self, findings: list[Finding], skip_ok: bool = True) -> None:
        """Publish each finding once per point; fatal ones end the sweep, pressure-too-high skips.

        After a halt or abort nothing is reported: a window cut short by the operator is not a fault."""
        self._raise_if_ending()
        skip = False
        for f in findings:
            if f.fatal:
                raise _Fatal(fault_event(f.name, f.message, self._point_index))
            if f.name == "pressure-too-high" and skip_ok:
                skip = True
                continue
            if f.name not in self._point_flags:
                self._publish_finding(f)
        if skip:
            first = next(f for f in findings if f.name == "pressure-too-high")
            self._publish_finding(first)
            self._set_drive(self._freq_hz, 0.0)
            self._set_state(S.PREPARING)
            raise _Skip()

    def _publish_finding(self, finding: Finding, action: str | None = None) -> None:
        if finding.name not in self._point_flags:
            self._point_flags.append(finding.name)
        self.bus.publish(fault_event(finding.name, finding.message, self._point_index, action))

    def _raise_if_ending(self) -> None:
        if self._cmd.halt:
            raise _Halt()
        if self._cmd.abort:
            raise _Abort()

    def _boundary(self, resume_to: str) -> bool:
        """A step boundary: act on halt/abort; on pause, hold the drive at zero until resumed.

        Returns True when the sweep was paused here (the caller re-tunes)."""
        self._raise_if_ending()
        if not self._cmd.pause:
            return False
        self._ramp_to_zero(S.PAUSED)      # first: "paused" means the drive is at zero
        self._set_state(S.PAUSED)
        paused_at = time.monotonic()
        with self._cmd.cond:
            while self._cmd.pause and not (self._cmd.halt or self._cmd.abort or self._cmd.stop):
                self._cmd.cond.wait()
        if (self.transfer is not None and not self.transfer.skipped
                and time.monotonic() - paused_at > self.plan.prescan.repeat_after):
            self._prescan_due = True
        self._raise_if_ending()
        if self._cmd.stop:
            raise _Stopped()
        self._set_state(resume_to)
        return True

    # ================================================================== drive and samples
    def _set_state(self, new: str) -> None:
        if self.machine.state != new:
            self.machine.set(new, self._point_index)

    def _set_drive(self, freq_hz: float, amplitude_v: float) -> None:
        with self._cmd.cond:
            self._raise_if_ending()
            now = self.drive.drive_status()
            self.drive.set_drive(freq_hz, amplitude_v)
            self._change = DriveChange(now.freq_hz, now.amplitude_v, freq_hz, amplitude_v)
            self._requests += 1
            self._freq_hz, self._drive_v = freq_hz, amplitude_v
            if amplitude_v > 0:
                self._drive_on = True
        self.bus.publish(DriveChanged(freq_hz=freq_hz, amplitude_v=amplitude_v, ceiling_v=self.ceiling_v))

    def _zero_now(self) -> None:
        """Outputs to zero without a ramp (EmergencyHalt), or the quickest request the back-end has."""
        try:
            if isinstance(self.drive, EmergencyHalt):
                self.drive.halt()
            elif self._freq_hz > 0:
                self.drive.set_drive(self._freq_hz, 0.0)
        except DriverError:
            pass
        self._drive_v = 0.0
        self.bus.publish(DriveChanged(freq_hz=self._freq_hz, amplitude_v=0.0, ceiling_v=self.ceiling_v))

    def _ramp_to_zero(self, stage: str) -> None:
        status = self.drive.drive_status()
        if status.amplitude_v == 0.0 and status.target_amplitude_v == 0.0:
            return
        freq = status.freq_hz if status.freq_hz > 0 else self._freq_hz
        self.drive.set_drive(freq, 0.0)
        self._drive_v = 0.0
        self.bus.publish(DriveChanged(freq_hz=freq, amplitude_v=0.0, ceiling_v=self.ceiling_v))
        self._wait_drive_settled(stage, check_commands=False)
        self._drive_on = False

    def _wait_drive_settled(self, stage: str, check_commands: bool = True) -> None:
        """Read (and publish) blocks until the back-end says the ramp is over."""
        limit = int((2.0 * self.rig.drive.ramp_time + 2.0) * self._fs)
        waited = last = 0
        while True:
            status = self.drive.drive_status()
            if not status.ramping and math.isclose(status.amplitude_v, self._drive_v, abs_tol=1e-9):
                break
            if waited > limit:
                raise _Fatal(fault_event("drive-not-answering", f"the drive did not reach {self._drive_v:.3g} V "
                                         f"within {limit / self._fs:.1f} s ({self._label()})", self._point_index))
            last = self._read_block(stage, check_commands).shape[1]
            waited += last
        # the ramp at the new frequency and the rest of its last block count as settling (ramp.py)
        change, self._change = self._change, None
        self._since_settled = settle_credit(change, waited, last, self._fs, self._ramp_rate_v_per_s)

    def _read_block(self, stage: str, check_commands: bool = True) -> np.ndarray:
        if check_commands:
            self._raise_if_ending()
        block = self.acquirer.read_block(self.plan.faults.backend_timeout)
        data = np.array(block.data, dtype=np.float64, copy=True)
        if data.ndim != 2 or data.shape[0] != len(self._channels):
            raise DriverError(f"the back-end delivered a block of shape {data.shape}, expected "
                              f"({len(self._channels)}, n)")
        self._overflows += int(block.overflows)
        if self._drive_on:
            self.stats.drive_on_samples += data.shape[1]
        self._since_settled += data.shape[1]
        if stage == S.RECORDING and self._recording is not None:
            self._recording.parts.append(data)    # kept even if a check below ends the sweep
        self.bus.publish(BlockAcquired(data=data, channels=self._channels, sample_rate_hz=self._fs,
                                       start_index=int(block.start_index), stage=stage,
                                       point_index=self._point_index))
        self._recent_drive_v.append(float(self.drive.drive_status().amplitude_v))
        findings = self.checks.check_block(data, self._channels, f"{stage}, {self._label()}",
                                           commanded_v=max(self._recent_drive_v), ceiling_v=self.ceiling_v,
                                           gap=int(block.overflows) > 0)
        if findings and (check_commands or any(f.name.startswith("output-") for f in findings)):
            self._react(findings)        # the output monitor acts even while ramping down
        return data

    def _take(self, n: int, stage: str) -> np.ndarray:
        """The next ``n`` samples of every channel, across block boundaries."""
        parts, have = [], 0
        if self._pending is not None:
            parts.append(self._pending)
            if stage == S.RECORDING and self._recording is not None:
                self._recording.parts.append(self._pending)
            have = self._pending.shape[1]
            self._pending = None
        while have < n:
            data = self._read_block(stage)
            parts.append(data)
            have += data.shape[1]
        joined = np.concatenate(parts, axis=1) if len(parts) > 1 else parts[0]
        if joined.shape[1] > n:
            self._pending = joined[:, n:].copy()
        return np.ascontiguousarray(joined[:, :n])

    def _discard(self, n: int, stage: str) -> None:
        if n > 0:
            self._take(n, stage)

    def _label(self) -> str:
        if self._point_index is None:
            return "before the first point"
        p = self._all_points[self._point_index]
        return f"point {p.index + 1} of {len(self._all_points)} at {p.freq_hz:g} Hz, a = {p.amplitude_ratio:g}"
