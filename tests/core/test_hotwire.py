"""The hot-wire cross-check's pieces on synthetic records (app.core.hotwire): King's law inverted
sample by sample (round trip through a law fitted to a table), segment phasors of a steady
sinusoid, the coherence of a coherent and of an incoherent pair, and the cross-check of a wire
that sees exactly what one "sensor" row says.

Sources: King's law E² = A + B·Uⁿ (King 1914, Phil. Trans. R. Soc. A 214:373; free exponent of
Collis & Williams 1959, J. Fluid Mech. 6:357; from memory); coherence of segment averages and its
bias ≈ 1/K for independent signals over K segments (Bendat & Piersol, Random Data, ch. 9, from
memory). Time convention x(t) = Re{x̂ e^{+iωt}}.
"""

from __future__ import annotations

import numpy as np
import pytest

from app.core.commissioning import kings_law
from app.core.hotwire import carry_to_reference, coherence, cross_check, segment_phasors, velocity_from_voltage

FS, F = 10_000.0, 230.0
A, B, N = 1.6, 0.95, 0.42


def test_kings_law_round_trip_through_a_fitted_table():
    U = np.linspace(0.5, 15.0, 10)
    k = kings_law(np.sqrt(A + B * U**N), U)             # exact table: the fit returns the law
    u = 3.0 + 0.4 * np.sin(np.linspace(0, 40, 5000))
    back, below = velocity_from_voltage(np.sqrt(A + B * u**N), k.a_v2, k.b, k.n)
    assert np.max(np.abs(back - u)) < 1e-6
    assert below == 0.0
    # a voltage below the zero-flow one (E² < A) reads 0 and is counted
    back, below = velocity_from_voltage(np.array([np.sqrt(A) - 0.01, np.sqrt(A + B)]), A, B, N)
    assert back[0] == 0.0 and back[1] == pytest.approx(1.0) and below == 0.5


def test_segment_phasors_of_a_steady_sinusoid_are_the_record_phasor():
    t = np.arange(int(4 * FS)) / FS
    a = 0.3 * np.exp(0.7j)
    x = 2.0 + np.real(a * np.exp(2j * np.pi * F * t))
    k = segment_phasors(x, FS, F, 16)
    assert k.shape == (1, 16)
    assert np.max(np.abs(k[0] - a)) < 1e-9
    assert coherence(k[0], 2 * k[0] * np.exp(0.3j)) == pytest.approx(1.0)


def test_coherence_of_independent_noise_is_small():
    rng = np.random.default_rng(4)
    n = int(8 * FS)
    k = segment_phasors(rng.standard_normal((2, n)), FS, F, 32)
    assert coherence(k[0], k[1]) < 0.25            # expected ≈ 1/32, far below the 0.8 limit


def _record(disturbance_rms: float, rng: np.random.Generator):
    """A wire and one 'pressure' channel seeing the same sinusoid; row maps the volts to m/s. The
    wire alone also sees a disturbance at the forcing line whose phasor is random segment by segment
    (incoherent with the forcing; a stand-in for turbulence carried past the wire)."""
    t = np.arange(int(4 * FS)) / FS
    u_hat = 0.5 * np.exp(-0.4j)
    k = (rng.standard_normal(16) + 1j * rng.standard_normal(16)) * disturbance_rms
    wander = np.repeat(k, t.size // 16)
    u = 3.0 + np.real((u_hat + wander) * np.exp(2j * np.pi * F * t))
    e = np.sqrt(A + B * u**N)
    row = np.array([0.25 * np.exp(0.2j)])                   # m/s per volt phasor of the 'pressure' channel
    p_v = np.real((u_hat / row[0]) * np.exp(2j * np.pi * F * t)) + 1e-4 * rng.standard_normal(t.size)
    return e, p_v[None, :], row, u_hat


def test_cross_check_agrees_and_coherence_falls_with_an_incoherent_disturbance():
    rng = np.random.default_rng(9)
    e, p_v, row, u_hat = _record(0.0, rng)
    c = cross_check(e, u_hat, 1e-8, p_v, row, FS, F, A, B, N, gain_uncertainty=0.01)
    f = c.figures()
    assert abs(f["hotwire_ratio"] - 1.0) < 1e-3 and abs(f["hotwire_phase_diff_rad"]) < 1e-3
    assert f["hotwire_coherence"] > 0.999 and f["hotwire_diff_z"] < 1.0
    assert f["hotwire_mean_velocity_m_s"] == pytest.approx(3.0, abs=0.01)
    assert c.warnings(F) == ()
    noisy = cross_check(*_record(0.4, rng)[:1], u_hat, 1e-8, p_v, row, FS, F, A, B, N)
    assert noisy.coherence < c.coherence and noisy.coherence < 0.8
    assert any("coherent only" in w for w in noisy.warnings(F))


def test_a_wrong_wire_calibration_shows_as_a_difference_beyond_its_uncertainty():
    rng = np.random.default_rng(2)
    e, p_v, row, u_hat = _record(0.0, rng)
    c = cross_check(e, u_hat, 1e-8, p_v, row, FS, F, A, B * 1.1, N, gain_uncertainty=0.01)   # B 10 % off
    assert c.difference_z > 3.0 and abs(abs(c.ratio) - 1.0) > 0.05
    assert any("differs" in w for w in c.warnings(F))


def test_every_figure_has_a_label():
    from app.core.hotwire import FIGURE_LABELS

    rng = np.random.default_rng(1)
    e, p_v, row, u_hat = _record(0.0, rng)
    check = cross_check(e, u_hat, 1e-8, p_v, row, FS, F, A, B, N)
    carried = carry_to_reference(check, 1.0 + 0.0j, 0.0, (), 3.0)
    # the figures of the check at the wire and of the velocity carried to the reference plane
    # together are exactly the labelled set: none unlabelled, no label without its figure
    assert set(check.figures()) | set(carried.figures()) == set(FIGURE_LABELS)
    assert not set(check.figures()) & set(carried.figures())
