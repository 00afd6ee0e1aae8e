"""Tests of app.core.harmonic: least-squares amplitudes, their uncertainty, frequency estimate.

Checks against numpy's general least-squares solver, the DFT identity over an integer
number of periods, the Cramér–Rao bound (Kay 1993; Rife & Boorstyn 1974), the AR(1)
spectrum formula, and scipy.signal's Welch/CSD H1 estimator. Every phase here uses the
e^{+iωt} convention: x(t) = Re{a e^{+iωt}}, t = 0 at the first sample.
"""

from __future__ import annotations


import numpy as np
import pytest
from scipy import signal

from app.core.harmonic import HarmonicFit, estimate_frequency, fit_harmonics


def tone(n: int, fs: float, f: float, amp: complex, offset: float = 0.0,
         harmonics: dict[int, complex] | None = None) -> np.ndarray:
    """offset + Re{amp e^{+iωt}} + Σ Re{h_k e^{+ikωt}}, t = n/fs."""
    t = np.arange(n) / fs
    x = offset + np.real(amp * np.exp(2j * np.pi * f * t))
    for k, h in (harmonics or {}).items():
        x = x + np.real(h * np.exp(2j * np.pi * k * f * t))
    return x


def lstsq_reference(x: np.ndarray, fs: float, f: float, orders: tuple[int, ...]) -> np.ndarray:
    """Coefficients [offset, a_1, a_2, ...] (complex amplitudes, e^{+iωt}) by numpy.linalg.lstsq."""
    t = np.arange(x.shape[-1]) / fs
    cols = [np.ones_like(t)]
    for k in orders:
        cols += [np.cos(2 * np.pi * k * f * t), np.sin(2 * np.pi * k * f * t)]
    beta = np.linalg.lstsq(np.column_stack(cols), x.T, rcond=None)[0]
    return np.vstack([beta[0], beta[1::2] - 1j * beta[2::2]])


def ar1_noise(rng: np.random.Generator, shape: tuple[int, int], rho: float, warmup: int = 400) -> np.ndarray:
    """Unit-innovation AR(1) noise w[n] = ρ w[n-1] + e[n], started in its stationary state."""
    e = rng.standard_normal((shape[0], shape[1] + warmup))
    return signal.lfilter([1.0], [1.0, -rho], e, axis=-1)[:, warmup:]


