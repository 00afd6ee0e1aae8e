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


def rig_variant(shift_m: float = 0.0, sensors: tuple[int, ...] | None = None, light: dict | None = None,
                calibration_uncertainty: bool = False, **gas):
    """The demo rig with every axial position (reference plane and duct end included) moved by
    ``shift_m``, optionally only the sensors numbered in ``sensors``, light and gas fields replaced;
    the sensors' stated calibration and the flow meters' uncertainties kept only with
    ``calibration_uncertainty``."""
    data = load_rig(DEMO_RIG).model_dump()
    data.pop("source_path")
    duct = data["duct"]
    duct["reference_plane"] += shift_m
    duct["upstream_end"] += shift_m
    chosen = [s for i, s in enumerate(data["pressure_sensors"]) if sensors is None or i in sensors]
    for s in chosen:
        s["position"] += shift_m
        if not calibration_uncertainty:
            s["gain_uncertainty"] = s["phase_uncertainty"] = 0.0
    data["pressure_sensors"] = chosen
    if not calibration_uncertainty:
        for meter in data["gas"]["flows"]:
            meter["relative_uncertainty"] = 0.0
    data["gas"].update(gas)
    data["light"].update(light or {})
    return rig_from_dict(data, "variant")


def _reported(pt) -> np.ndarray:
    v = pt.velocity
    return np.array([v.velocity_ref.real, v.velocity_ref.imag, v.var_velocity_ref, v.sigma_ratio, pt.gain,
                     pt.phase_rad, pt.gain_ci95, pt.phase_ci95_rad, pt.quality["relative_uncertainty"],
                     pt.quality["relative_uncertainty_systematic"], pt.quality["velocity_rel_uncertainty"],
                     pt.quality["drift_velocity_z"], pt.quality["drift_light_z"],
                     np.nan_to_num(pt.quality["pair_spread_z"], nan=0.0)]
                    + [abs(d) for _, d in pt.budget])   # the budget's terms, calibration included


@pytest.mark.parametrize("sensors", [(0, 2), (0, 1, 2, 3)], ids=["2 sensors", "4 sensors"])
@pytest.mark.parametrize("freq_hz", [130.0, 470.0])
def test_shifting_the_axis_origin_changes_no_reported_value(sensors, freq_hz):
    # A physical result cannot depend on where the axis origin is (common practice; with
    # û = gᵀa, E|δû|² = gᵀ Cov(a) ḡ is origin-invariant, JCGM 102:2011 §6 for complex outputs).
    # The record is the same (the generator works relative to the reference plane); only the
    # coordinates in the rig file move.
    base = rig_variant(0.0, sensors, calibration_uncertainty=True)
    rec = make_record(base, freq_hz, n_tau(0.9, 2.1e-3), duration_s=1.0, noise_pa=1.0, light_noise_v=0.04,
                      rng=np.random.default_rng(5))
    ref = _reported(evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, freq_hz, base))
    assert np.all(np.isfinite(ref)) and ref[2] > 0 and ref[-1] > 0
    for shift in (0.3, 0.9, -1.7):
        moved = rig_variant(shift, sensors, calibration_uncertainty=True)
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


def test_systematic_terms_split_by_their_complex_direction():
    # JCGM 100:2008 §5.1.2: a shift d of δF/F moves the gain by Re d and the phase by Im d.
    from app.core.uncertainty import PhasorCovariance, ratio_interval

    quiet = PhasorCovariance(np.diag([1e-14, 1e-14]).astype(complex), 50.0)
    phase_only = ratio_interval(0.05 + 0j, 0.05 + 0j, quiet, np.array([0.03j]))
    assert phase_only.systematic_gain_var == 0.0
    assert phase_only.systematic_phase_var == pytest.approx(9e-4)
    assert phase_only.gain_ci95 < 1e-5 and phase_only.phase_ci95_rad == pytest.approx(1.959964 * 0.03, rel=1e-4)
    mixed = ratio_interval(0.05 + 0j, 0.05 + 0j, quiet, np.array([0.03 + 0.04j, -0.01 + 0j]))
    assert mixed.sigma_gain_rel == pytest.approx(np.sqrt(0.03**2 + 0.01**2), rel=1e-6)
    assert mixed.sigma_phase_rad == pytest.approx(0.04, rel=1e-6)


def test_temperature_error_moves_gain_and_phase_as_the_budget_says():
    # A record made in gas 1 K warmer than the rig file states, analysed with the nominal rig,
    # against the budget for a 1 K standard uncertainty (linear in a small error, JCGM 100:2008
    # §5.1.2): the actual complex shift of F splits into gain and phase like the budget's terms.
    f = 800.0
    exact = rig_variant(0.0, None, temperature_uncertainty=0.0)
    for s_ in exact.pressure_sensors:
        assert s_.position_uncertainty > 0     # the demo rig states them; remove for this test
    data = exact.model_dump()
    data.pop("source_path")
    for s_ in data["pressure_sensors"]:
        s_["position_uncertainty"] = 0.0
    nominal_rig = rig_from_dict(data, "nominal")
    warm = rig_from_dict({**data, "gas": {**data["gas"], "temperature": data["gas"]["temperature"] + 1.0}}, "warm")
    budget_rig = rig_from_dict({**data, "gas": {**data["gas"], "temperature_uncertainty": 1.0}}, "budget")
    rec = make_record(warm, f, n_tau(1.0, 2e-3), noise_pa=1e-4, light_noise_v=1e-6, white=True)
    nominal = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, f, nominal_rig)
    budget = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, f, budget_rig).interval
    shift = nominal.ftf / rec.true_ftf - 1.0
    assert abs(shift) > 3e-3
    assert abs(shift.real) == pytest.approx(np.sqrt(budget.systematic_gain_var), rel=0.1, abs=2e-4)
    assert abs(shift.imag) == pytest.approx(np.sqrt(budget.systematic_phase_var), rel=0.1, abs=2e-4)


