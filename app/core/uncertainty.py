"""Uncertainty of complex amplitudes: one covariance object and the FTF point's interval.

The harmonic fit estimates the noise cross-spectral covariance of every channel's phasor;
that covariance travels as one :class:`PhasorCovariance` (matrix and degrees of freedom)
through every linear step (calibration, plane-wave fit, ratio to the mean) and ends in
:func:`ratio_interval`, which states the 95 % interval of gain and phase of F = L/U.

Conventions: errors of complex amplitudes are taken circular (proper: E[δz δzᵀ] = 0, as for
stationary noise at f over many periods), so a complex variance E|δz|² splits evenly into
its real and imaginary parts. For z' = r·z (a row r), E|δz'|² = r Σ r̄ᵀ (JCGM 102:2011 §6).

Interval of the ratio F = L/U with relative error δF/F = δL/L − δU/U:
* random part, complex: v = v_L + v_U − 2 Re{cov(δL, δU)/(L Ū)} (JCGM 102:2011; Bendat &
  Piersol, Random Data, ch. 9), half of it in the gain's relative error, half in the phase;
* systematic parts as complex directions d_k of δF/F (one per standard uncertainty of the
  rig file): gain variance Σ Re(d_k)², phase variance Σ Im(d_k)² (JCGM 100:2008 §5.1.2);
* coverage factor: Student t with Welch–Satterthwaite effective degrees of freedom
  (JCGM 100:2008 Annex G), the random part carrying the noise estimate's ν, the
  systematic parts ν = ∞;
* low signal-to-noise (relative complex error of L or U above LINEAR_LIMIT): first-order
  propagation no longer holds, so the interval comes from a parametric bootstrap of the
  ratio itself: draws of (L, U) from a complex Student-t with the estimated covariance and
  ν, times the systematic directions; half-widths are the 95 % quantiles of |g* − ĝ| and of
  |arg(F*/F̂)|, so the phase interval never exceeds ±π (Efron & Tibshirani 1993, An
  Introduction to the Bootstrap, ch. 6; the t draws follow JCGM 101:2008 §6.4.9).

Pure numpy/scipy: must not import Qt, pyqtgraph, matplotlib, h5py, drivers, the engine or
storage.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

LEVEL = 0.95
LINEAR_LIMIT = 0.1       # relative complex standard uncertainty of L or U up to which propagation is linear
BOOTSTRAP_DRAWS = 4000
BOOTSTRAP_SEED = 20260312


@dataclass(frozen=True, eq=False)
class PhasorCovariance:
    """E[δz δzᴴ] of a vector of complex amplitudes and the degrees of freedom of its estimate."""

    matrix: np.ndarray          # complex (n, n), Hermitian
    dof: float = float("inf")   # effective (real) degrees of freedom; inf for a known covariance

    @property
    def variances(self) -> np.ndarray:
        """E|δz_i|² of each element."""
        return np.real(np.diag(self.matrix)).copy()

    def propagate(self, jacobian: np.ndarray) -> "PhasorCovariance":
        """Covariance of J z (a complex-linear map): J Σ Jᴴ, same degrees of freedom."""
        j = np.atleast_2d(np.asarray(jacobian, dtype=complex))
        return PhasorCovariance(j @ self.matrix @ j.conj().T, self.dof)

    def variance(self, row: np.ndarray) -> float:
        """E|δ(r·z)|² = r Σ r̄ᵀ."""
        r = np.asarray(row, dtype=complex)
        return float(np.real(r @ self.matrix @ r.conj()))

    def covariance(self, row_a: np.ndarray, row_b: np.ndarray) -> complex:
        """E[δ(a·z) conj(δ(b·z))] = a Σ b̄ᵀ."""
        return complex(np.asarray(row_a, complex) @ self.matrix @ np.asarray(row_b, complex).conj())


def coverage_factor(dof: float, level: float = LEVEL) -> float:
    """Two-sided Student-t quantile t_{(1+level)/2, ν}; the normal quantile for ν = ∞."""
    q = 0.5 * (1.0 + level)
    if not np.isfinite(dof):
        return float(stats.norm.ppf(q))
    return float(stats.t.ppf(q, max(float(dof), 1.0)))


def welch_satterthwaite(variances: np.ndarray, dofs: np.ndarray) -> float:
    """ν_eff = (Σ u_i²)² / Σ (u_i⁴/ν_i) (JCGM 100:2008 Annex G, eq. G.2b); ∞ terms drop out."""
    u2 = np.asarray(variances, dtype=float)
    nu = np.asarray(dofs, dtype=float)
    total = float(np.sum(u2))
    finite = np.isfinite(nu) & (u2 > 0)
    denominator = float(np.sum(u2[finite] ** 2 / nu[finite]))
    if total <= 0 or denominator <= 0:
        return float("inf")
    return total**2 / denominator


@dataclass(frozen=True)
class RatioInterval:
    """Standard uncertainties and 95 % half-widths of gain and phase of F = L/U."""

    sigma_gain_rel: float        # standard uncertainty of |F| over |F|
    sigma_phase_rad: float       # standard uncertainty of arg F
    random_rel_var: float        # E|δF/F|² from the noise (complex, both parts)
    systematic_gain_var: float   # Σ Re(d_k)²
    systematic_phase_var: float  # Σ Im(d_k)²
    dof_gain: float              # Welch–Satterthwaite effective degrees of freedom
    dof_phase: float
    k_gain: float                # coverage factors (Student t)
    k_phase: float
    gain_ci95: float             # half-widths at LEVEL, gain in gain units
    phase_ci95_rad: float
    linear: bool                 # False: low signal-to-noise, interval from the bootstrap


def ratio_interval(num: complex, den: complex, cov: PhasorCovariance,
                   systematic: np.ndarray | None = None, level: float = LEVEL) -> RatioInterval:
    """Interval of F = num/den from the 2 × 2 covariance of (num, den) and systematic directions.

    ``systematic`` holds the complex relative shifts d_k of F for one standard uncertainty of
    each systematic input (a 1-D array; empty for none).
    """
    ratio = num / den
    d = np.zeros(0, complex) if systematic is None else np.asarray(systematic, dtype=complex).ravel()
    w = np.array([1.0 / num if num != 0 else 0.0, -1.0 / den])
    v_rand = cov.variance(w)
    sys_g, sys_p = float(np.sum(d.real**2)), float(np.sum(d.imag**2))
    var_g, var_p = 0.5 * v_rand + sys_g, 0.5 * v_rand + sys_p
    dof_g = welch_satterthwaite(np.array([0.5 * v_rand, sys_g]), np.array([cov.dof, np.inf]))
    dof_p = welch_satterthwaite(np.array([0.5 * v_rand, sys_p]), np.array([cov.dof, np.inf]))
    k_g, k_p = coverage_factor(dof_g, level), coverage_factor(dof_p, level)
    gain = abs(ratio)
    rel_num = np.sqrt(max(np.real(cov.matrix[0, 0]), 0.0)) / abs(num) if num != 0 else np.inf
    rel_den = np.sqrt(max(np.real(cov.matrix[1, 1]), 0.0)) / abs(den)
    linear = bool(max(rel_num, rel_den) <= LINEAR_LIMIT)
    if linear:
        gain_hw, phase_hw = k_g * np.sqrt(var_g) * gain, min(k_p * np.sqrt(var_p), np.pi)
    else:
        gain_hw, phase_hw = _bootstrap(num, den, cov, d, level)
    return RatioInterval(sigma_gain_rel=float(np.sqrt(var_g)), sigma_phase_rad=float(np.sqrt(var_p)),
                         random_rel_var=float(v_rand), systematic_gain_var=sys_g, systematic_phase_var=sys_p,
                         dof_gain=float(dof_g), dof_phase=float(dof_p), k_gain=k_g, k_phase=k_p,
                         gain_ci95=float(gain_hw), phase_ci95_rad=float(phase_hw), linear=linear)


def _bootstrap(num: complex, den: complex, cov: PhasorCovariance, d: np.ndarray, level: float) -> tuple[float, float]:
    """Half-widths of gain and phase from draws of the ratio itself (see module notes)."""
    rng = np.random.default_rng(BOOTSTRAP_SEED)
    vals, vecs = np.linalg.eigh(0.5 * (cov.matrix + cov.matrix.conj().T))
    root = vecs * np.sqrt(np.maximum(vals, 0.0))                      # root @ rootᴴ = Σ
    z = (rng.standard_normal((2, BOOTSTRAP_DRAWS)) + 1j * rng.standard_normal((2, BOOTSTRAP_DRAWS))) / np.sqrt(2)
    draws = root @ z
    if np.isfinite(cov.dof):
        draws *= np.sqrt(cov.dof / rng.chisquare(cov.dof, BOOTSTRAP_DRAWS))
    ratio = num / den
    sample = (num + draws[0]) / (den + draws[1])
    if d.size:
        sample = sample * (1.0 + d @ rng.standard_normal((d.size, BOOTSTRAP_DRAWS)))
    gain_hw = float(np.quantile(np.abs(np.abs(sample) - abs(ratio)), level))
    phase_hw = float(np.quantile(np.abs(np.angle(sample / ratio)), level))
    return gain_hw, min(phase_hw, np.pi)
