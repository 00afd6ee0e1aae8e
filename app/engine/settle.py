"""Automatic settle times (``[timing] settle = "auto"``) from the rig's measured acoustic decay.

After the drive changes, the response at the reference plane approaches its new steady state
as a sum of decaying modes. For a resonance with decay rate σ (amplitude ∝ e^(-σt)), the time
constant τ = 1/σ equals the group delay -dφ/dω of the transfer at the resonance peak
(second-order system: τ_g(ω0) = 2Q/ω0 = 1/(ζω0) = 1/σ; from memory, any linear-systems
text), and equals 1/(πB) with B the half-power bandwidth in hertz. Away from a resonance the
local group delay is smaller, as is that mode's share of the response there. So the settle
at a plan frequency is

    settle(f) = max(k · τ(f), n_min / f, floor)

with τ(f) the larger of the group delays to the two neighbouring plan frequencies, from the
pre-scan's phase (drive reference → velocity at the reference plane, which includes every pure
delay on the way) plus two standard uncertainties of the phase difference. After k time
constants the transient left is e^(-k) of the change: k = 5 leaves 0.7 %, a fraction of the
5 % tuning tolerance times the drive change (common practice).

A resonance narrower than the frequency spacing can sit between two lines; the finite
difference would then underestimate its decay (the resonant scenario has one: 267 Hz decaying
at 11 1/s between lines 50 Hz apart). Such a mode shows as a phase step larger than
``MAX_STEP_RAD`` or as a bend of the complex logarithm ln H = ln|H| + iφ across the point: off
its peak a narrow mode adds a nearly real fraction s of the response, of opposite signs on its
two sides, so ln|H| bends by about 2s, while a pure delay keeps ln H straight. So τ is trusted
only at a point with a neighbour on each side, both phase steps below ``MAX_STEP_RAD`` and the
second difference of ln H at most ``MAX_BEND`` (plus two standard uncertainties): a hidden
mode's share s is then below about 0.1, and so is its transient relative to the last drive
change. Broad resonances that bend ln H over the spacing fall back too (conservative). Every other point (no phase, a lost line,
an end of the band) keeps the plan's conservative settle (``timing.settle``); so does every
point without a pre-scan.

Imports: standard library and numpy only. Never Qt, never storage, never a back-end.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

MAX_STEP_RAD = 0.5 * math.pi      # a phase step above this between neighbours: under-resolved resonance
MAX_BEND = 0.2                    # |second difference of ln H| above this across a point: a hidden mode


@dataclass(frozen=True)
class AutoSettle:
    """Settle times per plan frequency (seconds); ``measured`` counts those from a measured decay."""

    freqs_hz: tuple[float, ...]
    settle_s: tuple[float, ...]
    tau_s: tuple[float, ...]          # NaN where the decay was not measured (plan's settle used)
    fallback_s: float
    measured: int

    def at(self, freq_hz: float) -> float | None:
        """The settle time from the measured decay at ``freq_hz``, or None (the plan's settle applies)."""
        if not self.freqs_hz:
            return None
        i = int(np.argmin(np.abs(np.asarray(self.freqs_hz) - freq_hz)))
        if abs(self.freqs_hz[i] - freq_hz) > 1e-6 * max(1.0, freq_hz) or not math.isfinite(self.tau_s[i]):
            return None                   # not measured there (a refined point, a lost line...)
        return self.settle_s[i]

    def summary(self) -> str:
        """One line for the operator and the run's info."""
        if not self.measured:
            return f"settle auto: no measured decay, the plan's {self.fallback_s:g} s at every point"
        tau = np.asarray(self.tau_s)
        ok = np.isfinite(tau)
        s = np.asarray(self.settle_s)[ok]
        return (f"settle auto: from the pre-scan's decay at {self.measured} of {len(self.freqs_hz)} frequencies "
                f"(tau up to {np.nanmax(tau) * 1e3:.1f} ms; settle {s.min() * 1e3:.0f}-{s.max() * 1e3:.0f} ms), "
                f"the plan's {self.fallback_s:g} s at the other {len(self.freqs_hz) - self.measured}")


def decay_time_constants(freqs_hz, ratio_per_volt, phase_rad, rel_sigma,
                         max_step_rad: float = MAX_STEP_RAD) -> np.ndarray:
    """τ(f) in seconds at each frequency, NaN where it cannot be told (see the module docstring).

    ``rel_sigma`` is the relative standard uncertainty of each line's transfer; for a small
    uncertainty it is also the standard uncertainty of its phase in radians."""
    f = np.asarray(freqs_hz, dtype=float)
    order = np.argsort(f)
    f, ph, rs = f[order], np.asarray(phase_rad, dtype=float)[order], np.asarray(rel_sigma, dtype=float)[order]
    mag = np.asarray(ratio_per_volt, dtype=float)[order]
    with np.errstate(divide="ignore", invalid="ignore"):
        ln_mag = np.where(mag > 0, np.log(np.where(mag > 0, mag, 1.0)), np.nan)
    n = f.size
    pair = np.full(max(n - 1, 0), np.nan)       # group-delay bound per interval (s)
    slope = np.full(max(n - 1, 0), np.nan, dtype=complex)   # slope of ln H per interval (1/Hz)
    for i in range(n - 1):
        if not all(np.isfinite(x) for x in (ph[i], ph[i + 1], rs[i], rs[i + 1], ln_mag[i], ln_mag[i + 1])):
            continue
        step = math.remainder(ph[i + 1] - ph[i], 2.0 * math.pi)
        noise = 2.0 * math.hypot(rs[i], rs[i + 1])
        if abs(step) + noise > max_step_rad:
            continue
        pair[i] = (abs(step) + noise) / (2.0 * math.pi * (f[i + 1] - f[i]))
        slope[i] = complex(ln_mag[i + 1] - ln_mag[i], step) / (f[i + 1] - f[i])
    tau = np.full(n, np.nan)
    for i in range(1, n - 1):
        if not (np.isfinite(pair[i - 1]) and np.isfinite(pair[i])):
            continue
        spacing_hz = 0.5 * (f[i + 1] - f[i - 1])
        noise = 2.0 * math.hypot(math.hypot(rs[i - 1], rs[i]), math.hypot(rs[i], rs[i + 1]))
        if abs(slope[i] - slope[i - 1]) * spacing_hz > MAX_BEND + noise:
            continue
        tau[i] = max(pair[i - 1], pair[i])
    out = np.empty(n)
    out[order] = tau
    return out


def auto_settle(freqs_hz, ratio_per_volt, phase_rad, rel_sigma, *, fallback_s: float, k: float = 5.0,
                min_periods: float = 3.0, floor_s: float = 0.02) -> AutoSettle:
    """Settle time at each frequency: max(k·τ, min_periods/f, floor_s), ``fallback_s`` where τ is unknown."""
    f = np.asarray(freqs_hz, dtype=float)
    tau = decay_time_constants(f, ratio_per_volt, phase_rad, rel_sigma) if f.size else np.array([])
    settle = np.where(np.isfinite(tau), np.maximum.reduce([k * np.nan_to_num(tau), min_periods / f,
                                                           np.full(f.size, floor_s)]), fallback_s)
    return AutoSettle(tuple(float(x) for x in f), tuple(float(x) for x in settle), tuple(float(x) for x in tau),
                      float(fallback_s), int(np.count_nonzero(np.isfinite(tau))))


def no_measured_decay(fallback_s: float) -> AutoSettle:
    return AutoSettle((), (), (), float(fallback_s), 0)
