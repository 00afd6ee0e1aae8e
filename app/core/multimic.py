"""Multi-microphone method: plane-wave decomposition of wall pressures in a duct.

From calibrated complex pressure amplitudes at N >= 2 axial positions the module finds the
amplitudes of the downstream- and upstream-travelling plane waves, and from them the
acoustic pressure and velocity anywhere along the same duct (usually at the reference
plane), with a random-error variance, a residual and pair-by-pair consistency figures.

Conventions
-----------
* Time: x(t) = Re{x̂ e^{+iωt}}; a wave travelling in +x is e^{-ikx}.
* Axis: x in metres along the mean flow (the flow goes toward +x). The reference plane is
  usually x = 0, so sensors upstream of it have negative x.
* p̂(x) = A⁺ e^{-ik⁺x} + A⁻ e^{+ik⁻x},  k^± = K k₀/(1 ± M),  k₀ = ω/c
  (Seybert & Ross 1977, JASA 61; Chung & Blaser 1980, JASA 68; Jang & Ih 1998, JASA 103).
* û(x) = (A⁺ e^{-ik⁺x} − A⁻ e^{+ik⁻x}) / (ρc), positive in +x (the flow direction).
  The viscothermal correction to the characteristic impedance (order 1/Sh) is neglected.
* K is Kirchhoff's wide-duct viscothermal factor, written for e^{+iωt}.

Pure numpy. Must not import Qt, pyqtgraph, matplotlib, h5py, any driver, app.core.gas
(the medium arrives as numbers), the engine, storage or the front end.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import combinations

import numpy as np

from app.errors import FlamebodeError

# Usable band of one sensor pair, 0.1π < k s < 0.8π (Bodén & Åbom 1986, JASA 79; from memory).
BAND_LOW_KS = 0.1 * np.pi
BAND_HIGH_KS = 0.8 * np.pi

Pair = tuple[int, int]


class MultimicInputError(FlamebodeError, ValueError):
    """Sensor layout, pressures or medium unusable for a plane-wave decomposition."""


@dataclass(frozen=True)
class Medium:
    """The gas at the sensors, as numbers (SI). ``mach`` is positive for flow toward +x."""

    speed_of_sound_m_s: float
    density_kg_m3: float
    mach: float
    kinematic_viscosity_m2_s: float = 1.5e-5
    gamma: float = 1.4
    prandtl: float = 0.71

    def __post_init__(self) -> None:
        problems = []
        if not self.speed_of_sound_m_s > 0:
            problems.append(f"speed_of_sound_m_s must be > 0, got {self.speed_of_sound_m_s!r}")
        if not self.density_kg_m3 > 0:
            problems.append(f"density_kg_m3 must be > 0, got {self.density_kg_m3!r}")
        if not abs(self.mach) < 1:
            problems.append(f"mach must lie in (-1, 1), got {self.mach!r}")
        if not self.kinematic_viscosity_m2_s > 0:
            problems.append(f"kinematic_viscosity_m2_s must be > 0, got {self.kinematic_viscosity_m2_s!r}")
        if not self.gamma > 1:
            problems.append(f"gamma must be > 1, got {self.gamma!r}")
        if not self.prandtl > 0:
            problems.append(f"prandtl must be > 0, got {self.prandtl!r}")
        if problems:
            raise MultimicInputError("medium: " + "; ".join(problems))

    @property
    def impedance_pa_s_m(self) -> float:
        """Characteristic impedance ρc."""
        return self.density_kg_m3 * self.speed_of_sound_m_s


def _scalar_or_array(value: np.ndarray) -> complex | np.ndarray:
    return complex(value) if np.ndim(value) == 0 else value


def _check_freq_radius(freq_hz: float | np.ndarray, radius_m: float) -> None:
    if not np.all(np.asarray(freq_hz) > 0):
        raise MultimicInputError(f"frequency must be > 0 Hz, got {freq_hz!r}")
    if not radius_m > 0:
        raise MultimicInputError(f"duct radius must be > 0 m, got {radius_m!r}")


def kirchhoff_factor(freq_hz: float | np.ndarray, radius_m: float, medium: Medium) -> complex | np.ndarray:
    """K = 1 + (1 − i)/(√2 Sh)·(1 + (γ − 1)/√Pr), Sh = r√(ω/ν) (Kirchhoff, wide duct, e^{+iωt})."""
    _check_freq_radius(freq_hz, radius_m)
    omega = 2 * np.pi * np.asarray(freq_hz, dtype=float)
    shear = radius_m * np.sqrt(omega / medium.kinematic_viscosity_m2_s)
    loss = 1 + (medium.gamma - 1) / np.sqrt(medium.prandtl)
    return _scalar_or_array(1 + (1 - 1j) / (np.sqrt(2) * shear) * loss)


def wavenumbers(
    freq_hz: float | np.ndarray, radius_m: float, medium: Medium, damping: bool = True
) -> tuple[complex | np.ndarray, complex | np.ndarray]:
    """(k⁺, k⁻) = K k₀/(1 ± M); K = 1 when ``damping`` is False. Im k⁺ < 0 means decay in +x."""
    _check_freq_radius(freq_hz, radius_m)
    k0 = 2 * np.pi * np.asarray(freq_hz, dtype=float) / medium.speed_of_sound_m_s
    factor = kirchhoff_factor(freq_hz, radius_m, medium) if damping else 1.0
    k_plus = factor * k0 / (1 + medium.mach)
    k_minus = factor * k0 / (1 - medium.mach)
    return _scalar_or_array(np.asarray(k_plus)), _scalar_or_array(np.asarray(k_minus))


def _wave_matrix(x_m: np.ndarray, k_plus: complex, k_minus: complex) -> np.ndarray:
    """Rows [e^{-ik⁺x}, e^{+ik⁻x}] so that p = H a with a = (A⁺, A⁻)."""
    x = np.asarray(x_m, dtype=float)[..., None]
    return np.concatenate([np.exp(-1j * k_plus * x), np.exp(1j * k_minus * x)], axis=-1)


def _velocity_row(x_m: float, k_plus: complex, k_minus: complex, rho_c: float) -> np.ndarray:
    """g with û(x) = g·a: [e^{-ik⁺x}, −e^{+ik⁻x}]/(ρc)."""
    return np.array([np.exp(-1j * k_plus * x_m), -np.exp(1j * k_minus * x_m)]) / rho_c


def _pair_ks(freq_hz: float, spacing_m: float | np.ndarray, medium: Medium) -> np.ndarray:
    """Effective k s = k₀ s/(1 − M²), the mean of k⁺ s and k⁻ s (no damping)."""
    k0 = 2 * np.pi * freq_hz / medium.speed_of_sound_m_s
    return k0 * np.abs(np.asarray(spacing_m, dtype=float)) / (1 - medium.mach**2)


def two_sensor_condition(freq_hz: float, spacing_m: float, medium: Medium) -> float:
    """cond(H) of a two-sensor fit without damping: max(|tan θ|, |cot θ|), θ = k₀ s/(2(1 − M²))."""
    theta = _pair_ks(freq_hz, spacing_m, medium) / 2
    with np.errstate(divide="ignore"):
        tan = np.abs(np.tan(theta))
        return float(np.maximum(tan, 1 / tan))


def pair_in_band(freq_hz: float, spacing_m: float, medium: Medium) -> bool:
    """True when 0.1π < k₀ s/(1 − M²) < 0.8π (Bodén & Åbom 1986, band from memory)."""
    ks = _pair_ks(freq_hz, spacing_m, medium)
    return bool(BAND_LOW_KS < ks < BAND_HIGH_KS)


@dataclass(frozen=True, eq=False)
class WaveFit:
    """Result of :func:`decompose` at one frequency; methods evaluate the field along the duct."""

    freq_hz: float
    a_plus: complex
    a_minus: complex
    cond: float
    residual: float
    positions_m: np.ndarray
    k_plus: complex
    k_minus: complex
    medium: Medium
    radius_m: float
    pair_in_band: dict[Pair, bool]
    any_pair_in_band: bool
    cov_a: np.ndarray
    pressures_pa: np.ndarray = field(default_factory=lambda: np.zeros(0, complex))
    estimator: np.ndarray = field(default_factory=lambda: np.zeros((2, 0), complex))  # a = estimator @ p
    cov_dof: float = float("inf")     # effective degrees of freedom of cov_a
    generalised: bool = False         # True: weighted by the estimated noise covariance (GLS)
    variance_inflation: float = 1.0   # factor already in cov_a for weights estimated from the same noise
    noise_cov: np.ndarray | None = None  # Σ = E[δp δpᴴ] of the pressures (Pa²) the fit was given, if any
    systematic_var: np.ndarray | None = None  # each sensor's stated calibration error variance (Pa²), if any

    @property
    def amplitudes(self) -> np.ndarray:
        return np.array([self.a_plus, self.a_minus])

    def pressure_at(self, x_m: float) -> complex:
        """p̂(x) = A⁺ e^{-ik⁺x} + A⁻ e^{+ik⁻x} in Pa."""
        return complex(_wave_matrix(np.float64(x_m), self.k_plus, self.k_minus) @ self.amplitudes)

    def _g(self, x_m: float) -> np.ndarray:
        return _velocity_row(x_m, self.k_plus, self.k_minus, self.medium.impedance_pa_s_m)

    def velocity_at(self, x_m: float) -> complex:
        """û(x) = (A⁺ e^{-ik⁺x} − A⁻ e^{+ik⁻x})/(ρc) in m/s, positive in +x (flow direction)."""
        return complex(self._g(x_m) @ self.amplitudes)

    def velocity_variance_at(self, x_m: float) -> float:
        """E|δû(x)|² from the sensors' random noise, in (m/s)².

        û = gᵀa and cov_a = E[δa δaᴴ], so E|δû|² = gᵀ cov_a ḡ. (The form gᴴ cov_a g is wrong
        unless g is real, i.e. x = 0: it would change with the axis origin.)
        """
        g = self._g(x_m)
        return float(np.real(g @ self.cov_a @ np.conj(g)))

    def pair_velocities_at(self, x_m: float) -> dict[Pair, complex]:
        """û(x) from the exact two-sensor solution of every sensor pair (NaN if singular)."""
        pairs = list(combinations(range(len(self.positions_m)), 2))
        if not pairs:
            return {}
        idx = np.array(pairs)
        h = _wave_matrix(self.positions_m[idx], self.k_plus, self.k_minus)  # (n_pairs, 2, 2)
        p = self.pressures_pa[idx]
        det = h[:, 0, 0] * h[:, 1, 1] - h[:, 0, 1] * h[:, 1, 0]
        singular = np.abs(det) < 1e-12
        det = np.where(singular, 1.0, det)
        a_plus = (h[:, 1, 1] * p[:, 0] - h[:, 0, 1] * p[:, 1]) / det
        a_minus = (h[:, 0, 0] * p[:, 1] - h[:, 1, 0] * p[:, 0]) / det
        u = self._g(x_m) @ np.vstack([a_plus, a_minus])
        u = np.where(singular, np.nan + 0j, u)
        return {pair: complex(val) for pair, val in zip(pairs, u)}

    def pair_spread_z_at(self, x_m: float) -> float:
        """Largest |û_pair − û| over its own standard error among the pairs in band (all if none is).

        The difference is linear in the pressures, û_pair − û = (g E_pair − g E) p, so its
        variance is r Σ r̄ᵀ with the noise covariance Σ the fit was given (JCGM 102:2011 §6), plus
        Σ_i |r_i|² s_i for the sensors' stated calibration error variances s_i (uncalibrated
        sensors disagree by what their tolerance says). A pair spread that is a few standard
        errors or less is the noise and the stated tolerances, not a sensor fault.
        NaN for two sensors or without a noise covariance.
        """
        n = len(self.positions_m)
        if n < 3 or self.noise_cov is None:
            return float("nan")
        by_pair = self.pair_velocities_at(x_m)
        usable = [p for p, ok in self.pair_in_band.items() if ok] or list(by_pair)
        g = self._g(x_m)
        full_row = g @ self.estimator
        u = self.velocity_at(x_m)
        z = []
        for i, j in usable:
            if not np.isfinite(by_pair[(i, j)]):
                continue
            h = _wave_matrix(self.positions_m[[i, j]], self.k_plus, self.k_minus)
            row = -full_row.copy()
            row[[i, j]] += g @ _inverse_2x2(h)
            var = float(np.real(row @ self.noise_cov @ row.conj())) * self.variance_inflation
            if self.systematic_var is not None:
                var += float(np.sum(np.abs(row) ** 2 * self.systematic_var))
            dev = abs(by_pair[(i, j)] - u)
            z.append(dev / np.sqrt(var) if var > 0 else (0.0 if dev == 0 else np.inf))
        return float(max(z)) if z else float("inf")

    def pair_spread_at(self, x_m: float) -> float:
        """max |û_pair − û|/|û| over the pairs in band (all pairs if none is); NaN for 2 sensors.

        With only two sensors there is nothing to compare, hence NaN (no check possible).
        """
        if len(self.positions_m) < 3:
            return float("nan")
        by_pair = self.pair_velocities_at(x_m)
        usable = [p for p, ok in self.pair_in_band.items() if ok] or list(by_pair)
        u_pairs = np.array([by_pair[p] for p in usable])
        u = self.velocity_at(x_m)
        deviation = float(np.nanmax(np.abs(u_pairs - u))) if np.any(np.isfinite(u_pairs)) else float("inf")
        if abs(u) == 0:
            return 0.0 if deviation == 0 else float("inf")
        return deviation / abs(u)


def _validate_layout(p_hat: np.ndarray, positions_m: np.ndarray) -> None:
    if p_hat.ndim != 1 or positions_m.ndim != 1 or p_hat.shape != positions_m.shape:
        raise MultimicInputError(
            f"pressures {p_hat.shape} and sensor positions {positions_m.shape} must be 1-D and of equal length"
        )
    if p_hat.size < 2:
        raise MultimicInputError(f"the multi-microphone method needs at least 2 sensors, got {p_hat.size}")
    if not (np.all(np.isfinite(p_hat)) and np.all(np.isfinite(positions_m))):
        raise MultimicInputError("pressures and sensor positions must be finite numbers")
    order = np.sort(positions_m)
    duplicate = np.nonzero(np.diff(order) == 0)[0]
    if duplicate.size:
        raise MultimicInputError(
            f"sensor positions must be distinct; x = {order[duplicate[0]]} m appears more than once"
        )


def _per_sensor(values: object, n: int, name: str) -> np.ndarray:
    arr = np.broadcast_to(np.asarray(values, dtype=float), (n,)) if np.ndim(values) == 0 else np.asarray(values, float)
    if arr.shape != (n,):
        raise MultimicInputError(f"{name} must have one value per sensor ({n}), got shape {arr.shape}")
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise MultimicInputError(f"{name} must be finite and >= 0, got {arr.tolist()}")
    return arr


def decompose(
    p_hat: np.ndarray,
    positions_m: np.ndarray,
    freq_hz: float,
    radius_m: float,
    medium: Medium,
    weights: np.ndarray | None = None,
    noise_var: np.ndarray | float | None = None,
    damping: bool = True,
    noise_cov: np.ndarray | None = None,
    noise_dof: float = float("inf"),
    generalised: bool = True,
    systematic_var: np.ndarray | None = None,
) -> WaveFit:
    """Fit A⁺, A⁻ to calibrated pressures ``p_hat`` (Pa) at axial ``positions_m`` (m).

    ``weights`` gives a weighted least-squares fit (default: equal weights); ``noise_var`` is
    each sensor's E|δp|² in Pa² (scalar or per sensor), ``noise_cov`` instead the full
    covariance Σ = E[δp δpᴴ] (Pa², sensors correlated) estimated with ``noise_dof`` effective
    (real) degrees of freedom. The covariance of (A⁺, A⁻) is the sandwich
    (HᴴWH)⁻¹HᴴWΣWH(HᴴWH)⁻¹, which is σ²(HᴴH)⁻¹ for equal noise and weights and (HᴴΣ⁻¹H)⁻¹
    for W = Σ⁻¹ (generalised least squares, the minimum-variance choice; JCGM 102:2011).

    With ``noise_cov`` estimated from m = noise_dof/2 complex segments and m ≥ 5n (n sensors),
    the fit is generalised: W = D Σ̂⁻¹ D with D = diag(√weights). Weights estimated from the
    same noise make the plug-in covariance too small and the estimate noisier, together by
    (m/(m − n + 2))² for complex Wishart Σ̂ (from the complex Wishart moments, from memory;
    tests/core check it by Monte Carlo), so cov_a carries that factor and cov_dof = 2(m − n + 2).
    Below that, or with ``generalised`` False, the rig weights are used with the full Σ̂ in the
    sandwich (cov_dof = noise_dof). ``systematic_var`` (Pa², per sensor) adds each sensor's
    stated calibration error variance to the weighting matrix only, W = D (Σ̂ + diag)⁻¹ D: the
    fit then weights by the total error each sensor carries (JCGM 102:2011 treats type-B inputs
    as covariances alike) instead of relying on strongly correlated noise cancelling exactly,
    which calibration errors break; cov_a stays the noise's sandwich (the calibration errors are
    the point's systematic terms).
    ``cond`` is that of the rig-weighted system (cond(H) for equal weights); ``residual`` is
    ‖p − Ha‖/‖p‖.
    """
    p = np.asarray(p_hat, dtype=complex)
    x = np.asarray(positions_m, dtype=float)
    _validate_layout(p, x)
    n = p.size
    k_plus, k_minus = wavenumbers(freq_hz, radius_m, medium, damping=damping)
    h = _wave_matrix(x, k_plus, k_minus)
    w = _per_sensor(1.0 if weights is None else weights, n, "weights")
    if np.count_nonzero(w) < 2:
        raise MultimicInputError("at least 2 sensors need a weight > 0")
    sqrt_w = np.sqrt(w)
    cond = _condition_2col(sqrt_w[:, None] * h)
    sigma = _noise_matrix(noise_var, noise_cov, n)
    weight_matrix, used_gls, inflation, dof = np.diag(w).astype(complex), False, 1.0, float(noise_dof)
    m = noise_dof / 2.0
    if generalised and noise_cov is not None and np.all(w > 0) and m >= 5 * n and n > 2:
        try:
            total = sigma if systematic_var is None else sigma + np.diag(_per_sensor(systematic_var, n, "systematic_var"))
            weight_matrix = sqrt_w[:, None] * np.linalg.inv(total) * sqrt_w[None, :]
            used_gls = True
            inflation = (m / (m - n + 2)) ** 2
            dof = 2.0 * (m - n + 2)
        except np.linalg.LinAlgError:
            pass
    hw = h.conj().T @ weight_matrix
    bread = _inverse_2x2(hw @ h)
    estimator = bread @ hw                                  # a = E p
    a = estimator @ p
    p_norm = float(np.linalg.norm(p))
    residual = float(np.linalg.norm(p - h @ a)) / p_norm if p_norm > 0 else 0.0
    cov = np.zeros((2, 2), dtype=complex)
    if sigma is not None:
        cov = inflation * (estimator @ sigma @ estimator.conj().T)

    pairs = list(combinations(range(n), 2))
    first, second = np.array(pairs).T
    pair_ks = _pair_ks(freq_hz, x[second] - x[first], medium)          # as pair_in_band, all pairs at once
    in_band = dict(zip(pairs, ((BAND_LOW_KS < pair_ks) & (pair_ks < BAND_HIGH_KS)).tolist()))
    x_ro, p_ro = x.copy(), p.copy()
    x_ro.flags.writeable = False
    p_ro.flags.writeable = False
    return WaveFit(
        freq_hz=float(freq_hz), a_plus=complex(a[0]), a_minus=complex(a[1]), cond=cond,
        residual=residual, positions_m=x_ro, k_plus=complex(k_plus), k_minus=complex(k_minus),
        medium=medium, radius_m=float(radius_m), pair_in_band=in_band,
        any_pair_in_band=any(in_band.values()), cov_a=cov, pressures_pa=p_ro, estimator=estimator,
        cov_dof=dof if sigma is not None else float("inf"), generalised=used_gls, variance_inflation=inflation,
        noise_cov=sigma,
        systematic_var=None if systematic_var is None else _per_sensor(systematic_var, n, "systematic_var"),
    )


def _condition_2col(a: np.ndarray) -> float:
    """2-norm condition number of an (n, 2) matrix from the eigenvalues of its 2 × 2 Gram matrix."""
    g = a.conj().T @ a
    half_trace = 0.5 * float(np.real(g[0, 0] + g[1, 1]))
    radius = float(np.hypot(0.5 * np.real(g[0, 0] - g[1, 1]), abs(g[0, 1])))
    low = half_trace - radius
    if low <= 1e-15 * max(half_trace, 1e-300):
        return float("inf")
    return float(np.sqrt((half_trace + radius) / low))


def _inverse_2x2(g: np.ndarray) -> np.ndarray:
    """Inverse of a 2 × 2 matrix; the pseudo-inverse when it is singular."""
    det = g[0, 0] * g[1, 1] - g[0, 1] * g[1, 0]
    if abs(det) <= 1e-14 * max(float(np.max(np.abs(g))), 1e-300) ** 2:
        return np.linalg.pinv(g)
    return np.array([[g[1, 1], -g[0, 1]], [-g[1, 0], g[0, 0]]]) / det


def _noise_matrix(noise_var: np.ndarray | float | None, noise_cov: np.ndarray | None, n: int) -> np.ndarray | None:
    """Σ = E[δp δpᴴ] from per-sensor variances or a full covariance (checked Hermitian, n × n)."""
    if noise_cov is not None:
        sigma = np.asarray(noise_cov, dtype=complex)
        if sigma.shape != (n, n) or not np.all(np.isfinite(sigma)):
            raise MultimicInputError(f"noise_cov must be a finite {n} × {n} matrix, got shape {sigma.shape}")
        if np.max(np.abs(sigma - sigma.conj().T), initial=0.0) > 1e-9 * np.max(np.abs(sigma), initial=0.0):
            raise MultimicInputError("noise_cov must be Hermitian (E[δp δpᴴ])")
        return 0.5 * (sigma + sigma.conj().T)
    if noise_var is not None:
        return np.diag(_per_sensor(noise_var, n, "noise_var")).astype(complex)
    return None


def velocity_at_reference(fit: WaveFit, reference_x_m: float, area_ratio: float) -> tuple[complex, float]:
    """û at the reference plane beyond a compact, low-Mach area change, and its variance.

    û is evaluated in the sensor duct at ``reference_x_m``; across the area change p̂ is
    continuous and A₁û₁ = A₂û₂ (acoustic volume velocity), so û_ref = û·area_ratio with
    area_ratio = A_sensor/A_ref. Use area_ratio = 1 when the reference plane lies in the
    sensor duct. The mean velocity is not handled here: ū_ref = ṁ/(ρ_ref A_ref) follows the
    mass flux (app.core.gas.mean_flow), so at one temperature û/ū is unchanged across the area
    change, and where the reference plane is hotter (û/ū)_ref = (û/ū)_sensors·ρ_ref/ρ_sensors.
    """
    if not (np.isfinite(area_ratio) and area_ratio > 0):
        raise MultimicInputError(f"area_ratio (A_sensor/A_ref) must be > 0, got {area_ratio!r}")
    u = fit.velocity_at(reference_x_m) * area_ratio
    return u, fit.velocity_variance_at(reference_x_m) * area_ratio**2


def sensor_swap_calibration(h_normal: complex | np.ndarray, h_swapped: complex | np.ndarray) -> complex | np.ndarray:
    """H_c = √(H_I·H_II) = S_B/S_A from a normal and a position-swapped measurement.

    (Chung & Blaser 1980, JASA 68.) The sign of the root is fixed by taking the principal
    root at the first frequency (|phase mismatch| < 90°, sensors of the same polarity) and
    following the unwrapped phase of H_I·H_II along the last axis from there.
    The corrected transfer function is then H₁₂ = H_I / H_c.
    """
    product = np.asarray(h_normal, dtype=complex) * np.asarray(h_swapped, dtype=complex)
    if np.any(product == 0) or not np.all(np.isfinite(product)):
        raise MultimicInputError("sensor-swap calibration needs finite, non-zero transfer functions")
    phase = np.angle(product)
    if phase.ndim:
        phase = np.unwrap(phase, axis=-1)
    return _scalar_or_array(np.sqrt(np.abs(product)) * np.exp(0.5j * phase))


def relative_calibration(g_ref_ref: complex | np.ndarray, g_ref_i: complex | np.ndarray) -> complex | np.ndarray:
    """C_i = G_ref,ref / G_ref,i (common practice), all sensors seeing the same pressure.

    G_ref,i = E[conj(P_ref)·P_i] is the cross-spectrum; multiplying sensor i's spectrum by
    C_i expresses it in the reference sensor's units, amplitude and phase.
    """
    denominator = np.asarray(g_ref_i, dtype=complex)
    if np.any(denominator == 0) or not np.all(np.isfinite(denominator)):
        raise MultimicInputError("relative calibration needs a finite, non-zero cross-spectrum G_ref,i")
    return _scalar_or_array(np.asarray(g_ref_ref, dtype=complex) / denominator)
