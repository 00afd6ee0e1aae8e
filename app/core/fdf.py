"""Amplitude dependence of a measured flame response (FDF): is the response at the lowest
amplitudes the same within the uncertainties, and a saturation model fitted across amplitudes.

* ``amplitude_independence``: at each frequency measured at two or more amplitudes, the two
  lowest are compared. With each point's error independent in gain and phase (σ_g, σ_φ, from
  its 95 % interval and coverage factor), the difference rotated by the mean phase has
  independent real and imaginary parts of variance σ_g1² + σ_g2² and ḡ²(σ_φ1² + σ_φ2²) (first
  order, derived); their normalised sum of squares is χ² with 2 degrees of freedom, whose
  survival function is exp(-χ²/2). A frequency "fails" below ``alpha`` (5 %): at a linear flame
  that happens at 5 % of the frequencies, by construction.
* ``fit_saturation``: the response of a flame whose heat release is clipped at ±a_s,
  Q'/Q̄ = clip(F_lin u'/ū, ±a_s), is F(f, a) = F_lin(f) N(a_s / (|F_lin(f)| a)) with the
  describing function of a saturation N(γ) = (2/π)(asin γ + γ√(1-γ²)) for γ < 1, else 1
  (Gelb & Vander Velde 1968); the phase does not change. |F_lin| is taken per frequency from
  the lowest amplitude, and a_s fitted by weighted least squares on the gains.

Imports: numpy, scipy and ``app.errors`` (through ``app.core.fits``) only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from .fits import Z95, FitError


def saturation_df(gamma: np.ndarray | float) -> np.ndarray:
    """N(γ) of a saturation: γ = limit / input amplitude (1 when the input stays inside)."""
    g = np.asarray(gamma, dtype=float)
    inside = np.clip(g, 0.0, 1.0)
    n = (2.0 / np.pi) * (np.arcsin(inside) + inside * np.sqrt(1.0 - inside ** 2))
    return np.where(g >= 1.0, 1.0, n)


@dataclass(frozen=True)
class Comparison:
    freq_hz: float
    amplitudes: tuple[float, float]
    chi2: float
    p_value: float
    fails: bool


def amplitude_independence(points: list[tuple[float, float, complex, float, float, float]],
                           alpha: float = 0.05) -> list[Comparison]:
    """``points``: (freq_hz, amplitude_ratio, F, gain_ci95, phase_ci95_rad, coverage factor).

    One comparison per frequency with two or more amplitudes (the two lowest)."""
    by_f: dict[float, list[tuple[float, complex, float, float]]] = {}
    for f, a, F, gci, pci, k in points:
        if not (math.isfinite(gci) and math.isfinite(pci) and gci > 0 and pci > 0):
            continue
        by_f.setdefault(round(float(f), 6), []).append((float(a), complex(F), gci / k, pci / k))
    out = []
    for f, rows in sorted(by_f.items()):
        if len(rows) < 2:
            continue
        (a1, F1, sg1, sp1), (a2, F2, sg2, sp2) = sorted(rows)[:2]
        mean_phase = np.angle(F1 + F2)
        d = (F2 - F1) * np.exp(-1j * mean_phase)
        g = 0.5 * (abs(F1) + abs(F2))
        chi2 = d.real ** 2 / (sg1 ** 2 + sg2 ** 2) + d.imag ** 2 / (g ** 2 * (sp1 ** 2 + sp2 ** 2))
        p = math.exp(-0.5 * chi2)
        out.append(Comparison(f, (a1, a2), float(chi2), p, p < alpha))
    return out


CHI2_1DOF_95 = 3.841458820694124     # χ²(1) at 95 % (scipy.stats.chi2.ppf(0.95, 1))


@dataclass(frozen=True)
class SaturationFit:
    limit: float                 # a_s, peak Q'/Q̄ the flame reaches (a lower bound when ``unsaturated``)
    stderr: float
    chi2: float
    n_points: int
    unsaturated: bool = False    # no point is clipped at the fitted limit: only a lower bound is known

    def describe(self) -> str:
        dof = max(self.n_points - 1, 1)
        if self.unsaturated:
            return (f"saturation: none seen; the heat release follows the forcing up to |Q'|/Q_mean = "
                    f"{self.limit:.3g} (the limit, if any, is above that), reduced chi2 {self.chi2 / dof:.3g} over "
                    f"{self.n_points} points")
        return (f"saturation of the heat release at |Q'|/Q_mean = {self.limit:.3g} ± {Z95 * self.stderr:.2g} (95 %), "
                f"reduced chi2 {self.chi2 / dof:.3g} over {self.n_points} points")


def fit_saturation(points: list[tuple[float, float, complex, float, float, float]]) -> SaturationFit:
    """a_s of the clip model from the gains at the amplitudes above each frequency's lowest."""
    by_f: dict[float, list[tuple[float, float, float]]] = {}
    for f, a, F, gci, _pci, k in points:
        if math.isfinite(gci) and gci > 0:
            by_f.setdefault(round(float(f), 6), []).append((float(a), abs(complex(F)), gci / k))
    rows = []
    for f, pts in by_f.items():
        pts.sort()
        if len(pts) < 2:
            continue
        a0, g_lin, s0 = pts[0]
        rows += [(a, g, s, g_lin, s0) for a, g, s in pts[1:]]
    if len(rows) < 2:
        raise FitError(f"a saturation fit needs at least 2 points above the lowest amplitude at their frequency; "
                       f"{len(rows)} given")
    a, g, s, g_lin, s0 = (np.array(c) for c in zip(*rows))

    def residual(p: np.ndarray) -> np.ndarray:
        gamma = p[0] / (g_lin * a)
        model = g_lin * saturation_df(gamma)
        # the lowest amplitude's gain carries its error into the model with the sensitivity
        # d(g_lin N(a_s/(g_lin a)))/d g_lin = N - γ N'(γ), N' = (4/π)√(1-γ²) below 1 (derived)
        slope = saturation_df(gamma) - gamma * np.where(gamma < 1.0, (4.0 / np.pi) * np.sqrt(
            np.clip(1.0 - gamma ** 2, 0.0, None)), 0.0)
        return (g - model) / np.sqrt(s ** 2 + (s0 * slope) ** 2)

    start = float(np.median(g * a))          # the clipped heat-release amplitude is near a_s
    sol = least_squares(residual, [start], bounds=([1e-9], [np.inf]))
    chi2 = float(np.sum(sol.fun ** 2))
    chi2_linear = float(np.sum(residual(np.array([1e9 * float(np.max(g_lin * a))])) ** 2))   # no clip at all
    if np.all(sol.x[0] >= g_lin * a) or chi2_linear - chi2 < CHI2_1DOF_95:
        # every point below the fitted limit (γ ≥ 1, N = 1), or a clip that fits no better than none
        # (likelihood-ratio test, 1 degree of freedom, 5 %): the data bound a_s from below only, by
        # the largest heat-release amplitude the linear flame reached
        return SaturationFit(float(np.max(g_lin * a)), math.nan, chi2_linear, int(a.size), unsaturated=True)
    cov = np.linalg.pinv(sol.jac.T @ sol.jac)
    return SaturationFit(float(sol.x[0]), float(math.sqrt(max(cov[0, 0], 0.0))), chi2, int(a.size))