def test_welch_satterthwaite_and_student_t_coverage_factor():
    # JCGM 100:2008 Annex G: ν_eff = u_c⁴ / Σ u_i⁴/ν_i (G.2b); k = t_{0.975}(ν_eff) (Table G.2:
    # t = 2.23 at ν = 10, 2.09 at ν = 20, 1.96 at ν = ∞).
    from app.core.uncertainty import coverage_factor, welch_satterthwaite

    assert welch_satterthwaite(np.array([1.0, 1.0]), np.array([10.0, np.inf])) == pytest.approx(40.0)
    assert welch_satterthwaite(np.array([1.0, 3.0]), np.array([5.0, 15.0])) == pytest.approx(16 / (1 / 5 + 9 / 15))
    assert coverage_factor(10.0) == pytest.approx(2.23, abs=0.005)
    assert coverage_factor(20.0) == pytest.approx(2.09, abs=0.005)
    assert coverage_factor(np.inf) == pytest.approx(1.96, abs=0.005)


def test_short_record_gets_a_student_t_factor():
    # 5 periods per record: one segment's worth of noise estimate, few degrees of freedom; the
    # factor is the t quantile at the point's Welch–Satterthwaite ν (JCGM 100:2008 Annex G).
    from scipy import stats

    rig = rig_variant(0.0, None, light={"dark_offset_uncertainty": 1e-9}, temperature_uncertainty=0.0)
    rec = make_record(rig, 100.0, n_tau(0.9, 2e-3), duration_s=0.07, noise_pa=0.05, light_noise_v=0.002,
                      rng=np.random.default_rng(9), white=True)
    pt = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 100.0, rig)
    q = pt.quality
    assert 1.0 < q["dof_gain"] < 20.0
    assert q["coverage_factor_gain"] == pytest.approx(stats.t.ppf(0.975, q["dof_gain"]), rel=1e-9)
    assert q["coverage_factor_gain"] > 2.1


def test_low_snr_interval_stays_within_half_a_turn_and_is_flagged():
    # Below ~20 dB first-order propagation fails; the interval comes from the ratio's own
    # distribution (parametric bootstrap, Efron & Tibshirani 1993 ch. 6): a phase half-width is
    # at most π, and the point carries the too-uncertain flag.
    from app.core.quality import quality_flags
    from app.plan import Quality

    rig = rig_variant(0.0, None, temperature_uncertainty=0.0)
    rec = make_record(rig, 220.0, n_tau(0.9, 2e-3), duration_s=0.1, noise_pa=40.0, light_noise_v=0.6,
                      rng=np.random.default_rng(4), white=True)
    pt = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 220.0, rig)
    assert pt.quality["interval_linear"] == 0.0
    assert 0.3 < pt.phase_ci95_rad <= np.pi
    assert pt.quality["relative_ci95"] > 0.3
    assert "too-uncertain" in quality_flags(pt.quality, Quality())
    quiet = make_record(rig, 220.0, n_tau(0.9, 2e-3), duration_s=1.0, rng=np.random.default_rng(4))
    good = evaluate_point(quiet.data, quiet.channels, quiet.sample_rate_hz, 220.0, rig)
    assert good.quality["interval_linear"] == 1.0
    assert "too-uncertain" not in quality_flags(good.quality, Quality())


def test_dark_offset_uncertainty_enters_the_gain_only():
    # A dark offset stated δ too low raises Q̄ = mean − dark by δ and lowers |Q̂'/Q̄| by δ/Q̄:
    # the budget's real (gain-only) term u_dark/Q̄ (JCGM 100:2008 §5.1.2) must match that shift.
    data = rig_variant(0.0, None, temperature_uncertainty=0.0).model_dump()
    data.pop("source_path")
    for s_ in data["pressure_sensors"]:
        s_["position_uncertainty"] = 0.0
    u_dark = 0.02
    exact = rig_from_dict({**data, "light": {**data["light"], "dark_offset_uncertainty": 1e-9}}, "exact")
    stated = rig_from_dict({**data, "light": {**data["light"], "dark_offset_uncertainty": u_dark}}, "stated")
    wrong = rig_from_dict({**data, "light": {**data["light"], "dark_offset": data["light"]["dark_offset"] - u_dark,
                                               "dark_offset_uncertainty": 1e-9}}, "wrong")
    rec = make_record(exact, 300.0, n_tau(1.0, 2e-3), noise_pa=1e-4, light_noise_v=1e-6, white=True)
    pt = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 300.0, stated)
    off = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 300.0, wrong)
    iv = pt.interval
    assert iv.systematic_phase_var == pytest.approx(0.0, abs=1e-12)
    assert np.sqrt(iv.systematic_gain_var) == pytest.approx(u_dark / 2.0, rel=0.01)   # light mean 2 V
    assert off.gain / abs(rec.true_ftf) - 1 == pytest.approx(-np.sqrt(iv.systematic_gain_var), rel=0.03)


def test_point_summary_carries_the_velocity_uncertainty_and_the_interval_basis():
    import json

    from app.core.response import point_summary

    rig = rig_variant(0.0, None)
    rec = make_record(rig, 300.0, n_tau(1.0, 2e-3), rng=np.random.default_rng(2))
    pt = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 300.0, rig)
    summary = json.loads(json.dumps(point_summary(pt), allow_nan=False))
    assert summary["velocity_ratio_sigma"] == pytest.approx(pt.velocity.sigma_ratio)
    assert summary["gain_dof"] > 10 and summary["interval_method"] == "linear"
    assert summary["quality"]["coverage_factor_gain"] > 1.95
