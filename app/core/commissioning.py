"""Commissioning checks of a rig's sensors, as pure estimates on recorded numbers.

* ``dark_offset``: the light channel's mean and noise with the flame off; the mean's standard
  uncertainty from the scatter of segment means, so slow drift and coloured noise count
  (GUM type A evaluation, JCGM 100:2008 §4.2, on segment means).
* ``light_linearity``: the mean light at steps of thermal power at one equivalence ratio,
  dark-corrected, fitted by proportionality through the origin (weighted least squares); the
  deviation of each step from the line, relative, with a χ² test of the straight line.
* ``spatial_uniformity``: the light chain's response to a small lamp moved through the flame
  region: the relative spread (sample standard deviation / mean) and the worst position.
* ``kings_law``: a hot-wire's calibration E² = A + B·Uⁿ (King 1914, with the free exponent
  n of Collis & Williams 1959) fitted by least squares on a table of bridge voltages E and
  velocities U, its covariance and residual; ``velocity`` inverts it.

Imports: numpy, scipy and ``app.errors`` only. Never Qt, drivers, the engine or storage.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats
from scipy.optimize import least_squares

from app.errors import FlamebodeError


class CommissioningError(FlamebodeError):
    """A commissioning estimate that cannot be made from what was recorded; says why."""


@dataclass(frozen=True)
class DarkOffset:
    mean_v: float
    noise_rms_v: float          # standard deviation of the samples (what the light channel sees flame-off)
    u_mean_v: float             # standard uncertainty of the mean (from the segment means)
    n_samples: int
    n_segments: int


def dark_offset(light_v: np.ndarray, n_segments: int = 10) -> DarkOffset:
    """The dark offset of a flame-off light record split into ``n_segments`` equal segments."""
    x = np.asarray(light_v, dtype=float).ravel()
    if x.size < 2 * n_segments or n_segments < 2:
        raise CommissioningError(f"a dark offset needs at least {2 * max(n_segments, 2)} samples in "
                                 f"{max(n_segments, 2)} segments; {x.size} recorded")
    if not np.all(np.isfinite(x)):
        raise CommissioningError(f"the dark record holds {int(np.count_nonzero(~np.isfinite(x)))} samples that are "
                                 "not numbers (NaN or infinite): record again")
    m = x.size // n_segments
    seg = x[: m * n_segments].reshape(n_segments, m).mean(axis=1)
    u = float(np.std(seg, ddof=1) / math.sqrt(n_segments))
    return DarkOffset(float(x.mean()), float(np.std(x, ddof=1)), u, int(x.size), int(n_segments))


@dataclass(frozen=True)
class Linearity:
    slope_v_per_w: float            # light above dark per watt of thermal power
    u_slope_v_per_w: float
    deviation_rel: np.ndarray       # per step: measured / fitted - 1
    max_deviation_rel: float        # the largest |deviation|
    chi2: float
    p_value: float                  # of χ² with n-1 degrees of freedom: a low value says "not straight"

    @property
    def n_steps(self) -> int:
        return int(self.deviation_rel.size)


def light_linearity(power_w: np.ndarray, light_v: np.ndarray, u_light_v: np.ndarray,
                    dark_v: float, u_dark_v: float = 0.0) -> Linearity:
    """Proportionality L - dark = k·P through the dark-corrected origin, weighted by each step's
    standard uncertainty (its own plus the dark offset's, which every step shares: it is
    carried into the slope's uncertainty, not into the weights)."""
    P = np.asarray(power_w, dtype=float)
    L = np.asarray(light_v, dtype=float) - float(dark_v)
    s = np.asarray(u_light_v, dtype=float)
    if P.size < 3:
        raise CommissioningError(f"a linearity check needs at least 3 power steps; {P.size} given")
    if np.any(~np.isfinite(P)) or np.any(P <= 0):
        raise CommissioningError("every thermal power step must be a positive number of watts")
    if np.any(~np.isfinite(s)) or np.any(s <= 0):
        raise CommissioningError("every step needs a positive standard uncertainty of its mean light")
    if np.unique(P).size < 2:
        raise CommissioningError("the power steps must differ: a line through one power says nothing")
    w = 1.0 / s ** 2
    k = float(np.sum(w * P * L) / np.sum(w * P * P))
    u_k_random = math.sqrt(1.0 / float(np.sum(w * P * P)))
    # a shared dark-offset error δd shifts every L by -δd: δk = -δd ΣwP/ΣwP²
    u_k_dark = abs(float(u_dark_v)) * float(np.sum(w * P) / np.sum(w * P * P))
    fitted = k * P
    dev = L / fitted - 1.0
    chi2 = float(np.sum(w * (L - fitted) ** 2))
    p = float(stats.chi2.sf(chi2, P.size - 1))
    return Linearity(k, math.hypot(u_k_random, u_k_dark), dev, float(np.max(np.abs(dev))), chi2, p)


@dataclass(frozen=True)
class Uniformity:
    mean: float
    spread_rel: float               # sample standard deviation / mean
    max_deviation_rel: float        # the position furthest from the mean, relative
    worst_index: int


def spatial_uniformity(response: np.ndarray) -> Uniformity:
    r = np.asarray(response, dtype=float)
    if r.size < 2:
        raise CommissioningError(f"a uniformity check needs at least 2 lamp positions; {r.size} given")
    if np.any(~np.isfinite(r)):
        raise CommissioningError("a lamp position's response is not a number: record it again")
    mean = float(r.mean())
    if mean <= 0:
        raise CommissioningError(f"the mean response is {mean:g} V above dark: the lamp is not seen (is it on, "
                                 "and the dark offset subtracted?)")
    dev = r / mean - 1.0
    j = int(np.argmax(np.abs(dev)))
    return Uniformity(mean, float(np.std(r, ddof=1) / mean), float(abs(dev[j])), j)


@dataclass(frozen=True)
class KingsLaw:
    a_v2: float                     # A, V²
    b: float                        # B, V² (m/s)^-n
    n: float
    covariance: np.ndarray          # of (A, B, n)
    residual_rms_m_s: float         # rms of the velocity residual over the table
    n_points: int

    def voltage_sq(self, velocity_m_s: np.ndarray | float) -> np.ndarray:
        return self.a_v2 + self.b * np.power(np.asarray(velocity_m_s, dtype=float), self.n)

    def velocity(self, voltage_v: np.ndarray | float) -> np.ndarray:
        """U = ((E² - A)/B)^(1/n); NaN below the zero-flow voltage."""
        e2 = np.square(np.asarray(voltage_v, dtype=float))
        q = (e2 - self.a_v2) / self.b
        return np.where(q >= 0, np.power(np.clip(q, 0.0, None), 1.0 / self.n), np.nan)

    def sensitivity(self, velocity_m_s: float) -> float:
        """dE/dU at ``velocity_m_s``: converts a voltage fluctuation to a velocity one (small signals)."""
        e = math.sqrt(float(self.voltage_sq(velocity_m_s)))
        return self.b * self.n * velocity_m_s ** (self.n - 1.0) / (2.0 * e)


def kings_law(voltage_v: np.ndarray, velocity_m_s: np.ndarray) -> KingsLaw:
    """E² = A + B·Uⁿ fitted to a calibration table; at least 4 distinct positive velocities."""
    E = np.asarray(voltage_v, dtype=float)
    U = np.asarray(velocity_m_s, dtype=float)
    if E.shape != U.shape or E.ndim != 1:
        raise CommissioningError("the hot-wire table needs one voltage per velocity")
    if not (np.all(np.isfinite(E)) and np.all(np.isfinite(U))):
        raise CommissioningError("the hot-wire table holds a value that is not a number")
    if np.unique(U[U > 0]).size < 4 or np.any(U < 0):
        raise CommissioningError(f"King's law (3 parameters) needs at least 4 distinct positive velocities and no "
                                 f"negative one; {np.unique(U[U > 0]).size} given")
    if np.any(np.diff(E[np.argsort(U)]) <= 0):
        raise CommissioningError("the bridge voltage must rise with the velocity in a hot-wire table; check the "
                                 "table's order and units")
    e2 = E ** 2
    pos = U > 0
    # start: n = 0.45 (the classical value is 0.5, King 1914), A, B linear in U^n
    n0 = 0.45
    X = np.vstack([np.ones(pos.sum()), U[pos] ** n0]).T
    a0, b0 = np.linalg.lstsq(X, e2[pos], rcond=None)[0]
    scale = float(np.mean(e2))

    def residual(p: np.ndarray) -> np.ndarray:
        return (p[0] + p[1] * np.power(U, p[2]) - e2) / scale

    sol = least_squares(residual, [a0, max(b0, 1e-9), n0], bounds=([-np.inf, 1e-12, 0.05], [np.inf, np.inf, 2.0]))
    J = sol.jac * scale
    dof = max(U.size - 3, 1)
    s2 = float(np.sum((sol.fun * scale) ** 2) / dof)
    cov = np.linalg.pinv(J.T @ J) * s2
    fit = KingsLaw(float(sol.x[0]), float(sol.x[1]), float(sol.x[2]), cov, 0.0, int(U.size))
    res = fit.velocity(E) - U
    return KingsLaw(fit.a_v2, fit.b, fit.n, cov, float(np.sqrt(np.nanmean(res ** 2))), int(U.size))
