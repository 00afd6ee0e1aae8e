"""Relative calibration of the pressure sensors (app.core.calibration), on synthetic records.

Convention x(t) = Re{x̂ e^{+iωt}} throughout. Sources are named beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special

from app.core import calibration as cal
from app.core.gas import mixture_state
from app.rig import DRY_AIR, load_rig

FS = 25600.0


def _record(factors: np.ndarray, freq_hz: float, seconds: float, noise_pa: float, seed: int,
            amplitude_pa: float = 20.0) -> np.ndarray:
    """Sensors at one plane: each reads its factor times one pressure, plus its own white noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * FS)) / FS
    p = amplitude_pa * np.exp(1j * (2 * np.pi * freq_hz * t + 0.3))
    x = np.real(factors[:, None] * p[None, :])
    return x + noise_pa * rng.standard_normal(x.shape)


def test_cut_on_is_the_first_zero_of_the_bessel_derivative():
    # Handbook value 1.8412 (first zero of J1', the (1,1) mode of a circular duct); scipy's
    # jnp_zeros is an independent reference for the zero itself.
    assert special.jnp_zeros(1, 1)[0] == pytest.approx(cal.BESSEL_J1_PRIME_ZERO, abs=1e-4)
    f = cal.first_cut_on_hz(0.023, 343.2)
    assert f == pytest.approx(1.8412 * 343.2 / (2 * math.pi * 0.023), rel=1e-12)
    assert f == pytest.approx(4373.0, abs=1.0)   # 46 mm duct, air at 20 °C (derived)
    with pytest.raises(cal.CalibrationError, match="radius"):
        cal.first_cut_on_hz(0.0, 343.2)


def test_duct_cut_on_of_the_demo_rig_uses_its_duct_and_gas(demo_rig_path):
    demo_rig = load_rig(demo_rig_path)
    # 46 mm duct at 24 °C: c of dry air from the gas model (handbook air), f = 1.8412 c / (2π r).
    c_air = mixture_state(DRY_AIR, demo_rig.gas.temperature, demo_rig.gas.pressure).speed_of_sound_m_s
    assert c_air == pytest.approx(345.5, abs=0.5)   # 331.3 √(T/273.15) m/s (from memory)
    f = cal.duct_cut_on_hz(demo_rig)
    assert f <= 1.8412 * c_air / (2 * math.pi * 0.023) + 1e-9
    assert f == pytest.approx(1.8412 * c_air / (2 * math.pi * 0.023), rel=0.01)
    kept, refused = cal.split_at_cut_on([1000.0, f - 1.0, f, 5000.0], f)
    assert kept == [1000.0, f - 1.0] and refused == [f, 5000.0]


def test_factors_are_recovered_and_offset_and_harmonics_do_not_leak():
    # Noise-free: C_i = G_ref,ref / G_ref,i equals r_ref / r_i exactly (common practice), whatever
    # offset and speaker harmonics the sensors also see (they are fitted, not leaked).
    r = np.array([1.0, 1.045 * np.exp(-1j * math.radians(0.6)), 0.97 * np.exp(1j * 0.01)])
    f = 333.3                                       # not an integer number of periods per segment
    x = _record(r, f, 1.0, 0.0, 0)
    t = np.arange(x.shape[1]) / FS
    x += np.array([[0.3], [-1.0], [2.0]])                                     # offsets
    x += np.real(np.array([[0.5], [2.0j], [-1.0]]) * np.exp(2j * np.pi * 2 * f * t))  # 2nd harmonics
    q = cal.calibrate_record(x, ["a", "b", "c"], "a", FS, f)
    np.testing.assert_allclose(q.factor, r[0] / r, rtol=1e-9, atol=1e-12)
    assert q.coherence == pytest.approx(np.ones(3), abs=1e-12)
    assert q.reference_amplitude == pytest.approx(20.0, rel=1e-9)


def test_bendat_piersol_random_error_at_the_domain_check_value():
    # Bendat & Piersol, Random Data, ch. 9: ε ≈ √(1−γ²)/(|γ|√(2 n_d)); γ² = 0.9, n_d = 50 → 0.0333.
    # Monte Carlo: a random pressure per segment seen by both sensors, noise on sensor i only
    # (the H1 model), scaled so that the true coherence is 0.9.
    rng = np.random.default_rng(5)
    trials, n_d, gamma2 = 4000, 50, 0.9
    p = (rng.standard_normal((trials, n_d)) + 1j * rng.standard_normal((trials, n_d))) / math.sqrt(2)
    noise = (rng.standard_normal((trials, n_d)) + 1j * rng.standard_normal((trials, n_d))) / math.sqrt(2)
    s_i = 0.8 * np.exp(0.2j)
    sigma = abs(s_i) * math.sqrt((1 - gamma2) / gamma2)
    logs, phases, reported = [], [], []
    for k in range(trials):
        q = cal.common_plane_factors(np.stack([p[k], s_i * p[k] + sigma * noise[k]], axis=1), 0, 100.0)
        logs.append(math.log(abs(q.factor[1] * s_i)))
        phases.append(float(np.angle(q.factor[1] * s_i)))
        reported.append(q.u_gain_rel[1])
    expected = math.sqrt(1 - gamma2) / (math.sqrt(gamma2) * math.sqrt(2 * n_d))
    assert expected == pytest.approx(0.0333, abs=5e-5)
    assert np.std(logs) == pytest.approx(expected, rel=0.08)
    assert np.std(phases) == pytest.approx(expected, rel=0.08)
    assert np.mean(reported) == pytest.approx(expected, rel=0.08)


