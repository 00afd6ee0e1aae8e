"""Qt-free models behind the window: trace ring buffers, the point table, the tuning history,
the response curve and the sweep status.

Widgets are thin: they read these models (on a ~30 Hz timer or when notified) and draw.
Models are fed on the GUI thread by the window from the bridge's queued signals, so they
need no locks; every accessor returns copies, never an array a model still writes into.
The one exception is ``LiveTraces``: the bridge feeds it on the engine's thread (a copy into
a preallocated ring), so it holds a lock and the GUI thread only takes a snapshot per frame.

Imports: standard library, numpy and the engine's event types only. Never Qt or pyqtgraph.
"""

from __future__ import annotations

import math
import threading
import time
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from app.engine.events import BlockAcquired, FaultRaised, PointSettled, StateChanged, TuningStep
from app.core import hotwire as _hotwire
from app.core.flagging import attempt_flagged
from app.core import quality as _quality
from app.core.phase import unwrapped_phase_rad
from app.services.runs import NEVER_ACCEPTED


class Observable:
    """Plain callbacks run after a change (on the thread that changed the model)."""

    def __init__(self) -> None:
        self._listeners: list[Callable[[], None]] = []
        self.version = 0

    def subscribe(self, listener: Callable[[], None]) -> None:
        self._listeners.append(listener)

    def notify(self) -> None:
        self.version += 1
        for listener in list(self._listeners):
            listener()


# ====================================================================== traces
class TraceBuffer:
    """The last ``seconds`` of every channel (plus ``spare_seconds``), in a ring; ``append`` never
    drops a sample.

    ``snapshot`` shows a window of ``seconds`` that ends where the signal is due *now*: blocks
    arrive a tenth of a second at a time, so the newest block is revealed at the sample rate
    (paced by the wall clock) instead of all at once. The traces then scroll smoothly at the
    redraw rate, one block behind the acquisition. ``total_samples`` counts every sample ever
    appended, so a test (or the benchmark) can check that no block was lost on the way.
    """

    def __init__(self, channels: tuple[str, ...], sample_rate_hz: float, seconds: float = 0.2,
                 spare_seconds: float = 0.5) -> None:
        self.channels = tuple(channels)
        self.sample_rate_hz = float(sample_rate_hz)
        self.window = max(2, int(round(seconds * sample_rate_hz)))
        self.capacity = self.window + max(1, int(round(spare_seconds * sample_rate_hz)))
        self._ring = np.zeros((len(self.channels), self.capacity), dtype=np.float64)
        self._head = 0               # next column to write
        self._filled = 0
        self.total_samples = 0
        self.version = 0
        self._last_n = 0
        self._last_arrival_s = 0.0

    def append(self, data: np.ndarray, now_s: float | None = None) -> None:
        """Append a (channels, n) block; a block longer than the ring keeps its newest part."""
        n = data.shape[1]
        if n >= self.capacity:
            self._ring[:] = data[:, n - self.capacity:]
            self._head = 0
        else:
            first = min(n, self.capacity - self._head)
            self._ring[:, self._head:self._head + first] = data[:, :first]
            self._ring[:, :n - first] = data[:, first:]
            self._head = (self._head + n) % self.capacity
        self._filled = min(self.capacity, self._filled + n)
        self.total_samples += n
        self.version += 1
        self._last_n = min(n, self.capacity - self.window)
        self._last_arrival_s = time.monotonic() if now_s is None else now_s

    def held_back(self, now_s: float | None = None) -> int:
        """Samples of the newest block not yet due at ``now_s`` (revealed at the sample rate)."""
        now = time.monotonic() if now_s is None else now_s
        due = int((now - self._last_arrival_s) * self.sample_rate_hz)
        return max(0, min(self._last_n - due, self._filled))

    def snapshot(self, now_s: float | None = None, paced: bool = True) -> tuple[np.ndarray, np.ndarray]:
        """(time_s, data): a copy of the window ending at the sample due now (or the newest one);
        time runs to 0 s at the window's end."""
        hold = self.held_back(now_s) if paced else 0
        n = min(self.window, self._filled - hold)
        end = (self._head - hold) % self.capacity
        start = end - n
        if start >= 0:
            data = self._ring[:, start:end].copy()
        else:                                     # the window wraps round the end of the ring
            data = np.concatenate((self._ring[:, start:], self._ring[:, :end]), axis=1)
        t = (np.arange(n) - n) / self.sample_rate_hz
        return t, data


