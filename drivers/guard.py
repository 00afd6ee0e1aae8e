"""The hard voltage ceiling: every drive sample of every back-end passes through here.

:class:`CeilingGuard` turns drive *requests* (frequency, peak volts) into the samples or
amplitude commands a back-end actually sends, independently of any controller above it:

* a request above the ceiling (or negative, or not finite) is refused with
  :class:`~drivers.errors.CeilingExceeded` and changes nothing; it is never clipped into a
  different test than the one asked for;
* the amplitude moves linearly toward the request at ``ceiling_v / ramp_time_s`` volts per
  second, inside a block (speaker protection);
* a frequency change while the output is non-zero ramps down to zero, switches frequency
  at zero and ramps back up; the phase runs on continuously across blocks. A guard built with
  ``retune="direct"`` (for back-ends that render every sample themselves, never for instruments
  set by commands) instead switches a sine's frequency at the next peak of the waveform, where
  its slope is zero, with the phase continuous (so the samples and their slope are continuous
  across the switch), and ramps the amplitude straight from the old value to the new one at the
  same rate: the envelope never passes above the larger of the two, and never faster than the
  speaker-protection rate. Changes to or from a multi-sine still pass through zero;
  ``last_switch_samples`` tells a simulator how many samples of the last block were at the old
  frequency;
* :meth:`CeilingGuard.halt` zeroes the output from the next sample, from any thread or a
  signal handler (it takes no lock), and *latches*: every later request is refused with
  :class:`~drivers.errors.DriveHalted` until :meth:`CeilingGuard.arm` (called when a new
  sweep starts) re-arms it. Whatever is still running above (an engine thread, a tuning
  loop) can therefore never bring the drive back after a halt;
* :meth:`CeilingGuard.arm` also sets the ceiling of the sweep about to start: the lower of
  the rig's (fixed at construction, never raised) and the plan's;
* multi-sine mode (:meth:`CeilingGuard.request_multisine`): a sum of lines on a grid of one
  period of N samples; the request gives its PEAK (the largest |sum| over the period,
  evaluated 8 times finer than the samples, so a DAC's reconstruction between samples is
  covered too), which must be within the ceiling. The envelope of the whole sum then ramps
  exactly as a sine's amplitude does (soft start), and a change of waveform passes through
  zero as a frequency change does. ``last_lines`` tells a simulator the analytic parts of the
  last rendered block (one per line) so that it can answer each at its own frequency;
* every rendered block and amplitude schedule is noted in the drive log
  (:mod:`drivers.drive_log`) when one is open, so what was put out can be audited from
  outside the process.

By construction the envelope never exceeds the ceiling; a last clip is kept only as a
belt-and-braces and every time it would have acted is counted in
:attr:`CeilingGuard.clip_events` (a bug counter the tests require to stay at zero).

Imports: standard library, numpy, ``drivers.errors``, ``drivers.protocols`` and ``drivers.drive_log`` only.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass

import numpy as np

from . import drive_log
from .errors import CeilingExceeded, DriveHalted, DriverError
from .protocols import DriveStatus

TWO_PI = 2.0 * math.pi


class InvalidDriveRequest(DriverError, ValueError):
    """A drive request or guard setting that makes no sense (bad frequency, bad rate...)."""


@dataclass(frozen=True)
class MultiSine:
    """One period of a multi-sine: line k has ``harmonics[k]`` cycles per ``period_samples`` samples.

    ``shape`` is the period scaled to a peak of 1 (the envelope amplitude is the peak in volts)."""

    period_samples: int
    harmonics: tuple[int, ...]
    amplitudes: tuple[float, ...]     # relative to the peak (amplitude_v / peak_v)
    phases_rad: tuple[float, ...]
    peak_v: float                     # of the sum at the requested amplitudes
    shape: np.ndarray

    def __eq__(self, other: object) -> bool:
        return self is other

    __hash__ = object.__hash__


@dataclass(frozen=True)
class _Pending:
    """A frequency (or waveform) change waiting for the output to reach zero (or, ``direct``,
    for the next peak of the sine)."""

    freq_hz: float
    amplitude_v: float
    multi: MultiSine | None = None
    direct: bool = False


RETUNE_MODES = ("through-zero", "direct")


def _positive_finite(name: str, value: float) -> float:
    value = float(value)
    if not math.isfinite(value) or value <= 0.0:
        raise InvalidDriveRequest(f"ceiling guard: {name} must be a finite number > 0, got {value!r}")
    return value


# Ramp arithmetic is snapped to whole steps within this fraction of a step, so that the
# same ramp cut into blocks differently ends on the same sample despite rounding.
SNAP = 1e-9


def _toward(start_v: float, end_v: float, travel_v: np.ndarray, snap_v: float) -> np.ndarray:
    """Amplitudes reached after moving ``travel_v`` volts from ``start_v`` toward ``end_v``.

    Exactly ``end_v`` once the distance is covered (to within ``snap_v``), and never outside
    [start, end] even by one rounding step (bounded by construction, not by a later clip).
    """
    distance_v = abs(end_v - start_v)
    sign = 1.0 if end_v >= start_v else -1.0
    moved = np.where(travel_v + snap_v >= distance_v, end_v, start_v + sign * travel_v)
    return np.clip(moved, min(start_v, end_v), max(start_v, end_v))


class CeilingGuard:
    """Phase-continuous, ramped sine drive that can never exceed ``ceiling_v`` peak volts.

    State (all under one lock): the frequency and phase of the last emitted sample, the
    envelope amplitude of the last emitted sample, the target amplitude, and an optional
    pending frequency change. ``halt()`` only raises a flag, applied under the lock by the
    next call (and, if it arrives while a block is being rendered, that block is zeroed).
    """

    def __init__(self, ceiling_v: float, sample_rate_hz: float, ramp_time_s: float = 0.3,
                 retune: str = "through-zero") -> None:
        if retune not in RETUNE_MODES:
            raise InvalidDriveRequest(f"ceiling guard: retune must be one of {', '.join(RETUNE_MODES)}, "
                                      f"got {retune!r}")
        self._retune = retune
        self.last_switch_samples: int | None = None   # samples of the last block at the old frequency
        self._ceiling_v = _positive_finite("ceiling_v", ceiling_v)
        self._hard_ceiling_v = self._ceiling_v      # the rig's: arm() may lower the ceiling, never raise it
        self._fs_hz = _positive_finite("sample_rate_hz", sample_rate_hz)
        self._ramp_time_s = _positive_finite("ramp_time_s", ramp_time_s)
        self._step_v = self._ceiling_v / self._ramp_time_s / self._fs_hz  # volts per sample
        self._lock = threading.Lock()
        self._halt_flag = False
        self._latched = False      # set by halt(), cleared only by arm()
        self._freq_hz = 0.0
        self._phase_rad = 0.0      # phase of the last emitted sample, wrapped to [0, 2π)
        self._amp_v = 0.0          # envelope of the last emitted sample
        self._target_v = 0.0
        self._pending: _Pending | None = None
        self._multi: MultiSine | None = None   # the waveform: None for a sine
        self._clip_events = 0
        self.last_lines: list[tuple[float, np.ndarray]] | None = None

    # ----------------------------------------------------------------- properties
    @property
    def ceiling_v(self) -> float:
        return self._ceiling_v

    @property
    def hard_ceiling_v(self) -> float:
        """The ceiling the guard was built with (the rig's); :meth:`arm` never goes above it."""
        return self._hard_ceiling_v

    @property
    def latched(self) -> bool:
        """True after a halt until :meth:`arm`: every drive request is refused."""
        return self._latched

    @property
    def sample_rate_hz(self) -> float:
        return self._fs_hz

    @property
    def ramp_time_s(self) -> float:
        return self._ramp_time_s

    @property
    def retune(self) -> str:
        """How a sine's frequency changes while the output is on: "through-zero" or "direct"."""
        return self._retune

    @property
    def ramp_rate_v_per_s(self) -> float:
        return self._hard_ceiling_v / self._ramp_time_s

    def time_to_settle_s(self) -> float:
        """Ramp time left until the output reaches the requested amplitude (and frequency)."""
        with self._lock:
            self._apply_halt_flag()
            if self._pending is None:
                return abs(self._target_v - self._amp_v) / self.ramp_rate_v_per_s
            if self._pending.direct:      # the ramp, or up to half a period to the next peak
                return max(abs(self._target_v - self._amp_v) / self.ramp_rate_v_per_s,
                           0.5 / self._freq_hz + 1.0 / self._fs_hz)
            return (self._amp_v + self._pending.amplitude_v) / self.ramp_rate_v_per_s

    @property
    def clip_events(self) -> int:
        """Times the final clip would have changed a sample: a bug if ever non-zero."""
        return self._clip_events

    # ----------------------------------------------------------------- requests
    def request(self, freq_hz: float, amplitude_v: float) -> None:
        """Ask for a sine of ``amplitude_v`` PEAK volts at ``freq_hz``; ramped, never clipped."""
        freq_hz, amplitude_v = self._validated(freq_hz, amplitude_v)
        with self._lock:
            self._apply_halt_flag()
            if self._latched:
                if amplitude_v == 0.0:
                    return              # zero is what a halted output gives anyway
                raise DriveHalted(f"drive request {amplitude_v:g} V at {freq_hz:g} Hz refused: the output was "
                                  f"halted and stays at zero until a new sweep starts")
            self._change_locked(freq_hz, amplitude_v, None)

    def _change_locked(self, freq_hz: float, amplitude_v: float, multi: MultiSine | None) -> None:
        if freq_hz == self._freq_hz and multi is self._multi:
            self._pending = None
            self._target_v = amplitude_v
        elif self._amp_v == 0.0:
            self._pending = None
            self._freq_hz, self._multi = freq_hz, multi
            self._phase_rad = 0.0 if multi is not None else self._phase_rad
            self._target_v = amplitude_v
        elif self._retune == "direct" and multi is None and self._multi is None:
            self._pending = _Pending(freq_hz, amplitude_v, None, direct=True)
            self._target_v = amplitude_v      # ramped straight from the old amplitude
        else:
            self._pending = _Pending(freq_hz, amplitude_v, multi)
            self._target_v = 0.0

    def request_multisine(self, period_samples: int, harmonics, amplitudes_v, phases_rad) -> float:
        """Ask for Σ a_k cos(2π m_k n / N + φ_k) (N = ``period_samples``), ramped; returns its peak (V).

        Refused with CeilingExceeded (nothing changed) when the peak of the sum is above the
        ceiling; with InvalidDriveRequest for lines at or above half the sample rate."""
        n = int(period_samples)
        m = np.asarray(harmonics, dtype=float)
        a = np.asarray(amplitudes_v, dtype=float)
        ph = np.asarray(phases_rad, dtype=float)
        if n < 2 or m.ndim != 1 or m.size == 0 or a.shape != m.shape or ph.shape != m.shape:
            raise InvalidDriveRequest("multi-sine request: one amplitude and one phase per line, N >= 2")
        if not (np.all(np.isfinite(a)) and np.all(a >= 0) and np.all(np.isfinite(ph))):
            raise CeilingExceeded("multi-sine request refused: amplitudes must be finite and >= 0")
        if np.any(m < 1) or np.any(m != np.round(m)) or np.any(m >= n / 2.0):
            raise InvalidDriveRequest("multi-sine request refused: every line needs a whole number of "
                                      "cycles per period, at least one and below half the sample rate")
        fine = np.arange(8 * n) / (8.0 * n)
        dense = (a[:, None] * np.cos(TWO_PI * np.outer(m, fine) + ph[:, None])).sum(axis=0)
        peak_v = float(np.max(np.abs(dense)))
        freq0 = self._fs_hz / n
        if not math.isfinite(peak_v) or peak_v > self._ceiling_v:
            raise CeilingExceeded(f"multi-sine request refused: its peak {peak_v:.4g} V is above the "
                                  f"{self._ceiling_v:g} V peak ceiling (nothing was changed)")
        if peak_v == 0.0:
            self.request(freq0, 0.0)
            return 0.0
        shape = dense[::8] / peak_v
        multi = MultiSine(n, tuple(int(x) for x in m), tuple(float(x) for x in a / peak_v),
                          tuple(float(x) for x in ph), peak_v, shape)
        with self._lock:
            self._apply_halt_flag()
            if self._latched:
                raise DriveHalted(f"multi-sine request {peak_v:g} V peak refused: the output was halted "
                                  f"and stays at zero until a new sweep starts")
            self._change_locked(freq0, peak_v, multi)
        return peak_v

    @property
    def multisine(self) -> MultiSine | None:
        """The multi-sine being put out (None for a sine)."""
        with self._lock:
            return self._multi

    def ramp_down(self) -> None:
        """Ramp the output to zero (any pending frequency change is dropped)."""
        with self._lock:
            self._apply_halt_flag()
            self._pending = None
            self._target_v = 0.0

    def halt(self) -> None:
        """Zero from the next sample, no ramp, and refuse every request until :meth:`arm`.

        Lock-free: safe from any thread or signal handler."""
        self._latched = True
        self._halt_flag = True

    def arm(self, ceiling_v: float | None = None) -> None:
        """Start of a sweep: clear a halt latch and set this sweep's ceiling.

        ``ceiling_v`` above the rig's ceiling (the one the guard was built with) is refused
        with :class:`~drivers.errors.CeilingExceeded`; ``None`` restores the rig's ceiling.
        The output must be at zero (it is after a halt or a finished ramp)."""
        wanted = self._hard_ceiling_v if ceiling_v is None else _positive_finite("ceiling_v", ceiling_v)
        if wanted > self._hard_ceiling_v:
            raise CeilingExceeded(f"ceiling {wanted:g} V refused: above the rig's ceiling {self._hard_ceiling_v:g} V")
        with self._lock:
            self._apply_halt_flag()
            if self._amp_v > wanted or self._target_v > wanted:
                raise CeilingExceeded(f"ceiling {wanted:g} V refused while the output is at {self._amp_v:g} V")
            self._latched = False
            self._ceiling_v = wanted

    def status(self) -> DriveStatus:
        with self._lock:
            self._apply_halt_flag()
            target_v = self._pending.amplitude_v if self._pending else self._target_v
            return DriveStatus(freq_hz=self._freq_hz, amplitude_v=self._amp_v,
                               target_amplitude_v=target_v, ceiling_v=self._ceiling_v,
                               ramping=not self._settled_locked())

    def settled(self) -> bool:
        """True when the amplitude has reached the target and no frequency change is pending."""
        with self._lock:
            self._apply_halt_flag()
            return self._settled_locked()

    # ----------------------------------------------------------------- output
    def render(self, n_samples: int) -> np.ndarray:
        """The next ``n_samples`` drive samples (float64 volts), ramped and phase-continuous."""
        n = int(n_samples)
        if n < 0:
            raise InvalidDriveRequest(f"ceiling guard: cannot render {n_samples!r} samples")
        with self._lock:
            self._apply_halt_flag()
            self.last_switch_samples = None
            multi_before = self._multi
            involved = multi_before is not None or (self._pending is not None and self._pending.multi is not None)
            if not involved and self._pending is None and self._amp_v == self._target_v:
                out = self._steady(n)
                self.last_lines = None
            elif not involved:
                amp_v, phase_rad = self._advance(np.arange(1, n + 1, dtype=np.float64), quantum=1.0)
                out = amp_v * np.sin(phase_rad)
                self.last_lines = None
            else:
                f_before = self._freq_hz
                amp_v, phase_rad, after = self._advance(np.arange(1, n + 1, dtype=np.float64), quantum=1.0,
                                                        with_switch=True)
                out, self.last_lines = self._lines(amp_v, phase_rad, after, (f_before, multi_before),
                                                   (self._freq_hz, self._multi))
            if self._halt_flag:  # halt() arrived while this block was being computed
                self._apply_halt_flag()
                out[:] = 0.0
                self.last_lines = [(f, np.zeros_like(z)) for f, z in (self.last_lines or [])] or None
            out = self._final_clip(out)
        drive_log.note(out, self._fs_hz, self._ceiling_v, self._latched)
        return out

    def amplitude_schedule(self, duration_s: float, step_s: float) -> np.ndarray:
        """Peak amplitudes to send every ``step_s`` for ``duration_s`` to carry out the ramp.

        For instruments set by discrete amplitude commands. Each value is the envelope at the
        end of its step, so consecutive values differ by at most ``ramp_rate * step_s`` and
        none exceeds the ceiling; the guard advances exactly as rendering that time would
        (a pending frequency change takes effect right after the first exact zero in the schedule).
        """
        step_s = _positive_finite("step_s", step_s)
        duration_s = float(duration_s)
        if not math.isfinite(duration_s) or duration_s < 0.0:
            raise InvalidDriveRequest(f"ceiling guard: duration_s must be finite and >= 0, got {duration_s!r}")
        n_steps = math.ceil(duration_s / step_s - 1e-9)
        with self._lock:
            self._apply_halt_flag()
            if self._pending is not None and self._pending.direct:
                raise InvalidDriveRequest("ceiling guard: a direct retune is for back-ends that render the "
                                          "samples, not for amplitude schedules")
            step_samples = step_s * self._fs_hz
            k = np.arange(1, n_steps + 1, dtype=np.float64) * step_samples
            amp_v, _ = self._advance(k, quantum=step_samples)
            out = self._final_clip(amp_v.copy())
        drive_log.note(out, 1.0 / step_s, self._ceiling_v, self._latched)
        return out

    # ----------------------------------------------------------------- internals
    def _validated(self, freq_hz: float, amplitude_v: float) -> tuple[float, float]:
        amplitude_v = float(amplitude_v)
        freq_hz = float(freq_hz)
        if not math.isfinite(amplitude_v) or amplitude_v < 0.0 or amplitude_v > self._ceiling_v:
            raise CeilingExceeded(
                f"drive request {amplitude_v!r} V peak at {freq_hz!r} Hz refused: amplitudes must be "
                f"finite, >= 0 and within the {self._ceiling_v:g} V peak ceiling (nothing was changed)")
        nyquist_hz = self._fs_hz / 2.0
        if not math.isfinite(freq_hz) or freq_hz <= 0.0 or freq_hz >= nyquist_hz:
            raise InvalidDriveRequest(
                f"drive request at {freq_hz!r} Hz refused: frequency must be finite, > 0 and below "
                f"half the {self._fs_hz:g} Hz sample rate ({nyquist_hz:g} Hz)")
        return freq_hz, amplitude_v

    def _apply_halt_flag(self) -> None:
        """Carry out a pending halt (caller holds the lock)."""
        if self._halt_flag:
            self._halt_flag = False
            self._amp_v = 0.0
            self._target_v = 0.0
            self._pending = None
            drive_log.note_halt(self._fs_hz, self._ceiling_v)

    def _settled_locked(self) -> bool:
        return self._pending is None and self._amp_v == self._target_v

    def _dphi(self, freq_hz: float) -> float:
        return TWO_PI * freq_hz / self._fs_hz

    def _steady(self, n: int) -> np.ndarray:
        """Fast path at constant amplitude: one sine, computed in place."""
        phase = np.arange(1, n + 1, dtype=np.float64)
        phase *= self._dphi(self._freq_hz)
        phase += self._phase_rad
        if n:
            self._phase_rad = float(phase[-1] % TWO_PI)
        np.sin(phase, out=phase)
        phase *= self._amp_v
        return phase

    def _lines(self, amp_v: np.ndarray, phase_rad: np.ndarray, after: np.ndarray, before_mode, after_mode
               ) -> tuple[np.ndarray, list[tuple[float, np.ndarray]]]:
        """Samples and analytic parts (one per line, zero outside its part of the block) of a block
        in which a multi-sine is involved; ``after`` marks the samples after a waveform switch."""
        out = np.zeros(amp_v.size)
        lines: list[tuple[float, np.ndarray]] = []
        for mask, (freq_hz, multi) in ((~after, before_mode), (after, after_mode)):
            if not mask.any() or freq_hz <= 0.0:
                continue
            env = np.where(mask, amp_v, 0.0)
            if multi is None:
                out += env * np.sin(phase_rad)
                lines.append((freq_hz, env * np.exp(1j * (phase_rad - 0.5 * math.pi))))
                continue
            n = multi.period_samples
            idx = np.mod(np.rint(phase_rad * (n / TWO_PI)).astype(np.int64), n)
            out += env * multi.shape[idx]
            theta = TWO_PI * idx / n
            for m, a, ph in zip(multi.harmonics, multi.amplitudes, multi.phases_rad):
                lines.append((freq_hz * m, env * a * np.exp(1j * (m * theta + ph))))
        return out, lines

    def _advance(self, k: np.ndarray, quantum: float, with_switch: bool = False):
        """Envelope and phase at offsets ``k`` (samples after the last emitted one); moves state to k[-1].

        ``k`` are multiples of ``quantum`` samples (1 for render, one step for schedules). A
        pending frequency change switches after the first point whose envelope is exactly zero,
        so the output (or the instrument's amplitude setting) passes through zero at the switch.
        """
        a0, f0, phi0 = self._amp_v, self._freq_hz, self._phase_rad
        travel_v = k * self._step_v
        snap_v = SNAP * self._step_v
        if self._pending is None:
            amp_v = _toward(a0, self._target_v, travel_v, snap_v)
            phase = phi0 + k * self._dphi(f0)
            if k.size:
                self._amp_v = float(amp_v[-1])
                self._phase_rad = float(phase[-1] % TWO_PI)
            return (amp_v, phase, np.zeros(k.size, dtype=bool)) if with_switch else (amp_v, phase)
        pend = self._pending
        if pend.direct:
            return self._advance_direct(k, with_switch)
        # first point at exactly zero (at least one point on, so a zero is always emitted)
        m = max(1, math.ceil(a0 / (self._step_v * quantum) - SNAP)) * quantum
        after = k > m
        down_v = np.where(k >= m, 0.0, _toward(a0, 0.0, travel_v, snap_v))
        amp_v = np.where(after, _toward(0.0, pend.amplitude_v, (k - m) * self._step_v, snap_v), down_v)
        phi_m = phi0 + m * self._dphi(f0)
        # a new multi-sine starts at the beginning of its period (its phase origin)
        phi_new = 0.0 if pend.multi is not None else phi_m
        phase = np.where(after, phi_new + (k - m) * self._dphi(pend.freq_hz), phi0 + k * self._dphi(f0))
        if k.size:
            self._amp_v = float(amp_v[-1])
            self._phase_rad = float(phase[-1] % TWO_PI)
            if k[-1] >= m:  # reached zero: the new frequency takes over
                self._freq_hz, self._target_v, self._pending = pend.freq_hz, pend.amplitude_v, None
                self._multi = pend.multi
                if quantum == 1.0:
                    self.last_switch_samples = int(m - k[0] + 1)
        return (amp_v, phase, after) if with_switch else (amp_v, phase)

    def _advance_direct(self, k: np.ndarray, with_switch: bool):
        """A sine's frequency switched at the first sample at or past the next peak of the old sine
        (phase π/2 modulo π: slope zero), phase-continuous; the amplitude ramps toward the new
        value at the speaker-protection rate from the first sample on."""
        pend = self._pending
        a0, f0, phi0 = self._amp_v, self._freq_hz, self._phase_rad
        dphi0 = self._dphi(f0)
        to_peak = (0.5 * math.pi - phi0) % math.pi
        m = max(1, math.ceil(to_peak / dphi0 - SNAP))
        amp_v = _toward(a0, pend.amplitude_v, k * self._step_v, SNAP * self._step_v)
        after = k > m
        phase = np.where(after, phi0 + m * dphi0 + (k - m) * self._dphi(pend.freq_hz), phi0 + k * dphi0)
        if k.size:
            self._amp_v = float(amp_v[-1])
            self._phase_rad = float(phase[-1] % TWO_PI)
            if k[-1] >= m:
                self._freq_hz, self._target_v, self._pending = pend.freq_hz, pend.amplitude_v, None
                self.last_switch_samples = int(m - k[0] + 1)
        return (amp_v, phase, after) if with_switch else (amp_v, phase)

    def _final_clip(self, values: np.ndarray) -> np.ndarray:
        """Belt-and-braces only: the envelope is already bounded; count any would-be clip as a bug."""
        if values.size and (values.max() > self._ceiling_v or values.min() < -self._ceiling_v):
            self._clip_events += int(np.count_nonzero(np.abs(values) > self._ceiling_v))
            np.clip(values, -self._ceiling_v, self._ceiling_v, out=values)
        return values
