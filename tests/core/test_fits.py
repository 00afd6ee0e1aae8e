"""Flame-model fits to FTF points: check values of the models, parameters recovered within
their stated uncertainty (two-sided coverage by Monte Carlo), order chosen by AIC, refusals.

References: the n-tau model (Crocco) and Gaussian distributed delays (Komarek & Polifke 2010,
J. Eng. Gas Turbines Power 132:061503) with the check values of the project's domain notes;
weighted least squares and its (J^T J)^-1 covariance (e.g. Press et al., Numerical Recipes,
ch. 15, from memory); AIC (Akaike 1974).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from app.core.fits import FitError, choose_delays, conical_response, fit

TWO_PI = 2 * np.pi


def _noisy(F: np.ndarray, sg: float, sp: float, rng) -> np.ndarray:
    g = np.abs(F) + sg * rng.standard_normal(F.size)
    ph = np.angle(F) + sp * rng.standard_normal(F.size)
    return g * np.exp(1j * ph)


def test_model_check_values():
    f = np.array([100.0, 300.0])
    # n-tau, tau = 2 ms: phase -72 degrees at 100 Hz (e^{+iwt}: a delay gives a falling phase)
    r = fit(np.array([50, 100, 150, 200.0]), np.exp(-1j * TWO_PI * np.array([50, 100, 150, 200.0]) * 2e-3),
            np.full(4, 0.01), np.full(4, 0.01))
    assert math.degrees(np.angle(r.evaluate(100.0))) == pytest.approx(-72.0, abs=1e-3)
    # Gaussian delay tau = 3 ms, sigma = 0.5 ms: |F| = 0.951850 (100 Hz), 0.641381 (300 Hz)
    freqs = np.linspace(50, 600, 12)
    truth = np.exp(-1j * TWO_PI * freqs * 3e-3 - 0.5 * (TWO_PI * freqs * 0.5e-3) ** 2)
    r = fit(freqs, truth, np.full(12, 1e-4), np.full(12, 1e-4), "delays", 1, unit_gain=True)
    assert np.abs(r.evaluate(f)) == pytest.approx([0.951850, 0.641381], abs=2e-6)
    assert r.evaluate(1e-9)[0] == pytest.approx(1.0)          # the imposed low-frequency limit


def test_n_tau_intervals_cover_the_truth_as_often_as_they_say():
    # two-sided: 95 % intervals must cover between 92 % and 98 % of 600 trials (binomial sd 0.9 %)
    rng = np.random.default_rng(20261203)
    freqs = np.linspace(40, 500, 12)
    n_true, tau_true = 1.15, 2.4e-3
    truth = n_true * np.exp(-1j * TWO_PI * freqs * tau_true)
    sg, sp = 0.03, 0.025
    cover = np.zeros(2)
    chi2 = []
    trials = 600
    for _ in range(trials):
        r = fit(freqs, _noisy(truth, sg, sp, rng), np.full(12, 1.96 * sg), np.full(12, 1.96 * sp))
        half = 1.96 * r.stderr()
        cover += np.abs(r.values - [n_true, tau_true]) <= half
        chi2.append(r.reduced_chi2)
    rate = cover / trials
    assert np.all(rate >= 0.92) and np.all(rate <= 0.98), rate
    assert np.mean(chi2) == pytest.approx(1.0, abs=0.08)       # honest weights give chi2/dof near 1


def test_conical_flame_check_values_and_its_parameters_are_recovered_within_their_intervals():
    # Schuller, Durox & Candel 2003 (Combust. Flame 134:21-34), uniform-velocity conical flame:
    # |F| = 0.97253, 0.89374, 0.48015 at w* = 1, 2, 5 (the magnitude is the same in both time
    # conventions); low-frequency limit F -> 1 with phase -w*/3 (series of the same formula, derived)
    assert np.abs(conical_response(np.array([1.0, 2.0, 5.0]))) == pytest.approx([0.97253, 0.89374, 0.48015],
                                                                              abs=1e-5)
    assert np.angle(conical_response(1e-3)) == pytest.approx(-1e-3 / 3, rel=1e-6)
    assert np.angle(conical_response(0.5)) < 0              # e^{+iwt}: the flame lags
    # our own flame: R = 6 mm, S_L = 0.38 m/s, bulk velocity 1.6 m/s, so the cone's half-angle has
    # sin a = S_L/u (a flat-front cone, common practice) and tau_c = R/(S_L cos a) = 16.3 ms
    alpha = math.asin(0.38 / 1.6)
    tau_true = 6e-3 / (0.38 * math.cos(alpha))
    freqs = np.linspace(5, 120, 14)                         # w* from 0.5 to 12
    truth = conical_response(TWO_PI * freqs * tau_true)
    sg, sp = 0.02, 0.03
    rng = np.random.default_rng(20261204)
    trials, cover = 400, np.zeros(2)
    for _ in range(trials):
        r = fit(freqs, _noisy(truth, sg, sp, rng), np.full(14, 1.96 * sg), np.full(14, 1.96 * sp), "conical")
        cover += np.abs(r.values - [1.0, tau_true]) <= 1.96 * r.stderr()
    rate = cover / trials
    # two-sided: 95 % intervals cover 91.5-98.5 % of 400 trials (binomial sd 1.1 %)
    assert np.all(rate >= 0.915) and np.all(rate <= 0.985), rate
    assert r.names == ("n", "tau_c_s") and "tau_c = " in r.describe()[1]


def test_two_delay_terms_are_chosen_over_one_and_recovered():
    rng = np.random.default_rng(7)
    freqs = np.linspace(30, 900, 30)
    w = TWO_PI * freqs
    truth = (0.9 * np.exp(-1j * w * 2.0e-3 - 0.5 * (w * 0.3e-3) ** 2)
             + 0.35 * np.exp(-1j * w * 4.5e-3 - 0.5 * (w * 0.6e-3) ** 2))
    sg, sp = 0.01, 0.01
    best, fits = choose_delays(freqs, _noisy(truth, sg, sp, rng), np.full(30, 1.96 * sg), np.full(30, 1.96 * sp),
                               k_max=3)
    assert best.k_terms == 2, [(r.k_terms, r.aic) for r in fits]
    assert fits[0].reduced_chi2 > 5 and best.reduced_chi2 < 2
    p, s = best.params(), dict(zip(best.names, best.stderr()))
    order = sorted([(p["tau1_s"], 1), (p["tau2_s"], 2)])
    early, late = order[0][1], order[1][1]
    assert abs(p[f"tau{early}_s"] - 2.0e-3) < 4 * s[f"tau{early}_s"] + 2e-5
    assert abs(p[f"tau{late}_s"] - 4.5e-3) < 4 * s[f"tau{late}_s"] + 2e-5


def test_too_few_points_or_no_intervals_are_refused_with_the_reason():
    with pytest.raises(FitError, match="needs at least 3 points"):
        fit([100.0, 200.0], [1 + 0j, 1 + 0j], [0.02, 0.02], [0.02, 0.02])
    with pytest.raises(FitError, match="without a usable value or interval"):
        fit([100.0, 200.0, 300.0], [1 + 0j, 1, 1], [0.02, math.nan, 0.02], [0.02, 0.02, 0.02])
    with pytest.raises(FitError, match="unknown flame model"):
        fit([1.0, 2, 3], [1, 1, 1], [1, 1, 1], [1, 1, 1], model="spline")


def test_a_short_sweep_does_not_get_more_terms_than_it_can_carry_and_a_bad_fit_widens():
    # seven points cannot carry three Gaussian terms (nine parameters): at most two, by AICc
    rng = np.random.default_rng(3)
    freqs = np.linspace(100, 700, 7)
    w = TWO_PI * freqs
    truth = 1.2 * np.exp(-1j * w * 1.6e-3 - 0.5 * (w * 0.3e-3) ** 2)
    best, fits = choose_delays(freqs, _noisy(truth, 0.02, 0.02, rng), np.full(7, 0.04), np.full(7, 0.04), k_max=3)
    assert max(r.k_terms for r in fits) <= 2 and best.k_terms == 1
    # an n-tau model on that flame: chi2/dof >> 1, so its intervals are widened by sqrt(chi2/dof)
    r = fit(freqs, truth, np.full(7, 0.004), np.full(7, 0.004))
    assert r.reduced_chi2 > 10 and r.widened
    assert r.stderr()[0] == pytest.approx(np.sqrt(r.covariance[0, 0] * r.reduced_chi2))
    assert any("widened" in line for line in r.describe())