@dataclass(frozen=True)
class TraceFrame:
    """One frame of the live traces: copies, safe to hand to the plots."""

    channels: tuple[str, ...]
    time_s: np.ndarray
    data: np.ndarray          # (channels, samples) volts
    state: tuple[int, int, int]


class LiveTraces:
    """The live ``TraceBuffer``, fed on the engine's thread and read on the GUI thread.

    ``offer`` is called by the bridge on the publishing thread for every event: it copies a
    ``BlockAcquired`` into the ring (under a lock, vectorised) and says it took the event, so
    the GUI thread never handles blocks one by one. ``frame`` (GUI thread, once per redraw)
    returns a copy of the visible window, or None when nothing changed since the last one.
    Every sample reaches the ring; only the display shows the newest window.
    """

    def __init__(self, seconds: float) -> None:
        self.seconds = float(seconds)
        self._lock = threading.Lock()
        self._buffer: TraceBuffer | None = None
        self._generation = 0           # bumped by every new buffer (a new sweep or channel set)

    @property
    def buffer(self) -> TraceBuffer | None:
        return self._buffer

    def offer(self, event: object) -> bool:
        """Bus-side intake: True when ``event`` was a block and is now in the ring."""
        if not isinstance(event, BlockAcquired):
            return False
        with self._lock:
            buf = self._buffer
            if buf is None or buf.channels != event.channels or buf.sample_rate_hz != event.sample_rate_hz:
                buf = self._buffer = TraceBuffer(event.channels, event.sample_rate_hz, self.seconds)
                self._generation += 1
            buf.append(event.data)
        return True

    def reset(self) -> None:
        with self._lock:
            self._buffer = None
            self._generation += 1

    def frame(self, last_state: object = None) -> TraceFrame | None:
        """The visible window now, or None when there is no buffer or nothing new since ``last_state``."""
        with self._lock:
            buf = self._buffer
            if buf is None:
                return None
            now = time.monotonic()
            state = (self._generation, buf.version, buf.held_back(now))
            if state == last_state:
                return None
            t, data = buf.snapshot(now)
            return TraceFrame(buf.channels, t, data, state)


