"""Amplitude control: which drive voltage gives the target velocity amplitude at the reference plane.

Pure arithmetic, no I/O and no clock. The engine asks a :class:`PointTuner` for a voltage,
measures the velocity amplitude ratio |u'_ref|/u_mean over a short window, hands the
measurement back, and gets a :class:`Decision`: measure again at a new voltage, converged,
unreachable under the ceiling, or not converged within the allowed steps.

* Soft start: no tuning window should force much harder than the target (a flame close to
  blow-off or flash-back must not see ten times the planned amplitude). The very first point
  starts very low, at a small fraction of the ceiling, and grows in bounded factors. Every
  later point starts from a *cautious* prediction of the drive-to-velocity gain
  |u'_ref/u_mean| per volt learned so far (interpolated in log-magnitude, or extrapolated
  with the full local slope but never below the nearest learned gain) and, when given, an
  earlier run's table rescaled to this run: a point beyond the learned range starts at a
  fraction of the predicted voltage, smaller where this sweep's predictions have proved
  poor (``soft_start_max`` over the recent prediction errors). The first window then
  measures the gain at a safe amplitude and the next step lands on the target.
* Updates are secant steps on (log voltage, log amplitude); when the last two pairs are
  inconsistent (slope outside a sane band, e.g. noise or a nonlinear driver) the step falls
  back to the proportional one (slope 1, the linear-acoustics answer). A window whose
  forcing line is lost in the noise (below ``noise_sigmas`` standard deviations) steps up
  only as far as the noise bound allows. An upward step is limited to a factor
  ``max_step_factor``; no request is ever above the ceiling.
* An unreachable target is reported early: measured below target at the ceiling, or a
  prediction clearly above the ceiling after a step near it.

* Seeded by a pre-scan (``AmplitudeController.seed_transfer``): the drive-to-velocity gain
  measured at every plan frequency with a low multi-sine. A point opens at the voltage the
  seed predicts (lower only where its uncertainty is large), corrected for the amplitude
  dependence the sweep has seen so far: log(measured / seed gain) fitted as α + β V² over the
  points already tuned (a loudspeaker's output compresses roughly with the square of the
  drive at moderate levels; from memory), each term shrunk toward zero while few points
  support it.

All amplitudes here are peak values. The phase of the drive-to-velocity transfer is not
needed to set an amplitude, so only its magnitude is learned.

Imports: standard library and numpy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Literal, Sequence

import numpy as np

DecisionKind = Literal["measure", "converged", "unreachable", "not-converged"]


@dataclass(frozen=True)
class ControllerSettings:
    ceiling_v: float
    tolerance: float = 0.05              # max relative deviation of the amplitude from the target
    max_steps: int = 8                   # tuning windows per point
    first_drive_fraction: float = 0.002  # first voltage of the very first point, of the ceiling
    max_step_factor: float = 4.0         # one step raises the voltage by at most this factor
    soft_start_max: float = 1.5          # aim: no first window above this multiple of the target
    noise_sigmas: float = 3.0            # a ratio below this many standard deviations is not measured
    clean_sigmas: float = 10.0           # a ratio above this many standard deviations is a clean measurement
    clean_step_factor: float = 50.0      # ... from which one step may raise the voltage by this factor
    slope_band: tuple[float, float] = (0.33, 3.0)   # sane d(log a)/d(log V)
    near_ceiling: float = 0.7            # a step at >= this fraction of the ceiling is "near" it
    unreachable_margin: float = 0.25     # predicted voltage above (1 + margin) * ceiling: unreachable
    extrapolation_limit: float = 3.0     # an extrapolated gain stays within this factor of the nearest
    extrapolation_caution: float = 0.0625  # first voltage of an extrapolated point, at most, of the prediction
    interpolation_caution: float = 0.9   # first voltage between learned points, of the prediction
    caution_floor: float = 0.03          # never start a point below this fraction of its prediction


@dataclass(frozen=True)
class TuningSample:
    drive_v: float
    measured_ratio: float
    window_s: float
    measurable: bool = True     # False: the forcing line was lost in the noise
    clean: bool = True          # True: well above the noise (clean_sigmas), good for a secant slope


@dataclass(frozen=True)
class Decision:
    kind: DecisionKind
    drive_v: float            # next voltage to measure at, or the voltage to record at
    reason: str = ""


class TransferMemory:
    """The drive-to-velocity gain (ratio per volt) learned so far, and an optional prior table."""

    def __init__(self, prior: Sequence[tuple[float, float]] = (), extrapolation_limit: float = 3.0):
        self._limit_log = math.log(extrapolation_limit)
        self._learned: dict[tuple[float, float], float] = {}
        pr = sorted((float(f), float(g)) for f, g in prior if f > 0 and g > 0)
        self._prior_f = np.array([p[0] for p in pr])
        self._prior_lg = np.log(np.array([p[1] for p in pr])) if pr else np.array([])

    def learn(self, freq_hz: float, target_ratio: float, drive_v: float, measured_ratio: float) -> None:
        if drive_v > 0 and measured_ratio > 0 and math.isfinite(measured_ratio):
            self._learned[(round(freq_hz, 6), round(target_ratio, 9))] = measured_ratio / drive_v

    def strongest_gain(self) -> float:
        """The largest ratio per volt learned so far at any frequency (a resonance seen once may be
        met again further on: a new point never opens above the target at that gain)."""
        return max(self._learned.values(), default=0.0)

    def learned_at_or_above(self, freq_hz: float, target_ratio: float) -> bool:
        """True when a gain was learned at ``freq_hz`` for an amplitude at or above ``target_ratio``."""
        return any(math.isclose(f, freq_hz, rel_tol=1e-9) and a >= target_ratio * (1 - 1e-9)
                   for f, a in self._learned)

    @property
    def n_learned(self) -> int:
        return len(self._learned)

    def table(self, target_ratio: float | None = None) -> tuple[tuple[float, float], ...]:
        """(freq_hz, ratio per volt) learned so far, one per frequency: a prior for a later run."""
        if not self._learned:
            return ()
        target = target_ratio or next(iter(self._learned))[1]
        fs, lg = self._per_frequency(target)
        return tuple((float(f), float(np.exp(g))) for f, g in zip(fs, lg))

    def _per_frequency(self, target_ratio: float) -> tuple[np.ndarray, np.ndarray]:
        """One log-gain per learned frequency: the entry nearest the target amplitude (log scale)."""
        best: dict[float, tuple[float, float]] = {}
        for (f, a), g in self._learned.items():
            d = abs(math.log(a / target_ratio))
            if f not in best or d < best[f][0]:
                best[f] = (d, g)
        fs = np.array(sorted(best))
        return fs, np.log(np.array([best[f][1] for f in fs]))

    def _prior_at(self, freqs_hz: np.ndarray) -> np.ndarray:
        return np.interp(freqs_hz, self._prior_f, self._prior_lg)   # held at the ends

    def extrapolation_distance(self, freq_hz: float) -> float:
        """0 inside the learned frequency range (or with a prior); else the relative distance to it."""
        if self._prior_f.size or not self._learned:
            return 0.0
        fs = np.array([f for f, _ in self._learned])
        lo, hi = float(fs.min()), float(fs.max())
        if lo <= freq_hz <= hi:
            return 0.0
        return abs(freq_hz - (lo if freq_hz < lo else hi)) / freq_hz

    def predict(self, freq_hz: float, target_ratio: float) -> float | None:
        """Predicted ratio per volt at ``freq_hz``, or None when nothing is known yet."""
        fs, lg = self._per_frequency(target_ratio)
        has_prior = self._prior_f.size > 0
        if fs.size and np.any(np.isclose(fs, freq_hz, rtol=1e-9, atol=0.0)):
            return float(np.exp(lg[np.isclose(fs, freq_hz, rtol=1e-9, atol=0.0)][0]))
        if has_prior:
            base = self._prior_at(np.array([freq_hz]))[0]
            if fs.size == 0:
                return float(np.exp(base))
            # rescale the prior's shape to this run: log-correction interpolated between learned points
            corr = lg - self._prior_at(fs)
            return float(np.exp(base + np.interp(freq_hz, fs, corr)))
        if fs.size == 0:
            return None
        if fs[0] <= freq_hz <= fs[-1] or fs.size == 1:
            return float(np.exp(np.interp(freq_hz, fs, lg)))
        return float(np.exp(self._extrapolate(fs, lg, freq_hz)))

    def _extrapolate(self, fs: np.ndarray, lg: np.ndarray, freq_hz: float) -> float:
        """Half the slope of the line in log-gain through the two nearest learned points, limited in size.

        Speaker and duct resonances make the gain swing by tens of percent between neighbouring
        points; a damped slope is safer than a full one (less overshoot past a resonance)."""
        if freq_hz > fs[-1]:
            (f1, g1), (f2, g2) = (fs[-2], lg[-2]), (fs[-1], lg[-1])
        else:
            (f1, g1), (f2, g2) = (fs[1], lg[1]), (fs[0], lg[0])
        value = g2 + 0.5 * (g2 - g1) / (f2 - f1) * (freq_hz - f2)
        return float(np.clip(value, g2 - self._limit_log, g2 + self._limit_log))


    def predict_cautious(self, freq_hz: float, target_ratio: float) -> tuple[float | None, str]:
        """(ratio per volt, how it was found) erring on the HIGH side, so the voltage it gives errs low.

        ``exact``: learned at this frequency; ``prior``: an earlier run's table rescaled to this
        run; ``inside``: the larger of the two learned neighbours (a resonance may lie between);
        ``beyond``: the full local slope in log-gain through the two nearest learned points, never
        below the nearest one (a rising gain is followed, a falling one is not trusted); ``none``:
        nothing learned yet."""
        fs, lg = self._per_frequency(target_ratio)
        if fs.size and np.any(np.isclose(fs, freq_hz, rtol=1e-9, atol=0.0)):
            return float(np.exp(lg[np.isclose(fs, freq_hz, rtol=1e-9, atol=0.0)][0])), "exact"
        if self._prior_f.size:
            return self.predict(freq_hz, target_ratio), "prior"
        if fs.size == 0:
            return None, "none"
        if fs[0] <= freq_hz <= fs[-1]:
            i = int(np.searchsorted(fs, freq_hz))
            return float(np.exp(max(lg[i - 1], lg[i]))), "inside"
        if fs.size == 1:
            return float(np.exp(lg[0])), "beyond"
        if freq_hz > fs[-1]:
            (f1, g1), (f2, g2) = (fs[-2], lg[-2]), (fs[-1], lg[-1])
        else:
            (f1, g1), (f2, g2) = (fs[1], lg[1]), (fs[0], lg[0])
        value = g2 + (g2 - g1) / (f2 - f1) * (freq_hz - f2)
        return float(np.exp(np.clip(value, g2, g2 + self._limit_log))), "beyond"

@dataclass
class PointTuner:
    """Tunes one point; ``history`` keeps every (voltage, measured ratio, window) step."""

    settings: ControllerSettings
    freq_hz: float
    target_ratio: float
    start_drive_v: float
    history: list[TuningSample] = field(default_factory=list)
    proportional: bool = False
    predicted_gain: float | None = None          # ratio per volt the start voltage was based on
    on_first: Callable[[float], None] | None = None   # told measured/predicted gain after window 1

    def first_drive(self) -> float:
        return min(self.start_drive_v, self.settings.ceiling_v)

    def within(self, measured_ratio: float) -> bool:
        return abs(measured_ratio / self.target_ratio - 1.0) <= self.settings.tolerance

    def best(self) -> TuningSample:
        """The step whose amplitude came closest to the target (log distance)."""
        ok = [s for s in self.history if s.measurable and s.measured_ratio > 0 and math.isfinite(s.measured_ratio)]
        if not ok:
            return self.history[-1]
        return min(ok, key=lambda s: abs(math.log(s.measured_ratio / self.target_ratio)))

    def update(self, drive_v: float, measured_ratio: float, window_s: float, sigma_ratio: float = 0.0) -> Decision:
        """One measured window; ``sigma_ratio`` is the standard deviation of ``measured_ratio``."""
        s = self.settings
        measurable = (measured_ratio > 0 and math.isfinite(measured_ratio)
                      and not measured_ratio < s.noise_sigmas * sigma_ratio)
        if (not self.history and self.on_first is not None and self.predicted_gain and measurable
                and drive_v > 0):
            self.on_first(measured_ratio / drive_v / self.predicted_gain)
        known_noise = math.isfinite(sigma_ratio) and sigma_ratio > 0
        clean = measurable and known_noise and measured_ratio >= s.clean_sigmas * sigma_ratio
        self.history.append(TuningSample(drive_v, measured_ratio, window_s, measurable, clean))
        if measurable and self.within(measured_ratio):
            return Decision("converged", drive_v, f"within {s.tolerance:.1%} of the target")
        if clean or (measurable and not known_noise):
            wanted = self._next_voltage(drive_v, measured_ratio, clean)
        elif known_noise and math.isfinite(measured_ratio):
            # noisy or lost in the noise: the true ratio is below r + noise_sigmas σ (with ~99.9 %
            # confidence), so a step to the target at that bound cannot overshoot it
            bound = max(measured_ratio, 0.0) + s.noise_sigmas * sigma_ratio
            wanted = drive_v * min(max(self.target_ratio / bound, 1.0 / s.clean_step_factor), s.clean_step_factor)
        else:
            wanted = drive_v * s.max_step_factor      # nothing known: up, gently
        at_ceiling = drive_v >= 0.98 * s.ceiling_v
        if at_ceiling and measured_ratio < self.target_ratio * (1.0 - s.tolerance):
            return Decision("unreachable", s.ceiling_v,
                            f"{measured_ratio:.4g} at the ceiling {s.ceiling_v:g} V, target {self.target_ratio:.4g}")
        if drive_v >= s.near_ceiling * s.ceiling_v and wanted > (1.0 + s.unreachable_margin) * s.ceiling_v:
            return Decision("unreachable", s.ceiling_v,
                            f"needs about {wanted:.3g} V, above the ceiling {s.ceiling_v:g} V")
        if len(self.history) >= s.max_steps:
            best = self.best()
            return Decision("not-converged", best.drive_v,
                            f"{len(self.history)} steps without reaching {s.tolerance:.1%}; "
                            f"best {best.measured_ratio:.4g} at {best.drive_v:.4g} V")
        return Decision("measure", min(wanted, s.ceiling_v))

    def _next_voltage(self, drive_v: float, measured_ratio: float, clean: bool) -> float:
        """Secant in log-log on the last two distinct clean windows, else proportional.

        Upward, the slope is taken as at least 1 (a sub-linear slope would lengthen the step
        past what linear acoustics predicts: undershoot instead), and the step is limited to
        ``clean_step_factor`` from a clean window, ``max_step_factor`` where the noise is unknown."""
        s = self.settings
        slope = 1.0
        prev = self._previous_distinct(drive_v)
        if prev is not None and clean and not self.proportional:
            dv = math.log(drive_v / prev.drive_v)
            da = math.log(measured_ratio / prev.measured_ratio)
            candidate = da / dv
            if s.slope_band[0] <= candidate <= s.slope_band[1]:
                slope = candidate
        factor = (self.target_ratio / measured_ratio) ** (1.0 / slope)
        if factor > 1.0:
            factor = min(factor, (self.target_ratio / measured_ratio) ** (1.0 / max(slope, 1.0)))
        # only upward steps are limited (ramping up gently); lowering the drive is always safe
        return drive_v * min(factor, s.clean_step_factor if clean else s.max_step_factor)

    def _previous_distinct(self, drive_v: float) -> TuningSample | None:
        for sample in reversed(self.history[:-1]):
            if (sample.clean and sample.measured_ratio > 0 and math.isfinite(sample.measured_ratio)
                    and abs(math.log(sample.drive_v / drive_v)) > 1e-3):
                return sample
        return None


class AmplitudeController:
    """Starts a tuner per point and learns from every measured step.

    ``ERROR_MEMORY`` points' prediction errors set how cautiously the next point opens.

    ``proportional=True`` is the plain comparison controller: each point starts from the
    previous point's final voltage and steps proportionally, with no learned prediction.
    """

    ERROR_MEMORY = 5
    SEED_CORRECTION_LIMIT = 1.3

    def __init__(self, settings: ControllerSettings, prior: Sequence[tuple[float, float]] = (),
                 proportional: bool = False):
        self.settings = settings
        self.memory = TransferMemory(() if proportional else prior, settings.extrapolation_limit)
        self.proportional = proportional
        self._last_drive_v: float | None = None
        self._errors: list[float] = []      # measured / predicted gain at the first window of recent points
        self._seed: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None   # f, log gain, rel sigma
        self._seed_residuals: dict[float, tuple[float, float]] = {}          # f -> (V², log(meas/seed))

    # ------------------------------------------------------------- pre-scan seed
    def seed_transfer(self, freqs_hz: Sequence[float], ratio_per_volt: Sequence[float],
                      rel_sigma: Sequence[float]) -> None:
        """Open every later point from this table (the pre-scan's), finite positive entries only."""
        f = np.asarray(freqs_hz, dtype=float)
        g = np.asarray(ratio_per_volt, dtype=float)
        r = np.asarray(rel_sigma, dtype=float)
        ok = np.isfinite(f) & np.isfinite(g) & (g > 0) & (f > 0)
        if not ok.any():
            self._seed = None
            return
        order = np.argsort(f[ok])
        r_ok = np.where(np.isfinite(r[ok]), r[ok], 1.0)
        self._seed = (f[ok][order], np.log(g[ok][order]), np.clip(r_ok[order], 0.0, 10.0))
        self._seed_residuals.clear()

    @property
    def seeded(self) -> bool:
        return self._seed is not None

    def seed_gain(self, freq_hz: float) -> tuple[float, float] | None:
        """(ratio per volt, relative sigma) of the seed at ``freq_hz`` (log-interpolated), or None."""
        if self._seed is None:
            return None
        f, lg, r = self._seed
        return float(np.exp(np.interp(freq_hz, f, lg))), float(np.interp(freq_hz, f, r))

    def _seed_correction(self, drive_v: float) -> float:
        """exp(α + β x), x = (V / ceiling)²: the amplitude dependence seen so far against the seed.

        1 with no points; ridge toward zero (one point moves α by half its residual, β needs a
        spread of levels), and never beyond a factor ``SEED_CORRECTION_LIMIT`` either way."""
        if not self._seed_residuals:
            return 1.0
        c2 = self.settings.ceiling_v ** 2
        x = np.array([p[0] for p in self._seed_residuals.values()]) / c2
        y = np.array([p[1] for p in self._seed_residuals.values()])
        a = np.vstack([np.ones_like(x), x]).T
        coef = np.linalg.solve(a.T @ a + np.diag([1.0, 0.05]), a.T @ y)
        limit = math.log(self.SEED_CORRECTION_LIMIT)
        return float(np.exp(np.clip(coef[0] + coef[1] * min(drive_v * drive_v / c2, 1.0), -limit, limit)))

    def start_point(self, freq_hz: float, target_ratio: float) -> PointTuner:
        s = self.settings
        start = s.first_drive_fraction * s.ceiling_v
        gain: float | None = None
        if self.proportional:
            if self._last_drive_v is not None:
                start = self._last_drive_v
        elif self._seed is not None and not (self.memory.predict_cautious(freq_hz, target_ratio)[1] == "exact"):
            seed_g, rel = self.seed_gain(freq_hz)
            start = target_ratio / seed_g
            for _ in range(4):          # the correction depends on the voltage it gives
                start = target_ratio / (seed_g * self._seed_correction(start))
            gain = target_ratio / start
            if rel > 0.5 * s.tolerance:   # an uncertain seed: open lower, within the soft-start promise
                start /= 1.0 + 2.0 * rel
        else:
            gain, kind = self.memory.predict_cautious(freq_hz, target_ratio)
            if gain is not None and gain > 0:
                start = target_ratio / gain * self._caution(kind, freq_hz, target_ratio)
                if kind == "beyond":   # and never above what the strongest gain seen so far allows
                    start = min(start, target_ratio / self.memory.strongest_gain())
        start = max(start, 1e-7 * s.ceiling_v)   # only to keep it positive
        return PointTuner(s, freq_hz, target_ratio, start, proportional=self.proportional,
                          predicted_gain=gain, on_first=self._note_prediction_error)

    def _caution(self, kind: str, freq_hz: float, target_ratio: float) -> float:
        """Fraction of the predicted voltage to open a point with.

        Beyond the learned range a resonance may lie (the gain can grow several-fold between
        neighbouring points): open at ``extrapolation_caution`` of the prediction, lower still
        where recent predictions fell short by a factor J (soft_start_max / (1.2 J)); the next
        window, measured at a safe level, corrects. At a learned frequency, below or at a
        learned amplitude, the prediction is used as it is."""
        s = self.settings
        if kind == "exact":
            return 1.0 if self.memory.learned_at_or_above(freq_hz, target_ratio) else s.interpolation_caution
        if kind == "inside":
            return s.interpolation_caution
        worst = max(self._errors, default=1.0)
        adaptive = s.soft_start_max / (1.2 * max(worst, 1.0))
        if kind == "prior":   # an earlier run's table: trusted once this run has confirmed it
            return float(np.clip(adaptive, s.caution_floor, 1.0)) if self._errors else s.extrapolation_caution
        return float(np.clip(min(s.extrapolation_caution, adaptive), s.caution_floor, 1.0))

    def _note_prediction_error(self, ratio: float) -> None:
        """Measured / predicted gain at a point's first window (kept for the last few points)."""
        if math.isfinite(ratio) and ratio > 0:
            self._errors.append(ratio)
            del self._errors[:-self.ERROR_MEMORY]

    def learn(self, freq_hz: float, target_ratio: float, drive_v: float, measured_ratio: float) -> None:
        self.memory.learn(freq_hz, target_ratio, drive_v, measured_ratio)
        if self._seed is not None and drive_v > 0 and measured_ratio > 0 and math.isfinite(measured_ratio):
            seed_g, rel = self.seed_gain(freq_hz)
            if rel <= 0.25:
                self._seed_residuals[round(freq_hz, 6)] = (drive_v * drive_v,
                                                           math.log(measured_ratio / drive_v / seed_g))
        if drive_v > 0:
            self._last_drive_v = drive_v
