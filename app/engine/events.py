"""Events the sweep engine publishes, and the bus that delivers them to subscribers.

The engine never calls the front end or the file writer: it publishes these frozen
values and whoever cares subscribes (the run writer, the window's bridge, the headless
progress display). Subscribers are called synchronously on the engine's thread, so they
must only copy and enqueue; a subscriber that raises is reported once through
``EventBus.errors`` and never stops the sweep by itself.

A subscriber that stores points (the run writer) acknowledges each stored attempt by
calling ``EventBus.acknowledge(attempt_id, error=None)`` from its own thread; the engine
waits for that acknowledgement in its *store* step, so a point counts as kept only
once it is on disk.

Imports: standard library and numpy only.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np


@dataclass(frozen=True)
class Event:
    """Base of every event; ``wall_time_s`` is time.time() when it was made."""


@dataclass(frozen=True)
class SweepStarted(Event):
    run_label: str
    n_points: int
    backend: str
    identity: dict[str, str]
    plan: Any            # app.plan.Plan
    rig: Any             # app.rig.Rig
    wall_time_s: float = field(default_factory=time.time)


@dataclass(frozen=True)
class StateChanged(Event):
    old: str
    new: str
    point_index: int | None
    wall_time_s: float = field(default_factory=time.time)


@dataclass(frozen=True)
class DriveChanged(Event):
    freq_hz: float
    amplitude_v: float
    ceiling_v: float
    wall_time_s: float = field(default_factory=time.time)


@dataclass(frozen=True)
class BlockAcquired(Event):
    """A copy of one acquired block (the engine never reuses the array it hands out)."""

    data: np.ndarray          # (n_channels, n_samples) volts
    channels: tuple[str, ...]
    sample_rate_hz: float
    start_index: int
    stage: str                # state name while it was acquired
    point_index: int | None
    wall_time_s: float = field(default_factory=time.time)


@dataclass(frozen=True)
class TuningStep(Event):
    point_index: int
    step: int
    drive_v: float
    measured_ratio: float     # |u'|/u_mean at the reference plane, same peak/rms basis as the target
    target_ratio: float
    tolerance: float          # relative
    window_s: float
    within_tolerance: bool
    wall_time_s: float = field(default_factory=time.time)


@dataclass(frozen=True)
class PointSettled(Event):
    """A recorded and evaluated attempt, ready to be stored.

    ``record`` is the raw record (n_channels, n_samples) in volts, ``result`` the core's
    ``FtfPoint``, ``tuning`` a tuple of (drive_v, measured_ratio, window_s) steps and
    ``flags`` the quality and fault flags of this attempt. ``from_window_s`` > 0: the record
    begins with the samples of the accepted tuning window (the last of ``tuning``), this long,
    taken after the whole settle time and followed without a drive change (``timing.record_from_window``);
    the record is still the asked length, contiguous, at ``drive_v``.
    """

    attempt_id: str
    point_index: int
    freq_hz: float
    target_ratio: float
    drive_v: float
    record: np.ndarray
    channels: tuple[str, ...]
    sample_rate_hz: float
    result: Any               # app.core.response.FtfPoint
    tuning: tuple[tuple[float, float, float], ...]
    flags: tuple[str, ...]
    overflows: int
    identity: dict[str, str]
    started_wall_s: float
    recorded_wall_s: float = 0.0   # time.time() when the record's last block arrived
    wall_time_s: float = field(default_factory=time.time)
    from_window_s: float = 0.0     # the record's first seconds are the accepted tuning window's


@dataclass(frozen=True)
class TransferMeasured(Event):
    """The pre-scan's drive-to-velocity transfer at every plan frequency, or why there was none.

    ``ratio_per_volt`` is |u'_ref|/u_mean (peak) per peak volt of the line's drive, NaN where
    the line was lost in the noise; ``rel_sigma`` its relative standard uncertainty; ``phase_rad``
    arg(u'_ref / drive reference) where the rig records a drive reference, else NaN.
    ``skipped`` is empty when the pre-scan was made."""

    freqs_hz: tuple[float, ...]
    ratio_per_volt: tuple[float, ...]
    rel_sigma: tuple[float, ...]
    phase_rad: tuple[float, ...]
    duration_s: float              # drive-on time of the pre-scan (simulated time on a paced back-end)
    peak_drive_v: float            # largest peak of the multi-sine
    total_ratio: float             # Σ_k |u'_k|/u_mean at the last level (bound on the total forcing)
    levels: int
    skipped: str = ""
    wall_time_s: float = field(default_factory=time.time)


@dataclass(frozen=True)
class Notice(Event):
    """Something the operator should read that is neither a fault nor a result (e.g. the caution
    that a multi-sine survey measures the linear FTF only, or why it was not made)."""

    name: str
    message: str
    wall_time_s: float = field(default_factory=time.time)


@dataclass(frozen=True)
class FaultRaised(Event):
    name: str                 # stable fault name, e.g. "input-clipping"
    message: str              # what happened, in plain words, naming the channel/point
    action: str               # what the tool did ("drive ramped to zero; sweep aborted")
    advice: str               # what the operator can do
    point_index: int | None
    fatal: bool               # True: the sweep ends; False: the point is flagged and the sweep goes on
    wall_time_s: float = field(default_factory=time.time)


@dataclass(frozen=True)
class SweepFinished(Event):
    reason: str               # "complete", "stopped", "aborted", "halted", "fault"
    n_settled: int
    n_points: int
    detail: str = ""          # why, in plain words ("SIGTERM received", "halt button", the fault's name)
    wall_time_s: float = field(default_factory=time.time)


Subscriber = Callable[[Event], None]


class EventBus:
    """Synchronous publish/subscribe with store acknowledgements."""

    def __init__(self) -> None:
        self._subscribers: list[Subscriber] = []
        self._lock = threading.Lock()
        self._acks: dict[str, str | None] = {}
        self._ack_cond = threading.Condition(self._lock)
        self.errors: list[tuple[Subscriber, BaseException]] = []

    def subscribe(self, subscriber: Subscriber) -> Callable[[], None]:
        with self._lock:
            self._subscribers.append(subscriber)

        def unsubscribe() -> None:
            with self._lock:
                if subscriber in self._subscribers:
                    self._subscribers.remove(subscriber)

        return unsubscribe

    def publish(self, event: Event) -> None:
        with self._lock:
            subscribers = list(self._subscribers)
        for sub in subscribers:
            try:
                sub(event)
            except Exception as exc:  # a subscriber must not stop the sweep by itself
                if not any(s is sub for s, _ in self.errors):
                    self.errors.append((sub, exc))

    def acknowledge(self, attempt_id: str, error: str | None = None) -> None:
        """Called by a storing subscriber (any thread) once ``attempt_id`` is safely stored, or failed."""
        with self._ack_cond:
            self._acks[attempt_id] = error
            self._ack_cond.notify_all()

    def wait_ack(self, attempt_id: str, timeout_s: float) -> tuple[bool, str | None]:
        """(acknowledged, error) for ``attempt_id``; (False, None) after ``timeout_s``."""
        deadline = time.monotonic() + timeout_s
        with self._ack_cond:
            while attempt_id not in self._acks:
                left = deadline - time.monotonic()
                if left <= 0:
                    return False, None
                self._ack_cond.wait(left)
            return True, self._acks.pop(attempt_id)