def test_uncertainty_covers_the_error_two_sided():
    # Coverage of the standard uncertainty (common practice for an uncertainty estimate):
    # about 68 % of errors within 1 u and 95 % within 2 u; neither too small nor too large.
    r = np.array([1.0, 1.03 * np.exp(0.01j), 0.96 * np.exp(-0.02j), 1.01])
    z = []
    for seed in range(60):
        q = cal.calibrate_record(_record(r, 250.0, 0.5, 3.0, seed), list("abcd"), "b", FS, 250.0)
        err = q.factor / (r[1] / r)
        z += list(np.log(np.abs(err[[0, 2, 3]])) / q.u_gain_rel[[0, 2, 3]])
        z += list(np.angle(err[[0, 2, 3]]) / q.u_phase_rad[[0, 2, 3]])
    z = np.abs(np.array(z))
    assert 0.58 <= np.mean(z < 1.0) <= 0.78, np.mean(z < 1.0)
    assert 0.91 <= np.mean(z < 2.0) <= 0.99, np.mean(z < 2.0)


def _calibration(reference: str, seed: int, noise_pa: float = 2.0) -> cal.Calibration:
    r = np.array([1.0, 1.045 * np.exp(-0.0105j), 0.98, 1.02 * np.exp(0.005j)])
    pts = [cal.calibrate_record(_record(r, f, 0.5, noise_pa, seed + int(f)), list("abcd"), reference, FS, f)
           for f in (200.0, 400.0, 800.0)]
    return cal.assemble(pts, list("abcd"), reference)


def test_two_references_agree_and_a_disagreement_is_caught():
    # C_i/r1 · C_r1/r2 = C_i/r2 (common practice: repeat with the reference changed).
    first, second = _calibration("a", 1), _calibration("c", 2)
    check = cal.consistency(first, second)
    assert check.consistent and check.worst_z < cal.CONSISTENCY_LIMIT
    bad_factor = second.factor.copy()
    bad_factor[1, second.column("d")] *= 1 + 20 * second.u_gain_rel[1, second.column("d")]
    bad = cal.Calibration(second.sensors, "c", second.freq_hz, bad_factor, second.u_gain_rel,
                          second.u_phase_rad, second.coherence)
    check = cal.consistency(first, bad)
    assert not check.consistent
    assert (check.worst_sensor, check.worst_freq_hz, check.worst_part) == ("d", 400.0, "gain")
    with pytest.raises(cal.CalibrationError, match="another one"):
        cal.consistency(first, first)


def test_interpolation_inside_the_band_and_refusal_outside():
    c = _calibration("a", 3, noise_pa=0.0)
    np.testing.assert_allclose(cal.factors_at(c, 400.0), c.factor[1], rtol=1e-12)
    mid = cal.factors_at(c, 600.0)
    np.testing.assert_allclose(np.abs(mid), 0.5 * (np.abs(c.factor[1]) + np.abs(c.factor[2])), rtol=1e-12)
    for f in (199.0, 801.0):
        with pytest.raises(cal.CalibrationBandError, match=r"outside the calibrated band 200-800 Hz"):
            cal.factors_at(c, f)
    assert cal.outside_band(c, [100.0, 200.0, 800.0, 900.0]) == [100.0, 900.0]


def test_unusable_records_are_refused_with_the_reason():
    with pytest.raises(cal.CalibrationError, match="periods"):
        cal.segment_phasors(np.zeros((2, 100)), FS, 100.0)
    with pytest.raises(cal.CalibrationError, match="non-finite"):
        cal.segment_phasors(np.full((2, 25600), np.nan), FS, 100.0)
    with pytest.raises(cal.CalibrationError, match="reference sensor 'x'"):
        cal.calibrate_record(np.ones((2, 25600)), ["a", "b"], "x", FS, 100.0)
    silent = _record(np.array([1.0, 0.0]), 300.0, 0.5, 0.0, 0)
    with pytest.raises(cal.CalibrationError, match="no signal coherent"):
        cal.calibrate_record(silent, ["a", "b"], "a", FS, 300.0)