# ====================================================================== tuning
@dataclass
class TuningHistory(Observable):
    """Tuning steps of the current point: measured amplitude against the target band, drive
    voltage against the ceiling."""

    point_index: int | None = None
    target_ratio: float = math.nan
    tolerance: float = math.nan
    ceiling_v: float = math.nan
    max_steps: int | None = None          # the plan's tuning.max_steps, for "step n of max"
    steps: list[tuple[int, float, float, bool]] = field(default_factory=list)  # (step, drive_v, ratio, ok)

    def __post_init__(self) -> None:
        Observable.__init__(self)

    def begin_point(self, point_index: int, target_ratio: float) -> None:
        """A new point starts tuning: the previous point's steps and readout are cleared."""
        if point_index == self.point_index:
            return
        self.point_index, self.target_ratio, self.steps = point_index, target_ratio, []
        self.notify()

    def add(self, ev: TuningStep) -> None:
        if ev.point_index != self.point_index:
            self.point_index, self.steps = ev.point_index, []
        self.target_ratio, self.tolerance = ev.target_ratio, ev.tolerance
        self.steps.append((ev.step, ev.drive_v, ev.measured_ratio, ev.within_tolerance))
        self.notify()

    def load(self, point_index: int, tuning: tuple[tuple[float, float, float], ...], target_ratio: float,
             tolerance: float) -> None:
        """Show a stored point's tuning ((drive_v, measured_ratio, window_s) per step)."""
        self.point_index, self.target_ratio, self.tolerance = point_index, target_ratio, tolerance
        self.steps = [(i + 1, float(d), float(r), abs(r / target_ratio - 1) <= tolerance)
                      for i, (d, r, _w) in enumerate(tuning)]
        self.notify()

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(step, drive_v, measured_ratio) as float arrays."""
        if not self.steps:
            return np.zeros(0), np.zeros(0), np.zeros(0)
        a = np.array([(s, d, r) for s, d, r, _ in self.steps], dtype=float)
        return a[:, 0], a[:, 1], a[:, 2]


# ====================================================================== points
PLANNED, MEASURING, KEPT, FLAGGED, SKIPPED, FAILED, REJECTED, DAMAGED = (
    "planned", "measuring", "kept", "flagged", "not kept", "fault", "rejected", "record damaged")


@dataclass
class PointRow:
    index: int
    freq_hz: float
    target_ratio: float
    status: str = PLANNED
    attempts: int = 0
    flags: tuple[str, ...] = ()
    gain: float = math.nan
    gain_ci95: float = math.nan
    phase_rad: float = math.nan
    phase_ci95_rad: float = math.nan
    achieved_ratio: float = math.nan
    drive_v: float = math.nan
    attempt_id: str = ""
    decision: str = ""
    faults: list[str] = field(default_factory=list)


class PointTable(Observable):
    """One row per planned point: status, attempts, flags and the newest result."""

    def __init__(self) -> None:
        super().__init__()
        self.rows: list[PointRow] = []
        self._by_index: dict[int, PointRow] = {}
        self.settled: dict[int, PointSettled] = {}   # live sweep: the newest attempt's event per point

    def set_plan(self, points: list[Any]) -> None:
        self.rows = [PointRow(p.index, float(p.freq_hz), float(p.amplitude_ratio)) for p in points]
        self._by_index = {r.index: r for r in self.rows}
        self.settled = {}
        self.notify()

    def row(self, index: int) -> PointRow | None:
        return self._by_index.get(index)

    def on_state(self, ev: StateChanged) -> None:
        r = self.row(ev.point_index) if ev.point_index is not None else None
        if r is not None and ev.new in ("tuning", "settling", "recording") and r.status in (PLANNED, KEPT, FLAGGED,
                                                                                            SKIPPED, REJECTED):
            r.status = MEASURING
            self.notify()

    def on_settled(self, ev: PointSettled) -> None:
        r = self.row(ev.point_index)
        if r is None:
            # a point the plan did not list (adaptive refinement inserts them while the sweep runs)
            r = PointRow(int(ev.point_index), float(ev.freq_hz), float(ev.target_ratio))
            self.rows.append(r)
            self._by_index[r.index] = r
        res = ev.result
        r.attempts += 1
        if NEVER_ACCEPTED & set(ev.flags):
            # a record cut short (halt, abort, fatal fault) is stored as evidence and never
            # accepted: it must not show as a result; an earlier accepted attempt stays shown
            if r.status != FAILED:     # a fatal fault at this point is shown as such
                r.status = (FLAGGED if attempt_flagged(r.flags) else KEPT) if r.decision == "accepted" else REJECTED
            r.faults.append("interrupted")
            self.notify()
            return
        # the attempt's flags and the result's own warnings, as the stored run and the sweep's output count them
        r.flags = tuple(dict.fromkeys((*ev.flags, *map(str, getattr(res, "warnings", ()) or ()))))
        r.status = FLAGGED if attempt_flagged(r.flags) else KEPT     # marks (multisine, refined) flag nothing
        r.gain, r.phase_rad = float(getattr(res, "gain", math.nan)), float(getattr(res, "phase_rad", math.nan))
        r.gain_ci95 = float(getattr(res, "gain_ci95", math.nan))
        r.phase_ci95_rad = float(getattr(res, "phase_ci95_rad", math.nan))
        vel = getattr(res, "velocity", None)
        r.achieved_ratio = float(getattr(vel, "amplitude_ratio", math.nan))
        r.drive_v, r.attempt_id, r.decision = ev.drive_v, ev.attempt_id, "accepted"
        self.settled[ev.point_index] = ev
        self.notify()

    def on_fault(self, ev: FaultRaised) -> None:
        r = self.row(ev.point_index) if ev.point_index is not None else None
        if r is None:
            return
        r.faults.append(ev.name)
        if ev.fatal:
            r.status = FAILED
        elif ev.name == "pressure-too-high" or "skipped" in ev.action or "not stored" in ev.action:
            r.status = SKIPPED
        if ev.name not in r.flags:
            r.flags = r.flags + (ev.name,)
        self.notify()

    def on_finished(self) -> None:
        """A point left 'measuring' when the sweep ended was interrupted."""
        for r in self.rows:
            if r.status == MEASURING:
                r.status = PLANNED if r.attempts == 0 else (FLAGGED if attempt_flagged(r.flags) else KEPT)
        self.notify()

    def load_run(self, run: Any) -> None:
        """Rows from a stored run (app.storage.reader.Run): the accepted attempt's newest analysis."""
        accepted = run.accepted()
        self.rows, self.settled = [], {}
        for p in run.points:
            i = int(p["point_index"])
            r = PointRow(i, float(p["freq_hz"]), float(p["target_ratio"]))
            atts = run.attempts_of(i)
            r.attempts = len(atts)
            a = accepted.get(i)
            if a is None:
                unusable = any(x["decision"] == "accepted" and x.get("record_status", "ok") != "ok" for x in atts)
                r.status = (DAMAGED if unusable else              # measured, but its record cannot be read back
                            REJECTED if any(x["decision"] == "rejected" for x in atts) else PLANNED)
                if atts:
                    r.attempt_id = atts[-1]["attempt_id"]
                    r.decision = atts[-1]["decision"]
            else:
                _fill_from_attempt(r, a)
            self.rows.append(r)
        self._by_index = {r.index: r for r in self.rows}
        self.notify()

    def curves(self) -> dict[float, dict[str, np.ndarray]]:
        """Per target amplitude, sorted by frequency: freq_hz, gain, gain_ci95, phase_rad, phase_ci95_rad,
        index, flagged (points with a result only; phase unwrapped along frequency)."""
        out: dict[float, list[PointRow]] = {}
        for r in self.rows:
            if np.isfinite(r.gain) and r.status in (KEPT, FLAGGED, MEASURING):
                out.setdefault(round(r.target_ratio, 9), []).append(r)
        curves = {}
        for amp, rows in sorted(out.items()):
            rows.sort(key=lambda r: r.freq_hz)
            a = np.array([(r.freq_hz, r.gain, r.gain_ci95, r.phase_rad, r.phase_ci95_rad, r.index)
                          for r in rows], dtype=float)
            curves[amp] = {"freq_hz": a[:, 0], "gain": a[:, 1], "gain_ci95": np.nan_to_num(a[:, 2]),
                           "phase_rad": unwrapped_phase_rad(a[:, 0], a[:, 3]), "phase_ci95_rad": np.nan_to_num(a[:, 4]),
                           "index": a[:, 5].astype(int),
                           "flagged": np.array([r.status == FLAGGED or attempt_flagged(r.flags) for r in rows], dtype=bool)}
        return curves

    def shown_phase_rad(self) -> dict[int, float]:
        """Phase per point index as the response curve shows it (unwrapped along frequency per
        amplitude), so the table and the curve read the same number."""
        return {int(i): float(ph) for c in self.curves().values() for i, ph in zip(c["index"], c["phase_rad"])}

    @property
    def n_done(self) -> int:
        return sum(r.status in (KEPT, FLAGGED, SKIPPED) for r in self.rows)


