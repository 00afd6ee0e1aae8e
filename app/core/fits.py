"""Flame models fitted to measured FTF points, weighted by each point's uncertainty.

Models (time convention x(t) = Re{x̂ e^{+iωt}}, a delay gives a falling phase):

* ``n_tau``: Crocco's F = n e^{-iωτ} (parameters n, τ).
* ``delays``: a sum of K Gaussian distributed time delays,
  F = Σ_j n_j exp(-iωτ_j - ω²σ_j²/2) (Komarek & Polifke 2010, J. Eng. Gas Turbines Power
  132:061503), parameters n_j, τ_j, σ_j. With ``unit_gain`` the low-frequency limit
  F(0) = Σ n_j = 1 of a perfectly premixed flame is imposed (n_K = 1 - Σ_{j<K} n_j).
* ``conical``: the laminar conical flame with a uniform flow (Schuller, Durox & Candel 2003,
  Combust. Flame 134:21–34, conjugated from their e^{-iωt} form),
  F = n · 2/x² [1 - e^{-ix} - ix], x = ωτ_c, τ_c = R/(S_L cos α) (flame radius R, burning
  velocity S_L, half-angle α); parameters n (the low-frequency gain, 1 in their model) and τ_c.
  At low frequency its phase is -ωτ_c/3; at high frequency the gain falls as 2/x.

Delays are searched up to max(3 τ₀, 1/(2Δf)) (τ₀ from the phase slope, Δf the median spacing
of the frequencies): a longer delay aliases and cannot be identified from the points.

Weights: a point's error is taken as independent in gain and in phase, with standard
deviations σ_g = gain_ci95/k and σ_φ = phase_ci95/k (k the point's coverage factor, 1.96 by
default). To first order δF = e^{iφ}(δg + i g δφ), so the residual rotated by the measured
phase, e^{-iφ}(F_meas - F_model), has independent real and imaginary parts with standard
deviations σ_g and g σ_φ (derived). The fit minimises the sum of their squares
(scipy.optimize.least_squares); the parameter covariance is (JᵀJ)⁻¹ of the weighted
residuals, the usual first-order result for weighted least squares, not rescaled by the
residual; when the reduced χ² (χ²/(2N - p)) exceeds 1 the intervals are widened by its square
root (the model does not fit within the points' intervals). AICc = χ² + 2p + 2p(p+1)/(n-p-1)
(Akaike 1974 with the small-sample correction of Hurvich & Tsai 1989, n = 2N) chooses between
models and orders; a delays model gets at most one term per three points.

Imports: numpy, scipy and ``app.errors`` only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from app.errors import FlamebodeError

TWO_PI = 2.0 * np.pi
Z95 = 1.959963984540054


class FitError(FlamebodeError):
    """A fit that cannot be made (too few points, no usable uncertainties); says why."""


@dataclass(frozen=True)
class FitResult:
    model: str                      # "n_tau", "conical" or "delays"
    names: tuple[str, ...]          # parameter names, SI units (s for delays)
    values: np.ndarray
    covariance: np.ndarray
    chi2: float
    n_points: int
    unit_gain: bool = False
    k_terms: int = 1
    at_bound: tuple[str, ...] = ()  # parameters that ended on a search bound (not identified)

    @property
    def dof(self) -> int:
        return 2 * self.n_points - len(self.names)

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else math.nan

    @property
    def aic(self) -> float:
        """AICc: Akaike's criterion with the small-sample correction 2p(p+1)/(n-p-1) (Hurvich &
        Tsai 1989), n = 2N real residuals; without it a model with as many parameters as points
        wins on a short sweep."""
        p, n = len(self.names), 2 * self.n_points
        return self.chi2 + 2.0 * p + (2.0 * p * (p + 1) / (n - p - 1) if n - p - 1 > 0 else math.inf)

    @property
    def widened(self) -> bool:
        """True when the intervals were widened by √(reduced χ²) (the model does not fit the points'
        own intervals: common practice in weighted least squares, e.g. scipy's curve_fit)."""
        return self.reduced_chi2 > 1.0

    def stderr(self) -> np.ndarray:
        scale = self.reduced_chi2 if self.widened else 1.0
        return np.sqrt(np.clip(np.diag(self.covariance) * scale, 0.0, None))

    def params(self) -> dict[str, float]:
        return dict(zip(self.names, (float(v) for v in self.values)))

    def evaluate(self, freq_hz: np.ndarray | float) -> np.ndarray:
        """The fitted model at ``freq_hz`` (complex, e^{+iωt})."""
        return _model(self.model, self.values, np.asarray(freq_hz, dtype=float), self.k_terms, self.unit_gain)

    def describe(self) -> list[str]:
        """One line per parameter with its 95 % interval, then the fit's figures."""
        lines = []
        for name, v, s in zip(self.names, self.values, self.stderr()):
            if name.startswith(("tau", "sigma")):
                lines.append(f"{name.removesuffix('_s')} = {v * 1e3:.4g} ± {Z95 * s * 1e3:.2g} ms (95 %)")
            else:
                lines.append(f"{name} = {v:.4g} ± {Z95 * s:.2g} (95 %)")
        lines.append(f"reduced chi2 {self.reduced_chi2:.3g} over {self.n_points} points ({self.dof} degrees of "
                     f"freedom); AICc {self.aic:.4g}")
        if self.widened:
            lines.append(f"intervals widened by sqrt(reduced chi2) = {math.sqrt(self.reduced_chi2):.3g} (the points "
                         f"scatter about the model more than their own intervals say)")
        if self.at_bound:
            lines.append(f"not identified (at a search bound): {', '.join(self.at_bound)}; use fewer terms")
        return lines


def conical_response(x: np.ndarray | float) -> np.ndarray:
    """2/x² [1 - e^{-ix} - ix] (x = ωτ_c, e^{+iωt}); its series 1 - ix/3 - x²/12 + ix³/60 below
    x = 1e-2, where the bracket loses its digits to cancellation."""
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 1e-2
    xs = np.where(small, 1.0, x)
    exact = 2.0 / xs ** 2 * (1.0 - np.exp(-1j * xs) - 1j * xs)
    series = 1.0 - 1j * x / 3.0 - x ** 2 / 12.0 + 1j * x ** 3 / 60.0
    return np.where(small, series, exact)


def _model(model: str, p: np.ndarray, f: np.ndarray, k: int, unit_gain: bool) -> np.ndarray:
    w = TWO_PI * f
    if model == "n_tau":
        n, tau = p
        return n * np.exp(-1j * w * tau)
    if model == "conical":
        n, tau = p
        return n * conical_response(w * tau)
    n, tau, sigma = _split(p, k, unit_gain)
    return np.sum(n[:, None] * np.exp(-1j * np.outer(tau, w) - 0.5 * np.outer(sigma, w) ** 2), axis=0)


def _split(p: np.ndarray, k: int, unit_gain: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if unit_gain:
        n_free, rest = p[:k - 1], p[k - 1:]
        n = np.append(n_free, 1.0 - np.sum(n_free))
    else:
        n, rest = p[:k], p[k:]
    return n, rest[:k], rest[k:2 * k]


def _names(model: str, k: int, unit_gain: bool) -> tuple[str, ...]:
    if model == "n_tau":
        return ("n", "tau_s")
    if model == "conical":
        return ("n", "tau_c_s")
    ns = [f"n{j + 1}" for j in range(k - 1 if unit_gain else k)]
    return tuple(ns + [f"tau{j + 1}_s" for j in range(k)] + [f"sigma{j + 1}_s" for j in range(k)])


def _checked(freq_hz, ftf, gain_ci95, phase_ci95_rad, coverage):
    f = np.asarray(freq_hz, dtype=float)
    F = np.asarray(ftf, dtype=complex)
    k = np.broadcast_to(np.asarray(coverage, dtype=float), f.shape)
    sg = np.asarray(gain_ci95, dtype=float) / k
    sp = np.asarray(phase_ci95_rad, dtype=float) / k
    ok = np.isfinite(f) & np.isfinite(F) & np.isfinite(sg) & np.isfinite(sp) & (sg > 0) & (sp > 0) & (f > 0)
    return f[ok], F[ok], sg[ok], sp[ok], int(np.count_nonzero(~ok))


def _delay_guess(f: np.ndarray, F: np.ndarray) -> float:
    """τ from the slope of the unwrapped phase against ω (least squares through the origin)."""
    order = np.argsort(f)
    w, ph = TWO_PI * f[order], np.unwrap(np.angle(F[order]))
    ph -= TWO_PI * np.round(ph[0] / TWO_PI)      # the branch through the origin at the first point
    tau = -float(np.dot(w, ph) / np.dot(w, w))
    return max(tau, 1e-6)


def fit(freq_hz, ftf, gain_ci95, phase_ci95_rad, model: str = "n_tau", k_terms: int = 1,
        unit_gain: bool = False, coverage: float | np.ndarray = Z95) -> FitResult:
    """Fit ``model`` ("n_tau", "conical" or "delays" with ``k_terms`` Gaussian terms) to complex FTF points.

    Points without a finite value or a positive interval are left out; too few remaining points
    for the model's parameters raise FitError saying how many are needed."""
    if model not in ("n_tau", "conical", "delays"):
        raise FitError(f"unknown flame model {model!r}: use 'n_tau', 'conical' or 'delays'")
    k = int(k_terms) if model == "delays" else 1
    if k < 1 or k > 4:
        raise FitError(f"the number of delay terms must be 1 to 4, got {k_terms!r}")
    f, F, sg, sp, dropped = _checked(freq_hz, ftf, gain_ci95, phase_ci95_rad, coverage)
    names = _names(model, k, unit_gain)
    need = (len(names) + 2) // 2 + 1          # more real residuals (2 per point) than parameters, with margin
    if f.size < need:
        why = f" ({dropped} without a usable value or interval)" if dropped else ""
        raise FitError(f"{model}{f' with {k} term(s)' if model == 'delays' else ''} has {len(names)} parameters "
                       f"and needs at least {need} points with a value and an interval; {f.size} given{why}")
    g = np.abs(F)
    rot = np.exp(-1j * np.angle(F))
    scale = np.concatenate([1.0 / sg, 1.0 / np.maximum(g * sp, 1e-300)])

    def residual(p: np.ndarray) -> np.ndarray:
        r = rot * (F - _model(model, p, f, k, unit_gain))
        return np.concatenate([r.real, r.imag]) * scale

    tau0 = _delay_guess(f, F)
    # delays beyond half the inverse frequency spacing alias (e^{-iωτ} sampled every Δf repeats
    # with period 1/Δf): they cannot be told apart, so they are not searched
    spacing = float(np.median(np.diff(np.unique(f)))) if np.unique(f).size > 1 else float(f.max())
    tau_max = max(3.0 * tau0, 0.5 / spacing)
    if model == "n_tau":
        starts = [np.array([float(np.median(g)), tau0])]
        lower, upper = [-np.inf, 0.0], [np.inf, tau_max]
    elif model == "conical":
        # the low-frequency phase is -ωτ_c/3, but the phase levels off above x ≈ 2π: several starts
        g_low = float(g[np.argmin(f)])
        starts = [np.array([g_low, m * tau0]) for m in (1.0, 2.0, 3.0, 4.5, 6.0)]
        lower, upper = [-np.inf, 0.0], [np.inf, 3.0 * tau_max]
    else:
        from itertools import combinations

        g_low = float(g[np.argmin(f)])
        grid = (0.35, 0.6, 0.85, 1.0, 1.2, 1.6, 2.2, 3.0)
        starts = []
        for taus in combinations(grid, k):       # delays spread over the range the phase slope suggests
            n = np.full(k, (1.0 if unit_gain else g_low) / k)
            starts.append(np.concatenate([n[:k - 1] if unit_gain else n, tau0 * np.array(taus),
                                          np.full(k, 0.15 * tau0)]))
        starts = starts[:: max(1, len(starts) // 12)]   # about a dozen starts
        n_len = k - 1 if unit_gain else k
        lower = [-np.inf] * n_len + [0.0] * k + [0.0] * k
        upper = [np.inf] * n_len + [tau_max] * k + [tau_max] * k
    best = None
    for x0 in starts:
        x0 = np.clip(x0, np.array(lower) + 1e-12, np.array(upper) - 1e-12)
        sol = least_squares(residual, x0, bounds=(lower, upper), method="trf", x_scale="jac")
        if best is None or sol.cost < best.cost:
            best = sol
    J = best.jac
    try:
        cov = np.linalg.inv(J.T @ J)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(J.T @ J)
    chi2 = float(np.sum(best.fun ** 2))
    lo, hi = np.array(lower, dtype=float), np.array(upper, dtype=float)
    span = np.where(np.isfinite(hi - lo), hi - lo, np.abs(best.x) + 1.0)
    near = (np.abs(best.x - lo) <= 1e-6 * span) | (np.abs(best.x - hi) <= 1e-6 * span)
    bounded = tuple(n for n, b, l_ in zip(names, near, lo) if b and (n.startswith("tau") or n.startswith("sigma"))
                    and not (l_ == 0.0 and n.startswith("sigma") and k == 1))
    return FitResult(model, names, best.x, cov, chi2, int(f.size), unit_gain, k, bounded)


def choose_delays(freq_hz, ftf, gain_ci95, phase_ci95_rad, k_max: int = 3, unit_gain: bool = False,
                  coverage: float | np.ndarray = Z95) -> tuple[FitResult, list[FitResult]]:
    """Fits with 1..k_max Gaussian terms (as many as the points allow); the one of lowest AIC first."""
    if k_max < 1:
        raise FitError(f"the number of delay terms must be 1 to 4, got {k_max!r}")
    fits = []
    n_points = int(np.count_nonzero(np.isfinite(np.asarray(freq_hz, dtype=float))))
    k_max = max(1, min(k_max, n_points // 3))     # at least three points per term (3 parameters each)
    for k in range(1, k_max + 1):
        try:
            fits.append(fit(freq_hz, ftf, gain_ci95, phase_ci95_rad, "delays", k, unit_gain, coverage))
        except FitError:
            if not fits:
                raise
            break
    return min(fits, key=lambda r: r.aic), fits
