"""The FTF point's uncertainty: invariances and cross-checks of the error budget.

Convention throughout: x(t) = Re{x̂ e^{+iωt}}, so a delay gives a falling phase.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from app.core.response import evaluate_point
from app.rig import load_rig, rig_from_dict

from synth import make_record, n_tau

DEMO_RIG = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"


def rig_variant(shift_m: float = 0.0, sensors: tuple[int, ...] | None = None, **gas):
    """The demo rig with every axial position (reference plane and duct end included) moved by
    ``shift_m``, optionally only the sensors numbered in ``sensors``, and gas fields replaced."""
    data = load_rig(DEMO_RIG).model_dump()
    data.pop("source_path")
    duct = data["duct"]
    duct["reference_plane"] += shift_m
    duct["upstream_end"] += shift_m
    chosen = [s for i, s in enumerate(data["pressure_sensors"]) if sensors is None or i in sensors]
    for s in chosen:
        s["position"] += shift_m
    data["pressure_sensors"] = chosen
    data["gas"].update(gas)
    return rig_from_dict(data, "variant")


def _reported(pt) -> np.ndarray:
    v = pt.velocity
    return np.array([v.velocity_ref.real, v.velocity_ref.imag, v.var_velocity_ref, v.sigma_ratio, pt.gain,
                     pt.phase_rad, pt.gain_ci95, pt.phase_ci95_rad, pt.quality["relative_uncertainty"],
                     pt.quality["relative_uncertainty_systematic"]])


@pytest.mark.parametrize("sensors", [(0, 2), (0, 1, 2, 3)], ids=["2 sensors", "4 sensors"])
@pytest.mark.parametrize("freq_hz", [130.0, 470.0])
def test_shifting_the_axis_origin_changes_no_reported_value(sensors, freq_hz):
    # A physical result cannot depend on where the axis origin is (common practice; with
    # û = gᵀa, E|δû|² = gᵀ Cov(a) ḡ is origin-invariant, JCGM 102:2011 §6 for complex outputs).
    # The record is the same (the generator works relative to the reference plane); only the
    # coordinates in the rig file move.
    base = rig_variant(0.0, sensors)
    rec = make_record(base, freq_hz, n_tau(0.9, 2.1e-3), duration_s=1.0, noise_pa=1.0, light_noise_v=0.04,
                      rng=np.random.default_rng(5))
    ref = _reported(evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, freq_hz, base))
    assert np.all(np.isfinite(ref)) and ref[2] > 0 and ref[-1] > 0
    for shift in (0.3, 0.9, -1.7):
        moved = rig_variant(shift, sensors)
        rec_m = make_record(moved, freq_hz, n_tau(0.9, 2.1e-3), duration_s=1.0, noise_pa=1.0, light_noise_v=0.04,
                            rng=np.random.default_rng(5))
        np.testing.assert_allclose(rec_m.data, rec.data, rtol=0, atol=1e-9)   # same record to rounding
        got = _reported(evaluate_point(rec_m.data, rec_m.channels, rec_m.sample_rate_hz, freq_hz, moved))
        np.testing.assert_allclose(got, ref, rtol=1e-6, atol=1e-12, err_msg=f"shift {shift} m")


def test_noise_cross_spectral_matrix_matches_scipy_csd_on_the_same_data():
    # Independent reference: scipy.signal.csd (Welch-averaged cross-spectra; Bendat & Piersol,
    # Random Data, ch. 9). scipy's csd(x, y) is E[X̄ Y], so noise_csd[i, j] = csd(x[j], x[i]).
    # Channel 2 carries channel 1's noise 5 samples later (a cross-spectrum phase of -ωτ in the
    # e^{+iωt} convention) plus its own; channel 3 is independent and coloured.
    from scipy import signal

    from app.core.harmonic import fit_harmonics

    fs, f, n = 12800.0, 312.5, 12800 * 8
    rng = np.random.default_rng(12)
    common = rng.standard_normal(n + 5)
    noise = np.vstack([common[5:], 0.9 * common[:-5] + 0.25 * rng.standard_normal(n),
                       signal.lfilter([1.0], [1.0, -0.6], rng.standard_normal(n))])
    t = np.arange(n) / fs
    x = noise + np.array([[1.0], [0.7], [0.4]]) * np.cos(2 * np.pi * f * t + np.array([[0.0], [1.0], [2.0]]))
    fit = fit_harmonics(x, fs, f, n_harmonics=3)
    freqs, ref = signal.csd(noise[None, :, :], noise[:, None, :], fs=fs, nperseg=4096, axis=-1)  # [i, j] = csd(x_j, x_i)
    near = np.abs(freqs - f) <= 4.0
    ref = ref[..., near].mean(axis=-1)
    ours = fit.noise_csd
    assert ours.shape == (3, 3)
    np.testing.assert_allclose(np.real(np.diag(ours)), fit.noise_psd, rtol=1e-12)
    np.testing.assert_allclose(ours, ours.conj().T, atol=1e-15)
    tau_phase = -2 * np.pi * f * 5 / fs
    assert abs(np.angle(ref[1, 0]) - tau_phase) < 0.05          # the oracle sees the delay
    # Coherent pair (γ² ≈ 0.93): transfer ratio and cross phase within a few times the random
    # error √(1-γ²)/(|γ|√(2 n_d)) ≈ 0.03 (Bendat & Piersol ch. 9) of the two estimates.
    assert abs(ours[1, 0] / ours[0, 0] - ref[1, 0] / ref[0, 0]) < 0.12 * abs(ref[1, 0] / ref[0, 0])
    assert abs(np.angle(ours[1, 0] / ref[1, 0])) < 0.12
    # Levels: within 4 standard errors of an estimate with ν degrees of freedom.
    tol = 4 * np.sqrt(2 / fit.noise_dof) + 0.05
    for i in range(3):
        assert abs(ours[i, i].real / ref[i, i].real - 1) < tol
    assert abs(ours[2, 0]) < tol * np.sqrt(ref[0, 0].real * ref[2, 2].real)   # independent: no cross term
    np.testing.assert_allclose(fit.cov_amplitude, ours * fit.var_amplitude[0] / fit.noise_psd[0], rtol=1e-9)


def test_satterthwaite_degrees_of_freedom_match_the_scatter_of_the_noise_estimate():
    # A variance estimate with ν degrees of freedom scatters as χ²_ν/ν: var(v̂)/E[v̂]² = 2/ν
    # (Satterthwaite 1946; JCGM 100:2008 Annex G). White noise, long and short records.
    from app.core.harmonic import fit_harmonics

    fs = 12800.0
    rng = np.random.default_rng(3)
    for f, duration, lo, hi in ((220.0, 0.5, 60.0, 130.0), (100.0, 0.1, 3.0, 8.0)):
        n = int(fs * duration)
        x = np.cos(2 * np.pi * f * np.arange(n) / fs) + rng.standard_normal((2000, n))
        fit = fit_harmonics(x, fs, f, n_harmonics=3)
        assert lo < fit.noise_dof < hi
        v = fit.var_amplitude
        empirical = 2 * v.mean() ** 2 / v.var()
        assert abs(empirical / fit.noise_dof - 1) < 0.13     # 2000 draws: about ±0.035 standard error
        assert abs(v.mean() / np.var(fit.amplitude) - 1) < 0.08   # the variance itself is unbiased


@pytest.mark.parametrize("m", [20, 40])
def test_generalised_fit_with_an_estimated_covariance_reports_its_actual_variance(m):
    # GLS weighted by a covariance estimated from m complex snapshots: the estimate scatters by
    # m/(m-n+2) more than with the true Σ and the plug-in (HᴴΣ̂⁻¹H)⁻¹ is low by (m-n+2)/m
    # (complex Wishart moments, from memory); the fit states the product. Monte Carlo check.
    from app.core.multimic import Medium, decompose

    medium = Medium(343.2, 1.2041, mach=0.05)
    x = np.array([-0.62, -0.48, -0.30, -0.15])
    rng = np.random.default_rng(m)
    a = rng.standard_normal((4, 4)) + 1j * rng.standard_normal((4, 4))
    sigma = a @ a.conj().T + 0.2 * np.eye(4)
    root = np.linalg.cholesky(sigma)
    clean = decompose(np.ones(4, complex), x, 300.0, 0.023, medium)
    h = np.linalg.pinv(clean.estimator)          # the wave matrix, recovered for the synthesis
    p0 = h @ np.array([1.0 + 0.2j, 0.5 - 0.3j])
    u_true = decompose(p0, x, 300.0, 0.023, medium).velocity_at(0.0)     # noise-free: exact
    errors, stated = [], []
    for _ in range(3000):
        snaps = root @ (rng.standard_normal((4, m)) + 1j * rng.standard_normal((4, m))) / np.sqrt(2)
        noise = root @ (rng.standard_normal(4) + 1j * rng.standard_normal(4)) / np.sqrt(2)
        fit = decompose(p0 + noise, x, 300.0, 0.023, medium, noise_cov=snaps @ snaps.conj().T / m,
                        noise_dof=2 * m)
        assert fit.generalised
        errors.append(abs(fit.velocity_at(0.0) - u_true) ** 2)
        stated.append(fit.velocity_variance_at(0.0))
    ratio = np.mean(errors) / np.mean(stated)
    assert abs(ratio - 1) < 0.08        # 3000 draws: standard error about 0.03
