"""Tests of the multi-microphone plane-wave decomposition (app.core.multimic).

All phases use the e^{+iωt} time convention; a wave travelling in +x is e^{-ikx}.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pytest
from scipy import signal

from app.core.multimic import (
    Medium,
    MultimicInputError,
    WaveFit,
    decompose,
    kirchhoff_factor,
    pair_in_band,
    relative_calibration,
    sensor_swap_calibration,
    two_sensor_condition,
    velocity_at_reference,
    wavenumbers,
)
from app.errors import FlamebodeError

# Dry air at 20 °C, 101.325 kPa (handbook tables; ISO 9613-1 gives c = 343.2 m/s at 293.15 K).
C_AIR = 343.2
RHO_AIR = 1.2041
RADIUS = 0.025

WORKED_X = np.array([-0.50, -0.40, -0.25, -0.10])
WORKED_A_PLUS = 1 + 0.2j
WORKED_A_MINUS = 0.6 * np.exp(-0.9j)


def synthesise(a_plus: complex, a_minus: complex, x_m: np.ndarray, k_plus: complex, k_minus: complex) -> np.ndarray:
    """p̂(x) = A⁺e^{-ik⁺x} + A⁻e^{+ik⁻x}, written out here independently of the module (e^{+iωt})."""
    return a_plus * np.exp(-1j * k_plus * x_m) + a_minus * np.exp(1j * k_minus * x_m)


def plain_wavenumbers(freq_hz: float, medium: Medium) -> tuple[float, float]:
    """k^± = k₀/(1 ± M) without damping (Chung & Blaser 1980; Jang & Ih 1998)."""
    k0 = 2 * np.pi * freq_hz / medium.speed_of_sound_m_s
    return k0 / (1 + medium.mach), k0 / (1 - medium.mach)


def worked_fit(noise_var: float | None = None) -> tuple[WaveFit, np.ndarray, Medium]:
    medium = Medium(C_AIR, RHO_AIR, mach=0.05)
    k_plus, k_minus = plain_wavenumbers(400.0, medium)
    p = synthesise(WORKED_A_PLUS, WORKED_A_MINUS, WORKED_X, k_plus, k_minus)
    fit = decompose(p, WORKED_X, 400.0, RADIUS, medium, noise_var=noise_var, damping=False)
    return fit, p, medium


# --- ISO 10534-2 transfer-function method as an independent oracle --------------------------

ISO_F, ISO_S, ISO_X1 = 500.0, 0.05, 0.20
ISO_R = 0.5 * np.exp(1j * np.pi / 4)
ISO_H12 = 1.303801 - 1.162722j  # derived from r above (e^{+jωt})


def iso_reflection(h12: complex, k0: float, s: float, x1: float) -> complex:
    """ISO 10534-2: r = (H₁₂ − e^{-jk₀s})/(e^{+jk₀s} − H₁₂)·e^{2jk₀x₁}, e^{+jωt},
    x = 0 at the sample face, positive toward the source, sensor 1 the farther one."""
    return (h12 - np.exp(-1j * k0 * s)) / (np.exp(1j * k0 * s) - h12) * np.exp(2j * k0 * x1)


def test_iso_formula_reproduces_worked_h12_from_r():
    # ISO 10534-2 field p(x) = e^{+jk₀x} + r e^{-jk₀x} (e^{+jωt}), H₁₂ = p(x₂)/p(x₁), x₂ = x₁ − s.
    k0 = 2 * np.pi * ISO_F / C_AIR
    x1, x2 = ISO_X1, ISO_X1 - ISO_S
    p1 = np.exp(1j * k0 * x1) + ISO_R * np.exp(-1j * k0 * x1)
    p2 = np.exp(1j * k0 * x2) + ISO_R * np.exp(-1j * k0 * x2)
    assert abs(p2 / p1 - ISO_H12) < 2e-6  # ISO 10534-2 worked example (derived values)
    assert abs(iso_reflection(p2 / p1, k0, ISO_S, ISO_X1) - ISO_R) < 1e-12  # ISO 10534-2 formula


def test_decompose_matches_iso_two_microphone_method():
    # ISO 10534-2 worked example: r = 0.5 e^{jπ/4}, α = 0.75 (e^{+jωt}). Our x = −x_ISO
    # (flow/incident direction positive toward the face), so r = A⁻/A⁺ at x = 0.
    medium = Medium(C_AIR, RHO_AIR, mach=0.0)
    x_ours = -np.array([ISO_X1, ISO_X1 - ISO_S])
    p = np.array([1.0, ISO_H12])  # sensor 1 as reference: its pressure 1, sensor 2 is H₁₂
    fit = decompose(p, x_ours, ISO_F, RADIUS, medium, damping=False)
    r = fit.a_minus / fit.a_plus
    k0 = 2 * np.pi * ISO_F / C_AIR
    assert abs(r - iso_reflection(ISO_H12, k0, ISO_S, ISO_X1)) < 1e-12  # ISO 10534-2 formula as oracle
    assert abs(r - ISO_R) < 2e-6  # ISO 10534-2 worked example
    assert abs((1 - abs(r) ** 2) - 0.75) < 2e-6  # α = 1 − |r|² (ISO 10534-2)
    assert abs(np.angle(r) - np.pi / 4) < 1e-5  # phase of r, e^{+jωt}


def test_decompose_reproduces_iso_synthesised_pressures_with_noise_free_fit():
    # Pressures synthesised in ISO 10534-2 coordinates (e^{+jωt}), mapped x → −x.
    medium = Medium(C_AIR, RHO_AIR, mach=0.0)
    k0 = 2 * np.pi * ISO_F / C_AIR
    x_iso = np.array([ISO_X1, ISO_X1 - ISO_S])
    p = 2.0 * (np.exp(1j * k0 * x_iso) + ISO_R * np.exp(-1j * k0 * x_iso))
    fit = decompose(p, -x_iso, ISO_F, RADIUS, medium, damping=False)
    assert abs(fit.a_plus - 2.0) < 1e-12  # incident amplitude at the face (ISO field)
    assert abs(fit.a_minus / fit.a_plus - ISO_R) < 1e-12  # ISO 10534-2 worked example
    assert fit.residual < 1e-12


# --- Sensor calibration -------------------------------------------------------------------------

def test_sensor_swap_identity():
    # Chung & Blaser 1980 (JASA 68): H_I = (S_B/S_A)H₁₂, H_II = (S_B/S_A)/H₁₂ → √(H_I H_II) = S_B/S_A.
    s_a, s_b = 0.0145 * np.exp(0.03j), 0.0131 * np.exp(-0.05j)
    p1, p2 = 0.8 - 0.3j, -0.2 + 0.9j
    h_normal = (s_b * p2) / (s_a * p1)  # channel A at position 1, B at position 2
    h_swapped = (s_b * p1) / (s_a * p2)  # positions swapped, channels fixed
    h_c = sensor_swap_calibration(h_normal, h_swapped)
    assert isinstance(h_c, complex)
    assert abs(h_c - s_b / s_a) < 1e-12 * abs(s_b / s_a)
    assert abs(h_normal / h_c - p2 / p1) < 1e-12  # corrected H₁₂ (Chung & Blaser 1980)


def test_sensor_swap_branch_follows_phase_beyond_90_degrees():
    # Chung & Blaser 1980: same identity over frequency; a 0.4 ms channel delay takes the
    # mismatch phase −ωτ (e^{+iωt}) past −90°, where the principal root alone would flip sign.
    freq_hz = np.linspace(50, 1500, 60)
    ratio = 0.9 * np.exp(-2j * np.pi * freq_hz * 4e-4)  # S_B/S_A
    h12 = np.exp(-1j * 2 * np.pi * freq_hz * 0.05 / C_AIR)
    h_c = sensor_swap_calibration(ratio * h12, ratio / h12)
    assert np.allclose(h_c, ratio, rtol=1e-12, atol=0)


def test_relative_calibration_against_scipy_cross_spectra():
    # C_i = G_ref,ref/G_ref,i (common practice); cross-spectra from scipy.signal.csd (reference estimator).
    fs, n = 10_000.0, 2**15
    rng = np.random.default_rng(7)
    pressure = rng.standard_normal(n)
    gain_ref, gain_i, delay_samples = 1.0, 0.8, 2  # sensor i: 0.8× and 0.2 ms late
    ref = gain_ref * pressure
    sensor_i = gain_i * np.roll(pressure, delay_samples)
    f, g_rr = signal.csd(ref, ref, fs=fs, nperseg=1024)
    _, g_ri = signal.csd(ref, sensor_i, fs=fs, nperseg=1024)
    c_i = relative_calibration(g_rr, g_ri)
    band = (f > 100) & (f < 2000)
    expected = gain_ref / (gain_i * np.exp(-2j * np.pi * f[band] * delay_samples / fs))  # e^{+iωt}
    assert np.allclose(c_i[band], expected, rtol=0.01)


def test_relative_calibration_rejects_zero_cross_spectrum():
    with pytest.raises(MultimicInputError, match="non-zero"):
        relative_calibration(1.0, 0.0)


# --- Worked example with mean flow --------------------------------------------------------------

def test_worked_example_mach_005():
    # Derived worked example (e^{+iωt}): c = 343.2 m/s, ρ = 1.2041 kg/m³, M = 0.05, 400 Hz,
    # sensors at −0.50, −0.40, −0.25, −0.10 m, A⁺ = 1 + 0.2i Pa, A⁻ = 0.6e^{−0.9i} Pa, K = 1.
    fit, _, _ = worked_fit()
    assert abs(fit.cond - 1.348) < 5e-4
    assert abs(fit.a_plus - WORKED_A_PLUS) < 1e-12
    assert abs(fit.a_minus - WORKED_A_MINUS) < 1e-12
    assert abs(fit.pressure_at(0.0) - (1.37297 - 0.27000j)) < 1e-5
    assert abs(fit.velocity_at(0.0) - (1.5173e-3 + 1.6213e-3j)) < 1e-7
    assert fit.residual < 1e-12


def test_worked_example_cond_matches_numpy():
    # numpy.linalg.cond of H with rows [e^{-ik⁺x}, e^{+ik⁻x}] (Jang & Ih 1998) as reference.
    fit, _, medium = worked_fit()
    k_plus, k_minus = plain_wavenumbers(400.0, medium)
    h = np.column_stack([np.exp(-1j * k_plus * WORKED_X), np.exp(1j * k_minus * WORKED_X)])
    assert fit.cond == pytest.approx(np.linalg.cond(h), rel=1e-12)


def test_plane_progressive_wave_velocity_sign():
    # A single wave in +x has û = p̂/(ρc); one in −x has û = −p̂/(ρc) (plane progressive wave,
    # acoustics textbooks, e.g. Kinsler et al., Fundamentals of Acoustics).
    medium = Medium(C_AIR, RHO_AIR, mach=0.1)
    k_plus, k_minus = plain_wavenumbers(300.0, medium)
    x = np.array([-0.6, -0.35, -0.1])
    for a_plus, a_minus, sign in ((1.0 + 0.5j, 0.0, 1.0), (0.0, 0.7 - 0.2j, -1.0)):
        fit = decompose(synthesise(a_plus, a_minus, x, k_plus, k_minus), x, 300.0, RADIUS, medium, damping=False)
        for xr in (0.0, -0.2):
            assert fit.velocity_at(xr) == pytest.approx(sign * fit.pressure_at(xr) / (RHO_AIR * C_AIR), abs=1e-14)


# --- Viscothermal damping -----------------------------------------------------------------------

def test_kirchhoff_attenuation_air_20c():
    # Kirchhoff wide-duct attenuation: air at 20 °C, r = 25 mm, 500 Hz → 0.0265 Np/m (derived).
    # ν = 1.516e-5 m²/s, Pr = 0.713, γ = 1.4 for air at 20 °C (handbook tables, from memory).
    medium = Medium(C_AIR, RHO_AIR, mach=0.0, kinematic_viscosity_m2_s=1.516e-5, gamma=1.4, prandtl=0.713)
    k_plus, k_minus = wavenumbers(500.0, 0.025, medium, damping=True)
    assert -k_plus.imag == pytest.approx(0.0265, abs=5e-5)
    assert k_minus == pytest.approx(k_plus, rel=1e-15)  # no flow: symmetric
    # e^{+iωt}: K has Re > 1 (slower waves) and Im < 0 (decay along the propagation direction).
    factor = kirchhoff_factor(500.0, 0.025, medium)
    assert factor.real > 1 and factor.imag < 0
    assert factor.real - 1 == pytest.approx(-factor.imag, rel=1e-12)  # (1 − i) form of Kirchhoff's K


def test_damping_scales_with_flow_and_switches_off():
    # k^± = K k₀/(1 ± M) (Kirchhoff with convection, e.g. Jang & Ih 1998; Seybert & Ross 1977).
    medium = Medium(C_AIR, RHO_AIR, mach=0.08)
    k_plus, k_minus = wavenumbers(800.0, 0.02, medium)
    assert k_plus * (1 + 0.08) == pytest.approx(k_minus * (1 - 0.08), rel=1e-14)
    plain_plus, plain_minus = wavenumbers(800.0, 0.02, medium, damping=False)
    assert (plain_plus, plain_minus) == pytest.approx(plain_wavenumbers(800.0, medium), rel=1e-15)


def test_round_trip_with_damping():
    # Self-consistency with damped wavenumbers (e^{+iωt}): synthesised waves are recovered exactly.
    medium = Medium(C_AIR, RHO_AIR, mach=-0.03)
    k_plus, k_minus = wavenumbers(650.0, 0.015, medium)
    x = np.array([-0.9, -0.55, -0.3, -0.12, -0.05])
    p = synthesise(0.3 - 1.1j, 0.8 + 0.1j, x, k_plus, k_minus)
    fit = decompose(p, x, 650.0, 0.015, medium)
    assert fit.a_plus == pytest.approx(0.3 - 1.1j, abs=1e-12)
    assert fit.a_minus == pytest.approx(0.8 + 0.1j, abs=1e-12)
    assert fit.pressure_at(-0.3) == pytest.approx(p[2], abs=1e-12)


# --- Conditioning and the usable band -----------------------------------------------------------

@pytest.mark.parametrize("freq_hz, spacing_m, mach", [
    (400.0, 0.10, 0.05), (150.0, 0.05, 0.0), (900.0, 0.12, -0.2), (1200.0, 0.03, 0.3), (700.0, 0.24, 0.0),
])
def test_two_sensor_condition_matches_numpy(freq_hz, spacing_m, mach):
    # cond(H) = max(|tan θ|, |cot θ|), θ = k₀s/(2(1 − M²)), against numpy.linalg.cond.
    medium = Medium(C_AIR, RHO_AIR, mach=mach)
    k_plus, k_minus = plain_wavenumbers(freq_hz, medium)
    x = np.array([-0.4, -0.4 + spacing_m])
    h = np.column_stack([np.exp(-1j * k_plus * x), np.exp(1j * k_minus * x)])
    expected = np.linalg.cond(h)
    assert two_sensor_condition(freq_hz, spacing_m, medium) == pytest.approx(expected, rel=1e-9)
    fit = decompose(np.array([1.0, 0.5j]), x, freq_hz, RADIUS, medium, damping=False)
    assert fit.cond == pytest.approx(expected, rel=1e-9)


def test_pair_band_edges():
    # Usable band 0.1π < k s < 0.8π, k s = k₀ s/(1 − M²) (Bodén & Åbom 1986, band from memory).
    medium = Medium(C_AIR, RHO_AIR, mach=0.1)
    spacing = 0.1
    def freq_for(ks_over_pi):
        return ks_over_pi * np.pi * (1 - 0.1**2) * C_AIR / (2 * np.pi * spacing)
    assert not pair_in_band(freq_for(0.09), spacing, medium)
    assert pair_in_band(freq_for(0.11), spacing, medium)
    assert pair_in_band(freq_for(0.79), spacing, medium)
    assert not pair_in_band(freq_for(0.81), spacing, medium)


def test_band_flags_in_worked_example():
    # Worked example: the outer pair (0.40 m) has k s ≈ 0.93π, outside 0.1π–0.8π
    # (Bodén & Åbom 1986, band from memory); every other pair is inside.
    fit, _, _ = worked_fit()
    assert fit.pair_in_band[(0, 3)] is False
    assert all(ok for pair, ok in fit.pair_in_band.items() if pair != (0, 3))
    assert fit.any_pair_in_band
    assert set(fit.pair_in_band) == set(combinations(range(4), 2))


def test_band_warning_when_every_pair_is_outside():
    # Sensors 10–20 mm apart at 400 Hz: k s < 0.05π for every pair (Bodén & Åbom 1986, from memory).
    medium = Medium(C_AIR, RHO_AIR, mach=0.0)
    x = np.array([-0.12, -0.11, -0.10])
    k_plus, k_minus = plain_wavenumbers(400.0, medium)
    fit = decompose(synthesise(1.0, 0.4j, x, k_plus, k_minus), x, 400.0, RADIUS, medium)
    assert not any(fit.pair_in_band.values())
    assert fit.any_pair_in_band is False
    # Near the half-wavelength singularity (k s ≈ π) every pair is outside too.
    x_wide = np.array([-0.5, -0.5 + C_AIR / (2 * 400.0)])
    fit_wide = decompose(np.array([1.0, -1.0 + 0.1j]), x_wide, 400.0, RADIUS, medium, damping=False)
    assert fit_wide.any_pair_in_band is False
    assert fit_wide.cond > 1e6  # cond(H) = |cot θ| blows up at θ = π/2 (two-sensor formula)


# --- Random uncertainty -------------------------------------------------------------------------

def monte_carlo_velocity_variance(p, x, medium, sigma2, weights, n_draws, seed):
    rng = np.random.default_rng(seed)
    scale = np.sqrt(np.broadcast_to(sigma2, p.shape) / 2)
    u = np.empty(n_draws, complex)
    for i in range(n_draws):
        noise = scale * (rng.standard_normal(p.size) + 1j * rng.standard_normal(p.size))
        u[i] = decompose(p + noise, x, 400.0, RADIUS, medium, weights=weights, damping=False).velocity_at(0.0)
    return float(np.mean(np.abs(u - u.mean()) ** 2))


def test_velocity_variance_matches_monte_carlo_equal_noise():
    # var û = σ² gᴴ(HᴴH)⁻¹g for white complex noise of E|δp|² = σ² (least-squares theory,
    # e.g. Kay 1993, Fundamentals of Statistical Signal Processing, ch. 4), checked by Monte Carlo.
    sigma2 = 1e-4
    fit, p, medium = worked_fit(noise_var=sigma2)
    k_plus, k_minus = plain_wavenumbers(400.0, medium)
    h = np.column_stack([np.exp(-1j * k_plus * WORKED_X), np.exp(1j * k_minus * WORKED_X)])
    g = np.array([1.0, -1.0]) / (RHO_AIR * C_AIR)  # at x = 0
    closed_form = sigma2 * np.real(g.conj() @ np.linalg.inv(h.conj().T @ h) @ g)
    assert fit.velocity_variance_at(0.0) == pytest.approx(closed_form, rel=1e-10)
    mc = monte_carlo_velocity_variance(p, WORKED_X, medium, sigma2, None, 4000, seed=11)
    assert fit.velocity_variance_at(0.0) == pytest.approx(mc, rel=0.05)  # Monte Carlo, ~1.6 % std


def test_velocity_variance_matches_monte_carlo_unequal_noise():
    # Unequal sensor noise, unweighted and inverse-variance-weighted fits (generalised least
    # squares, Kay 1993 ch. 4/6): the reported variance follows the Monte Carlo scatter, and
    # weighting by 1/σ² does not increase it.
    sigma2 = np.array([4e-4, 1e-4, 2.5e-5, 1e-4])
    fit0, p, medium = worked_fit()
    results = {}
    for label, weights in (("plain", None), ("weighted", 1 / sigma2)):
        fit = decompose(p, WORKED_X, 400.0, RADIUS, medium, weights=weights, noise_var=sigma2, damping=False)
        mc = monte_carlo_velocity_variance(p, WORKED_X, medium, sigma2, weights, 3000, seed=5)
        assert fit.velocity_variance_at(0.0) == pytest.approx(mc, rel=0.06)  # Monte Carlo, ~1.8 % std
        results[label] = fit.velocity_variance_at(0.0)
    assert results["weighted"] <= results["plain"]
    assert np.all(fit0.cov_a == 0)  # no noise given → zero covariance


# --- Residual and pair consistency --------------------------------------------------------------

def test_residual_and_spread_for_consistent_data():
    fit, _, _ = worked_fit()
    assert fit.residual < 1e-12
    assert fit.pair_spread_at(0.0) < 1e-10
    assert len(fit.pair_velocities_at(0.0)) == 6


def test_mispositioned_sensor_is_flagged():
    # Common practice: with ≥ 3 sensors, pairs are checked against each other. A sensor 10 mm
    # from its declared place raises the residual and the pair spread far above what 60 dB
    # SNR noise does.
    medium = Medium(C_AIR, RHO_AIR, mach=0.05)
    k_plus, k_minus = plain_wavenumbers(400.0, medium)
    rng = np.random.default_rng(3)
    p = synthesise(WORKED_A_PLUS, WORKED_A_MINUS, WORKED_X, k_plus, k_minus)
    noisy_spreads, noisy_residuals = [], []
    for _ in range(30):
        noise = 1e-3 * (rng.standard_normal(4) + 1j * rng.standard_normal(4)) / np.sqrt(2)
        fit = decompose(p + noise, WORKED_X, 400.0, RADIUS, medium, damping=False)
        noisy_spreads.append(fit.pair_spread_at(0.0))
        noisy_residuals.append(fit.residual)
    true_x = WORKED_X.copy()
    true_x[2] += 0.010
    bad = decompose(synthesise(WORKED_A_PLUS, WORKED_A_MINUS, true_x, k_plus, k_minus),
                    WORKED_X, 400.0, RADIUS, medium, damping=False)
    assert max(noisy_spreads) < 0.015
    assert bad.pair_spread_at(0.0) > 0.03
    assert bad.residual > 5 * max(noisy_residuals)


def test_two_sensors_have_no_pair_check():
    medium = Medium(C_AIR, RHO_AIR, mach=0.0)
    fit = decompose(np.array([1.0, 0.3j]), np.array([-0.3, -0.2]), 400.0, RADIUS, medium)
    assert np.isnan(fit.pair_spread_at(0.0))
    assert fit.residual < 1e-12  # two unknowns, two equations


# --- Area change to the reference plane ---------------------------------------------------------

def test_velocity_at_reference_scales_with_area_ratio():
    # Compact, low-Mach area change: p̂ continuous and A₁û₁ = A₂û₂ (mass conservation, e.g.
    # Munjal, Acoustics of Ducts and Mufflers; common practice), so û/ū is unchanged.
    fit, _, _ = worked_fit(noise_var=1e-4)
    area_ratio = (0.025 / 0.012) ** 2  # A_sensor/A_ref: 50 mm duct into a 24 mm nozzle
    u_ref, var_ref = velocity_at_reference(fit, 0.0, area_ratio)
    u_sensor, var_sensor = fit.velocity_at(0.0), fit.velocity_variance_at(0.0)
    assert u_ref == pytest.approx(u_sensor * area_ratio, rel=1e-14)
    assert var_ref == pytest.approx(var_sensor * area_ratio**2, rel=1e-14)
    mean_u_sensor = 2.0  # m/s in the sensor duct
    mean_u_ref = mean_u_sensor * area_ratio  # same mass flow, same density
    assert u_ref / mean_u_ref == pytest.approx(u_sensor / mean_u_sensor, rel=1e-14)
    with pytest.raises(MultimicInputError):
        velocity_at_reference(fit, 0.0, 0.0)


# --- Input checks -------------------------------------------------------------------------------

def test_rejects_bad_layouts():
    medium = Medium(C_AIR, RHO_AIR, mach=0.0)
    with pytest.raises(ValueError, match="distinct"):
        decompose(np.array([1.0, 2.0, 3.0]), np.array([-0.3, -0.2, -0.3]), 400.0, RADIUS, medium)
    with pytest.raises(FlamebodeError, match="at least 2"):
        decompose(np.array([1.0]), np.array([-0.3]), 400.0, RADIUS, medium)
    with pytest.raises(MultimicInputError, match="equal length"):
        decompose(np.array([1.0, 2.0]), np.array([-0.3, -0.2, -0.1]), 400.0, RADIUS, medium)
    with pytest.raises(MultimicInputError, match="weights"):
        decompose(np.array([1.0, 2.0]), np.array([-0.3, -0.2]), 400.0, RADIUS, medium, weights=[1.0, -1.0])
    with pytest.raises(MultimicInputError, match="frequency"):
        decompose(np.array([1.0, 2.0]), np.array([-0.3, -0.2]), 0.0, RADIUS, medium)


def test_rejects_bad_medium():
    with pytest.raises(MultimicInputError, match="mach"):
        Medium(C_AIR, RHO_AIR, mach=1.2)
    with pytest.raises(MultimicInputError, match="density"):
        Medium(C_AIR, -1.0, mach=0.0)
