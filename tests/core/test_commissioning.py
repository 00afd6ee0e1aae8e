"""Commissioning estimates against outside references: King's law and the linearity line against
scipy.optimize.curve_fit (a general-purpose reference fitter), the dark offset's uncertainty by a
two-sided Monte Carlo on coloured noise, and bad tables refused with the reason.

Sources: King's law E² = A + B·Uⁿ (King 1914, Phil. Trans. R. Soc. A 214:373; free exponent as in
Collis & Williams 1959, J. Fluid Mech. 6:357; from memory); GUM type A evaluation of a mean
(JCGM 100:2008 §4.2); the Student-t factor for 9 degrees of freedom from scipy.stats.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import curve_fit

from app.core.commissioning import (CommissioningError, dark_offset, kings_law, light_linearity,
                                    spatial_uniformity)


def test_kings_law_recovers_a_known_table_as_scipy_does_and_inverts():
    # our own wire: A = 1.9 V², B = 1.1 V²/(m/s)^0.45, n = 0.45; 12 velocities 0.5-12 m/s, 1 mV noise
    rng = np.random.default_rng(11)
    U = np.linspace(0.5, 12.0, 12)
    E = np.sqrt(1.9 + 1.1 * U ** 0.45) + 1e-3 * rng.standard_normal(U.size)
    k = kings_law(E, U)
    ref, _ = curve_fit(lambda u, a, b, n: a + b * u ** n, U, E ** 2, p0=[1.5, 1.0, 0.5])   # scipy reference
    assert [k.a_v2, k.b, k.n] == pytest.approx(ref, rel=1e-4)
    s = np.sqrt(np.diag(k.covariance))
    assert abs(k.a_v2 - 1.9) < 4 * s[0] and abs(k.b - 1.1) < 4 * s[1] and abs(k.n - 0.45) < 4 * s[2]
    assert k.velocity(np.sqrt(k.voltage_sq(5.0))) == pytest.approx(5.0, rel=1e-9)
    assert k.residual_rms_m_s < 0.05
    # dE/dU against a central difference of the fitted law
    h = 1e-5
    de = (math.sqrt(k.voltage_sq(5.0 + h)) - math.sqrt(k.voltage_sq(5.0 - h))) / (2 * h)
    assert k.sensitivity(5.0) == pytest.approx(de, rel=1e-6)


@pytest.mark.parametrize("E, U, why", [
    ([1.0, 1.1, 1.2], [1.0, 2.0, 3.0], "at least 4 distinct positive velocities"),
    ([1.4, 1.3, 1.2, 1.1], [1.0, 2.0, 3.0, 4.0], "must rise with the velocity"),
    ([1.0, 1.1, float("nan"), 1.3], [1.0, 2.0, 3.0, 4.0], "not a number"),
])
def test_a_bad_hot_wire_table_is_refused_with_the_reason(E, U, why):
    with pytest.raises(CommissioningError, match=why):
        kings_law(np.array(E), np.array(U))


def test_linearity_slope_equals_scipy_and_a_bent_chain_is_caught():
    P = np.array([2e3, 3e3, 4e3, 5e3, 6e3])            # thermal power steps, W (our own burner)
    u = np.full(P.size, 2e-4)
    rng = np.random.default_rng(3)
    straight = 0.05 + 1.2e-4 * P + u * rng.standard_normal(P.size)
    lin = light_linearity(P, straight, u, dark_v=0.05)
    ref, cov = curve_fit(lambda p, k: k * p, P, straight - 0.05, sigma=u, absolute_sigma=True)  # scipy reference
    assert lin.slope_v_per_w == pytest.approx(ref[0], rel=1e-9)
    assert lin.u_slope_v_per_w == pytest.approx(math.sqrt(cov[0, 0]), rel=1e-6)
    assert lin.p_value > 0.001 and lin.max_deviation_rel < 0.01
    # a chain that saturates by 4 % at the top step (a known small non-linearity)
    bent = 0.05 + 1.2e-4 * P * (1 - 0.04 * ((P - P[0]) / (P[-1] - P[0])) ** 2)
    worse = light_linearity(P, bent, u, dark_v=0.05)
    assert worse.p_value < 1e-6 and worse.max_deviation_rel > 0.015


def test_linearity_p_value_is_uniform_on_a_straight_chain():
    # two-sided: a 5 % test on a straight chain rejects 3-7 % of 2000 trials (binomial sd 0.5 %)
    rng = np.random.default_rng(20261204)
    P = np.linspace(1e3, 6e3, 6)
    u = np.full(P.size, 5e-4)
    rejected = sum(light_linearity(P, 1e-4 * P + u * rng.standard_normal(P.size), u, 0.0).p_value < 0.05
                   for _ in range(2000))
    assert 0.03 <= rejected / 2000 <= 0.07, rejected


def test_dark_offset_uncertainty_covers_the_true_mean_as_often_as_it_says():
    # AR(1) noise (coloured, a = 0.9) about a true offset of 12 mV; the 95 % interval mean ± t(9)·u
    # must cover the truth in 93-97 % of 1500 trials (two-sided; binomial sd 0.56 %)
    rng = np.random.default_rng(5)
    t = stats.t.ppf(0.975, 9)
    hits, n = 0, 4000
    for _ in range(1500):
        e = rng.standard_normal(n)
        x = np.empty(n)
        x[0] = e[0]
        for i in range(1, n):
            x[i] = 0.9 * x[i - 1] + e[i]
        d = dark_offset(0.012 + 1e-4 * x, n_segments=10)
        hits += abs(d.mean_v - 0.012) <= t * d.u_mean_v
    assert 0.93 <= hits / 1500 <= 0.97, hits / 1500


def test_dark_offset_refuses_a_short_or_broken_record():
    with pytest.raises(CommissioningError, match="at least 20 samples"):
        dark_offset(np.zeros(10))
    with pytest.raises(CommissioningError, match="not numbers"):
        dark_offset(np.r_[np.zeros(100), np.nan])


def test_uniformity_spread_and_worst_position():
    r = np.array([1.00, 1.02, 0.98, 1.01, 0.90])
    u = spatial_uniformity(r)
    assert u.spread_rel == pytest.approx(np.std(r, ddof=1) / r.mean())
    assert u.worst_index == 4 and u.max_deviation_rel == pytest.approx(1 - 0.90 / r.mean())
    with pytest.raises(CommissioningError, match="not seen"):
        spatial_uniformity(np.array([0.0, -0.001]))