def monte_carlo(rng: np.random.Generator, n: int, fs: float, f: float, amp: complex, noise,
                trials: int, batch: int = 500, n_harmonics: int = 1) -> tuple[np.ndarray, list[HarmonicFit]]:
    """Many records of one tone plus noise, each trial a channel of a batched fit."""
    clean = tone(n, fs, f, amp, offset=0.7)
    errors, fits = [], []
    for _ in range(trials // batch):
        fit = fit_harmonics(clean + noise((batch, n)), fs, f, n_harmonics)
        errors.append(fit.amplitude)
        fits.append(fit)
    return np.concatenate(errors), fits


def gather(fits: list[HarmonicFit], name: str) -> np.ndarray:
    return np.concatenate([getattr(fit, name) for fit in fits])


# ------------------------------------------------------------------ exact least squares


def test_non_integer_periods_match_numpy_lstsq():
    rng = np.random.default_rng(11)
    fs, f, n = 10_000.0, 123.456, 4321        # 53.3 periods: not an integer
    amps = np.array([1.3 * np.exp(0.8j), 0.02 * np.exp(-2.9j), 4.0 * np.exp(1.7j)])
    x = np.vstack([tone(n, fs, f, a, offset=o, harmonics={2: 0.1 * a, 3: 0.05j * a})
                   for a, o in zip(amps, (0.5, -3.0, 10.0))])
    x_noisy = x + 0.05 * rng.standard_normal(x.shape)
    fit = fit_harmonics(x_noisy, fs, f, n_harmonics=3)
    ref = lstsq_reference(x_noisy, fs, f, (1, 2, 3))
    # general-purpose library: numpy.linalg.lstsq on the same cos/sin/offset regressors, e^{+iωt}
    np.testing.assert_allclose(fit.offset, ref[0].real, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(fit.amplitude, ref[1], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(fit.harmonics, ref[2:].T, rtol=1e-9, atol=1e-12)
    t = np.arange(n) / fs
    model = np.real(ref[0][:, None] + sum(ref[k][:, None] * np.exp(2j * np.pi * k * f * t) for k in (1, 2, 3)))
    np.testing.assert_allclose(fit.rms_residual, np.sqrt(np.mean((x_noisy - model) ** 2, axis=1)), rtol=1e-6)
    # noiseless: the generator's own amplitudes, phases and offsets come back exactly
    clean = fit_harmonics(x, fs, f, n_harmonics=3)
    np.testing.assert_allclose(clean.amplitude, amps, rtol=1e-12, atol=1e-13)
    np.testing.assert_allclose(clean.offset, [0.5, -3.0, 10.0], rtol=1e-12)
    np.testing.assert_allclose(clean.harmonics[:, 0], 0.1 * amps, rtol=1e-11, atol=1e-13)


def test_integer_periods_equal_the_dft_sum():
    fs, n = 8192.0, 8192
    f = 37 * fs / n                           # exactly 37 periods in the record
    rng = np.random.default_rng(3)
    x = rng.standard_normal((4, n)) + tone(n, fs, f, 0.3 - 0.4j, offset=2.0)
    fit = fit_harmonics(x, fs, f)
    # textbook DFT identity: over whole periods a = (2/N) Σ x[n] e^{-iωnΔt} (e^{+iωt} convention)
    dft = 2.0 / n * x @ np.exp(-2j * np.pi * f * np.arange(n) / fs)
    np.testing.assert_allclose(fit.amplitude, dft, rtol=1e-10, atol=1e-13)
    np.testing.assert_allclose(fit.offset, x.mean(axis=1), rtol=1e-10, atol=1e-13)


def test_many_channels_equal_one_at_a_time():
    rng = np.random.default_rng(5)
    x = rng.standard_normal((6, 3000)) + tone(3000, 2500.0, 77.7, 1.0 + 0.5j)
    together = fit_harmonics(x, 2500.0, 77.7, n_harmonics=2)
    for ch in range(6):
        alone = fit_harmonics(x[ch], 2500.0, 77.7, n_harmonics=2)
        # internal consistency (common practice): batching must not change any figure
        for name in ("amplitude", "offset", "harmonics", "var_amplitude", "noise_psd", "rms_residual"):
            np.testing.assert_allclose(getattr(alone, name)[0], getattr(together, name)[ch], rtol=1e-10)


# ------------------------------------------------------------------ Cramér–Rao bound


def crlb_std(n: int, amp: float, sigma: float) -> tuple[float, float]:
    """(std Â, std φ̂) bound, known ω, white noise: var Â ≥ 2σ²/N, var φ̂ ≥ 2σ²/(A²N)."""
    # Kay 1993, Fundamentals of Statistical Signal Processing Vol. 1, ch. 3; Rife & Boorstyn 1974
    return np.sqrt(2 * sigma**2 / n), np.sqrt(2 * sigma**2 / (amp**2 * n))


def test_crlb_check_value():
    # Kay 1993 ch. 3 / Rife & Boorstyn 1974: N = 1e5, A²/(2σ²) = 1 -> std(Â)/A = std(φ̂) = 3.16e-3
    std_a, std_phi = crlb_std(100_000, 1.0, np.sqrt(0.5))
    assert std_a == pytest.approx(3.16e-3, rel=2e-3)
    assert std_phi == pytest.approx(3.16e-3, rel=2e-3)


def test_monte_carlo_scatter_reaches_the_crlb_and_matches_reported_sigma():
    rng = np.random.default_rng(2024)
    n, fs, f, amp, sigma = 4096, 1000.0, 37.43, 1.0, np.sqrt(0.5)   # A²/(2σ²) = 1, 153.3 periods
    phase0 = 0.6
    est, fits = monte_carlo(rng, n, fs, f, amp * np.exp(1j * phase0), lambda s: sigma * rng.standard_normal(s),
                            trials=4000)
    std_a, std_phi = crlb_std(n, amp, sigma)
    # Kay 1993 ch. 3; Rife & Boorstyn 1974: the LS estimator is efficient (e^{+iωt} phase)
    assert np.std(np.abs(est)) == pytest.approx(std_a, rel=0.05)
    assert np.std(np.angle(est)) == pytest.approx(std_phi, rel=0.05)
    assert abs(np.mean(np.angle(est)) - phase0) < 4 * std_phi / np.sqrt(4000)
    # the reported uncertainty must describe the scatter (rms over trials)
    assert np.sqrt(np.mean(gather(fits, "sigma_abs") ** 2)) == pytest.approx(np.std(np.abs(est)), rel=0.10)
    assert np.sqrt(np.mean(gather(fits, "sigma_phase_rad") ** 2)) == pytest.approx(np.std(np.angle(est)), rel=0.10)


# ------------------------------------------------------------------ coloured noise


@pytest.mark.parametrize("rho, freq_hz", [(0.9, 300.17), (0.9, 20.17), (-0.8, 470.3), (0.99, 250.3)])
def test_reported_sigma_follows_coloured_noise(rho: float, freq_hz: float):
    """The noise at f, not the mean noise, sets the scatter; the estimate must know that."""
    rng = np.random.default_rng(int(1000 * abs(rho) + freq_hz))
    n, fs, scale = 4096, 1000.0, 0.05
    est, fits = monte_carlo(rng, n, fs, freq_hz, 1.0 + 0.3j, lambda s: scale * ar1_noise(rng, s, rho), trials=4000)
    true_var = np.mean(np.abs(est - np.mean(est)) ** 2)
    std_abs, std_phase = np.std(np.abs(est)), np.std(np.angle(est))
    # e^{+iωt} phases; reported σ agrees with the Monte Carlo scatter (common practice: ~10 %)
    assert np.sqrt(np.mean(gather(fits, "sigma_abs") ** 2)) == pytest.approx(std_abs, rel=0.10)
    assert np.sqrt(np.mean(gather(fits, "sigma_phase_rad") ** 2)) == pytest.approx(std_phase, rel=0.10)
    assert np.mean(gather(fits, "var_amplitude")) == pytest.approx(true_var, rel=0.10)
    # AR(1) spectrum (Kay 1993 / Box & Jenkins): G(f) = 2σ_e²/fs / |1 − ρ e^{-i2πf/fs}|², one-sided
    psd_true = 2 * scale**2 / fs / abs(1 - rho * np.exp(-2j * np.pi * freq_hz / fs)) ** 2
    assert np.mean(gather(fits, "noise_psd")) == pytest.approx(psd_true, rel=0.10)
    # a white-noise assumption (mean residual power) would miss here by more than 2x in variance
    white_var = 4 * np.mean(gather(fits, "rms_residual") ** 2) / n
    assert not 0.5 < white_var / true_var < 2.0


def test_snr_definition_for_white_noise():
    rng = np.random.default_rng(8)
    n, fs, f, amp, sigma = 20_000, 5000.0, 321.0, 0.2, 1.0
    fit = fit_harmonics(tone(n, fs, f, amp) + sigma * rng.standard_normal((50, n)), fs, f)
    # white noise: G = 2σ²/fs (one-sided), SNR = (A²/2)/(G/T) = A²N/(4σ²) (definition in the module)
    expected_db = 10 * np.log10(amp**2 * n / (4 * sigma**2))
    assert np.median(fit.snr_db) == pytest.approx(expected_db, abs=0.5)
    assert np.mean(fit.noise_psd) == pytest.approx(2 * sigma**2 / fs, rel=0.05)


# ------------------------------------------------------------------ independent estimator


def test_ratio_of_amplitudes_matches_scipy_h1():
    rng = np.random.default_rng(17)
    fs, n, f, nperseg = 2048.0, 2048 * 16, 64.0, 256      # f on bin 8 of every Welch segment
    h_true = 0.7 * np.exp(-1.1j)
    u = tone(n, fs, f, 1.5 * np.exp(0.3j)) + 0.02 * rng.standard_normal(n)
    y = tone(n, fs, f, 1.5 * np.exp(0.3j) * h_true, offset=0.4) + 0.02 * rng.standard_normal(n)
    fit = fit_harmonics(np.vstack([u, y]), fs, f)
    ours = fit.amplitude[1] / fit.amplitude[0]
    freqs, g_uy = signal.csd(u, y, fs=fs, nperseg=nperseg)
    _, g_uu = signal.welch(u, fs=fs, nperseg=nperseg)
    k = int(np.argmin(np.abs(freqs - f)))
    h1 = g_uy[k] / g_uu[k]
    # scipy.signal csd/welch H1 = G_uy/G_uu (independent estimator); both e^{+iωt}
    assert abs(ours) == pytest.approx(abs(h1), rel=2e-3)
    assert np.angle(ours / h1) == pytest.approx(0.0, abs=2e-3)
    assert abs(ours) == pytest.approx(0.7, rel=2e-3)
    assert np.angle(ours) == pytest.approx(-1.1, abs=2e-3)


# ------------------------------------------------------------------ harmonics


def test_distortion_of_known_harmonics():
    fs, n, f = 20_000.0, 30_001, 211.3
    h2, h3 = 0.08 * np.exp(0.5j), 0.03 * np.exp(-2.0j)
    x = tone(n, fs, f, 2.0 * np.exp(0.1j), offset=1.0, harmonics={2: h2, 3: h3})
    rng = np.random.default_rng(4)
    fit = fit_harmonics(x + 1e-3 * rng.standard_normal(n), fs, f, n_harmonics=3)
    # total harmonic distortion relative to the fundamental, sqrt(Σ|h_k|²)/|a_1| (IEEE Std 1241, from memory)
    assert fit.distortion[0] == pytest.approx(np.hypot(0.08, 0.03) / 2.0, rel=1e-3)
    # harmonic phases, e^{+ikωt} referred to the first sample
    np.testing.assert_allclose(fit.harmonics[0], [h2, h3], atol=1e-4)
    assert np.isnan(fit_harmonics(x, fs, f).distortion[0])
    assert fit_harmonics(x, fs, f).harmonics.shape == (1, 0)


def test_harmonics_at_or_above_half_the_sample_rate_are_not_fitted():
    fs, n, f = 1000.0, 5000, 180.0          # 3f = 540 Hz > fs/2: aliased, cannot be separated
    fit = fit_harmonics(tone(n, fs, f, 1.0, harmonics={2: 0.1}), fs, f, n_harmonics=3)
    assert fit.harmonics[0, 0] == pytest.approx(0.1, abs=1e-12)
    assert np.isnan(fit.harmonics[0, 1])
    assert fit.distortion[0] == pytest.approx(0.1, rel=1e-9)


# ------------------------------------------------------------------ frequency estimate


@pytest.mark.parametrize("freq_hz", [123.4567, 1000.0 + 1.0 / 3.0, 5.71])
def test_estimate_frequency_on_a_noisy_sine(freq_hz: float):
    rng = np.random.default_rng(int(freq_hz * 100))
    fs, n, amp, sigma = 5120.0, 51_200, 1.0, 1.0            # 10 s, A²/(2σ²) = 0.5
    x = tone(n, fs, freq_hz, amp * np.exp(1j * 2.0), offset=3.0) + sigma * rng.standard_normal(n)
    got = estimate_frequency(x, fs, f_min_hz=1.0)
    # Rife & Boorstyn 1974: var(f̂) ≥ 12σ² fs² / ((2π)² A² N (N² − 1)) for an unknown-frequency tone
    crlb_hz = np.sqrt(12 * sigma**2 * fs**2 / ((2 * np.pi) ** 2 * amp**2 * n * (n**2 - 1)))
    assert abs(got - freq_hz) < 5 * crlb_hz
    assert abs(got - freq_hz) < 0.01 * fs / n          # a small fraction of a bin


def test_estimate_frequency_in_heavy_noise_falls_back_to_the_likelihood_search():
    # Blocks too noisy for their phases to be followed: the sine-fit power maximum (the ML
    # estimator in white noise, Rife & Boorstyn 1974) still lands within a few CRLB.
    from app.core.harmonic import _block_phase_refine

    rng = np.random.default_rng(8)
    fs, n, f, amp, sigma = 5120.0, 51_200, 321.123, 1.0, 20.0      # A²/(2σ²) = 1/800 per sample
    x = tone(n, fs, f, amp * np.exp(0.4j)) + sigma * rng.standard_normal(n)
    assert _block_phase_refine(x, fs, f) is None
    crlb_hz = np.sqrt(12 * sigma**2 * fs**2 / ((2 * np.pi) ** 2 * amp**2 * n * (n**2 - 1)))
    assert abs(estimate_frequency(x, fs, f_min_hz=100.0) - f) < 5 * crlb_hz


def test_estimate_frequency_respects_the_search_band():
    fs, n = 4000.0, 8000
    x = tone(n, fs, 50.0, 5.0) + tone(n, fs, 731.25, 1.0)
    bin_hz = fs / n
    # common practice: the strongest line wins; the band excludes it; the other tone's leakage
    # moves a single-tone fit by far less than 1e-3 bin
    assert estimate_frequency(x, fs) == pytest.approx(50.0, abs=1e-3 * bin_hz)
    assert estimate_frequency(x, fs, f_min_hz=100.0) == pytest.approx(731.25, abs=1e-3 * bin_hz)


# ------------------------------------------------------------------ bad input


@pytest.mark.parametrize("x, fs, f, n_harm, match", [
    (np.r_[np.zeros(50), np.nan, np.zeros(49)], 100.0, 10.0, 1, "non-finite.*index 50"),
    (np.vstack([np.zeros(100), np.r_[np.zeros(99), np.inf]]), 100.0, 10.0, 1, "channel 1.*non-finite"),
    (np.zeros(10), 100.0, 30.0, 1, "too short.*10 samples"),
    (np.zeros(100), 100.0, 1.0, 1, "too short.*periods"),
    (np.zeros(100), 100.0, 50.0, 1, "not below half the sample rate"),
    (np.zeros(100), 100.0, 70.0, 1, "not below half the sample rate"),
    (np.zeros(100), 100.0, 49.995, 1, "within one resolution bin"),
    (np.zeros(100), 100.0, 0.0, 1, "frequency must be a positive"),
    (np.zeros(100), 0.0, 10.0, 1, "sample rate must be a positive"),
    (np.zeros(100), 100.0, 10.0, 0, "n_harmonics"),
    (np.zeros((2, 2, 100)), 100.0, 10.0, 1, "shape"),
    (np.zeros(100, dtype=complex), 100.0, 10.0, 1, "complex"),
    (np.full(100, 1e300), 100.0, 10.0, 1, "too large"),
])
def test_bad_input_raises_a_clear_value_error(x, fs, f, n_harm, match):
    # common practice: refuse garbage with a message naming the problem
    with pytest.raises(ValueError, match=match):
        fit_harmonics(x, fs, f, n_harm)


def test_estimate_frequency_bad_input():
    with pytest.raises(ValueError, match="one channel"):
        estimate_frequency(np.zeros((3, 100)), 100.0)
    with pytest.raises(ValueError, match="search band"):
        estimate_frequency(np.zeros(100), 100.0, f_min_hz=40.0, f_max_hz=60.0)
    with pytest.raises(ValueError, match="non-finite"):
        estimate_frequency(np.r_[np.zeros(99), np.nan], 100.0)


# ------------------------------------------------------------------ speed





@pytest.mark.parametrize("n", [512_000, 500_321])               # blocks fill the record / leave a tail
@pytest.mark.parametrize("where", [0, 70_000, -1])               # in the coarse head, in the blocks, the last sample
@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_estimate_frequency_refuses_a_non_finite_sample_anywhere(n, where, bad):
    # common practice: garbage is refused with the place named, never turned into a frequency
    fs = 51_200.0
    x = np.sin(2 * np.pi * 430.0 * np.arange(n) / fs)
    x[where] = bad
    with pytest.raises(ValueError, match=f"first at index {where % n}"):
        estimate_frequency(x, fs)
