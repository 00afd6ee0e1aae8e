"""The transfer pre-scan: the drive-to-velocity gain at every plan frequency before tuning.

A short, low multi-sine with Schroeder phases (``app.core.multisine``) holds one line at each
plan frequency. Each line's velocity at the reference plane is measured through the same
harmonic fit and multi-microphone chain as a tuning window, with the other lines removed, so
each comes with its own uncertainty. Up to ``[prescan] levels`` measurements are made:

1. every line at the cold first voltage of a sine sweep (``tuning.first_drive_fraction`` of
   the ceiling): no line forces harder than the first window of a sweep without pre-scan;
2. then the lines are re-weighted so that each reaches about the same signal-to-noise
   ratio, with the SUM of all lines' |u'|/u_mean (a bound on the peak of the total forcing)
   at most ``total_level`` times the plan's smallest target (soft start). A line still lost
   in the noise is driven from an upper bound of its gain, so it cannot overshoot either.

The multi-sine goes through the back-end's ceiling guard (its peak, not each line's, within
the ceiling; its envelope ramped like a sine's). The table seeds the amplitude controller
(``AmplitudeController.seed_transfer``): lost lines enter as their upper bound with a large
uncertainty (the point then opens low). The result is published as ``TransferMeasured``.

Back-ends without the ``MultiSineDrive`` capability, plans that do not ask for it, and runs
given a fresh table from an earlier run skip it, with the reason published. A table of
unknown age (``prior_age_s`` None) is never counted fresh: the pre-scan is made.

Imports: numpy, ``app.core.multisine``, ``drivers.protocols`` (protocols only) and this package.
Never Qt, never storage, never a concrete back-end.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from app.core.multisine import LineGrid, line_grid, measure_lines, period_waveform, schroeder_phases
from drivers.protocols import MultiSineDrive

from . import states as S
from .events import TransferMeasured

NOISE_SIGMAS = 3.0        # a line below this many standard deviations is lost in the noise
PEAK_MARGIN = 0.95        # the multi-sine's peak stays below this fraction of the ceiling


@dataclass
class _Line:
    freq_hz: float
    drive_v: float = 0.0              # line amplitude at the last level
    gain: float = math.nan            # ratio per volt (best estimate so far)
    rel_sigma: float = math.inf
    upper: float = math.inf           # upper bound of the gain where lost in the noise
    sigma_ratio: float = math.nan     # noise of the ratio at the last level
    phase_rad: float = math.nan
    ratio: float = 0.0                # |u'|/u_mean reached at the last level


def within_ceiling(grid: LineGrid, amps: np.ndarray, phases: np.ndarray, ceiling_v: float) -> np.ndarray:
    """The lines scaled down so that the sum's peak (8 times finer than the samples) stays below
    ``PEAK_MARGIN`` of the ceiling; the guard refuses anything above the ceiling itself anyway."""
    fine = LineGrid(grid.sample_rate_hz * 8, grid.period_samples * 8, grid.harmonics)
    peak = float(np.max(np.abs(period_waveform(fine, amps, phases))))
    limit = PEAK_MARGIN * ceiling_v
    return amps * (limit / peak) if peak > limit else amps


def skip_reason(plan: Any, drive: Any, prior: tuple, prior_age_s: float | None) -> str:
    """Why no pre-scan is made ("" when it is)."""
    pre = plan.prescan
    if not pre.enabled:
        return "the plan does not ask for one ([prescan] enabled = false)"
    if not isinstance(drive, MultiSineDrive):
        return "the back-end cannot put out a multi-sine (no MultiSineDrive capability)"
    if prior and prior_age_s is not None and prior_age_s <= pre.table_fresh:
        return (f"an earlier run's table is fresh ({prior_age_s:.0f} s old, [prescan] table_fresh = "
                f"{pre.table_fresh:g} s)")
    return ""     # no table, a stale one, or one of unknown age (never counted fresh)


def plan_frequencies(plan: Any, points: list) -> np.ndarray:
    return np.unique(np.array([p.freq_hz for p in points], dtype=float))


class PreScan:
    """Runs the pre-scan on an engine (its drive, blocks and checks); ``run()`` returns the event."""

    def __init__(self, engine: Any):
        self.e = engine
        self.settings = engine.plan.prescan

    def run(self) -> TransferMeasured:
        e, pre = self.e, self.settings
        freqs = plan_frequencies(e.plan, e.points)
        grid = line_grid(freqs, e._fs, max_period_s=pre.window)
        lines = [_Line(float(f)) for f in grid.freqs_hz]
        phases = schroeder_phases(len(lines))
        target = min(p.peak_ratio for p in e.points)
        bound = pre.total_level * target
        first_v = e.controller.settings.first_drive_fraction * e.ceiling_v
        amps = np.full(len(lines), first_v)
        on0 = e.stats.drive_on_samples
        peak_max, levels, total = 0.0, 0, 0.0
        for level in range(pre.levels):
            amps = self._fit_ceiling(grid, amps, phases)
            peak_v = e._set_multisine(grid, amps, phases)
            peak_max = max(peak_max, peak_v)
            e._wait_drive_settled(S.PRESCAN)
            e._discard(int(round(e.plan.timing.tuning_discard * e._fs)), S.PRESCAN)
            n = grid.periods_for(pre.window) * grid.period_samples
            window = e._take(n, S.PRESCAN)
            e._react(e.checks.check_window(window, e._channels, peak_v, "pre-scan"), skip_ok=False)
            estimates = measure_lines(window, e._channels, e._fs, grid, e.rig)
            levels = level + 1
            total = self._update(lines, amps, estimates)
            pressure = sum(float(est.pressure_peak_pa) for est in estimates if est is not None)
            if e.checks.check_pressure(pressure, "pre-scan"):   # the sum of the lines bounds the total
                break
            if all(ln.rel_sigma <= pre.precision for ln in lines):
                break
            amps = self._next_amplitudes(lines, amps, bound)
        e._ramp_to_zero(S.PRESCAN)
        duration_s = (e.stats.drive_on_samples - on0) / e._fs
        seed_gain = [ln.gain if math.isfinite(ln.gain) else ln.upper for ln in lines]
        seed_rel = [ln.rel_sigma if math.isfinite(ln.gain) else 1.0 for ln in lines]
        # the table at the plan frequencies (a line rounded onto the grid stands for its frequency)
        idx = [int(np.argmin(np.abs(grid.freqs_hz - f))) for f in freqs]
        e.controller.seed_transfer(freqs, [seed_gain[i] for i in idx], [seed_rel[i] for i in idx])
        return TransferMeasured(
            freqs_hz=tuple(float(f) for f in freqs),
            ratio_per_volt=tuple(float(lines[i].gain) for i in idx),
            rel_sigma=tuple(float(lines[i].rel_sigma) for i in idx),
            phase_rad=tuple(float(lines[i].phase_rad) for i in idx),
            duration_s=float(duration_s), peak_drive_v=float(peak_max), total_ratio=float(total),
            levels=levels)

    # ------------------------------------------------------------------ internals
    def _fit_ceiling(self, grid: LineGrid, amps: np.ndarray, phases: np.ndarray) -> np.ndarray:
        return within_ceiling(grid, amps, phases, self.e.ceiling_v)

    @staticmethod
    def _update(lines: list[_Line], amps: np.ndarray, estimates: list) -> float:
        """Each line's gain from all levels so far; returns Σ|u'_k|/u_mean at this level."""
        total = 0.0
        for ln, a, est in zip(lines, amps, estimates):
            ln.drive_v = float(a)
            if est is None or a <= 0:
                continue
            r, sig = float(est.amplitude_ratio), float(est.sigma_ratio)
            ln.ratio, ln.sigma_ratio = r, sig
            total += r
            if r >= NOISE_SIGMAS * sig and r > 0:
                # the gain does not depend on the level (linear at these levels): combine the
                # levels by inverse variance of the gain
                g, var = r / a, (sig / a) ** 2
                if math.isfinite(ln.gain):
                    var_old = (ln.rel_sigma * ln.gain) ** 2
                    g = (g / var + ln.gain / var_old) / (1.0 / var + 1.0 / var_old)
                    var = 1.0 / (1.0 / var + 1.0 / var_old)
                ln.gain, ln.rel_sigma = g, math.sqrt(var) / g
                if est.drive_phasor is not None and abs(est.drive_phasor) > 0:
                    ln.phase_rad = float(np.angle(est.velocity_ref / est.drive_phasor))
            else:
                ln.upper = min(ln.upper, (max(r, 0.0) + NOISE_SIGMAS * sig) / a)
        return total

    def _next_amplitudes(self, lines: list[_Line], amps: np.ndarray, bound: float) -> np.ndarray:
        """Equal signal-to-noise over the lines, the sum of their |u'|/u_mean at ``bound``."""
        sig = np.array([ln.sigma_ratio if math.isfinite(ln.sigma_ratio) and ln.sigma_ratio > 0 else np.nan
                        for ln in lines])
        if np.all(np.isnan(sig)):
            return amps * 2.0
        sig = np.where(np.isnan(sig), np.nanmedian(sig), sig)
        goal = bound * sig / sig.sum()
        gain = np.array([ln.gain if math.isfinite(ln.gain) else ln.upper for ln in lines])
        new = np.where(np.isfinite(gain) & (gain > 0), goal / np.where(gain > 0, gain, 1.0), amps)
        step = self.e.controller.settings.clean_step_factor
        return np.minimum(new, amps * step)