def _fill_from_attempt(r: PointRow, a: dict[str, Any]) -> None:
    an = a.get("analysis") or {}

    def num(key: str) -> float:
        v = an.get(key)
        return math.nan if v is None else float(v)

    flags = tuple(a.get("flags") or ()) + tuple(w for w in an.get("warnings", ()) if w not in (a.get("flags") or ()))
    r.flags, r.status = flags, (FLAGGED if flags else KEPT)
    r.gain, r.gain_ci95 = num("gain"), num("gain_ci95")
    r.phase_rad, r.phase_ci95_rad = num("phase_rad"), num("phase_ci95_rad")
    r.achieved_ratio = num("achieved_ratio")
    r.drive_v = float(a.get("drive_v", math.nan))
    r.attempt_id, r.decision = a["attempt_id"], a.get("decision", "")


# ====================================================================== status
class SweepStatus(Observable):
    """State, current point and time left of the sweep in progress."""

    def __init__(self) -> None:
        super().__init__()
        self.state = "idle"
        self.point_index: int | None = None
        self.n_points = 0
        self.n_done = 0
        self.estimated_s = math.nan
        self.started_s: float | None = None
        self.finish_reason: str | None = None
        self.drive_v = 0.0
        self.freq_hz = 0.0
        self.ceiling_v = math.nan

    def begin(self, n_points: int, estimated_s: float) -> None:
        self.n_points, self.estimated_s, self.n_done = n_points, estimated_s, 0
        self.started_s, self.finish_reason, self.state = time.monotonic(), None, "idle"
        self.notify()

    def time_left_s(self, now_s: float | None = None) -> float:
        """Remaining time: the plan's estimate at first, then extrapolated from the points done."""
        if self.started_s is None or self.finish_reason is not None:
            return math.nan
        now = time.monotonic() if now_s is None else now_s
        elapsed = now - self.started_s
        if self.n_done > 0:
            return max(0.0, elapsed / self.n_done * (self.n_points - self.n_done))
        return max(0.0, self.estimated_s - elapsed)


def format_duration(seconds: float) -> str:
    if not np.isfinite(seconds):
        return "–"
    seconds = int(round(seconds))
    return f"{seconds // 60} min {seconds % 60:02d} s" if seconds >= 60 else f"{seconds} s"


# ====================================================================== quality figures for people
FIGURE_LABELS = {
    "snr_db_pressure_min": ("lowest pressure SNR", "dB"), "snr_db_light": ("light SNR", "dB"),
    "mmm_residual": ("plane-wave fit residual", ""), "pair_spread": ("sensor-pair spread", ""),
    "distortion_velocity": ("velocity harmonics", ""), "distortion_light": ("light harmonics", ""),
    "drift_velocity": ("forcing drift (record halves)", ""), "drift_light": ("light drift (record halves)", ""),
    "cond": ("fit condition number", ""), "relative_ci95": ("relative 95 % half-width", ""),
    **_hotwire.FIGURE_LABELS,
}


@dataclass(frozen=True)
class FigureRow:
    label: str
    value: str
    limit: str
    ok: bool | None          # None: no limit or no value


def quality_rows(figures: dict[str, Any], thresholds: Any) -> list[FigureRow]:
    """Each quality figure the flags are judged on, with its limit and pass/fail, in words."""
    rows = []
    defaults = getattr(_quality, "DEFAULT_LIMITS", {})
    for key, _flag, attr, sense in _quality.QUALITY_RULES:
        label, unit = FIGURE_LABELS.get(key, (key.replace("_", " "), ""))
        value = figures.get(key)
        limit = getattr(thresholds, attr, defaults.get(attr))
        if value is None:
            continue
        v = float(value)
        text = f"{v:.3g}{' ' + unit if unit else ''}"
        if limit is None or not math.isfinite(v):
            rows.append(FigureRow(label, text, "", None))
            continue
        ok = v >= limit if sense == "min" else v <= limit
        rows.append(FigureRow(label, text, f"{'≥' if sense == 'min' else '≤'} {limit:g}{' ' + unit if unit else ''}",
                              bool(ok)))
    return rows


def run_thresholds(run: Any) -> Any:
    """The run's own plan snapshot's [quality] table (its defaults when the plan cannot be read)."""
    from app.configfile import read_toml
    from app.errors import FlamebodeError
    from app.plan import Quality, plan_from_dict

    try:
        return plan_from_dict(read_toml(run.plan_path), str(run.plan_path)).quality
    except (FlamebodeError, OSError, AttributeError):
        return Quality()


def amplitude_spectrum(x: np.ndarray, sample_rate_hz: float) -> tuple[np.ndarray, np.ndarray]:
    """(frequency Hz, peak amplitude) of a Hann-windowed FFT: a sine on a bin reads its peak
    amplitude (the window's coherent gain, its mean of 0.5, divided out; common practice)."""
    x = np.asarray(x, dtype=float)
    if x.size < 2:
        return np.zeros(0), np.zeros(0)
    w = np.hanning(x.size)
    spec = np.fft.rfft((x - x.mean()) * w)
    amp = 2.0 * np.abs(spec) / w.sum()
    return np.fft.rfftfreq(x.size, 1.0 / sample_rate_hz), amp


def format_volts(v: float) -> str:
    """A drive voltage as a person reads it: millivolts below 1 V, volts from 1 V."""
    return f"{v * 1e3:.3g} mV" if abs(v) < 1.0 else f"{v:.3f} V"
