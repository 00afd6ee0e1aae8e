"""Flame models of the simulator against published check values (e^{+iωt} convention).

Every phase below is for x(t) = Re{x̂ e^{+iωt}}: a delay τ gives phase -ωτ.
"""

from __future__ import annotations

import control
import numpy as np
import pytest

from drivers.simulated import flame


def test_n_tau_phase_at_100_hz():
    # Crocco n–τ model; check value: τ = 2 ms → phase -72° at 100 Hz (e^{+iωt}).
    f = flame.n_tau(100.0, 1.0, 2e-3)
    assert np.degrees(np.angle(f)) == pytest.approx(-72.0, abs=1e-9)
    assert abs(f) == pytest.approx(1.0)


def test_gaussian_distributed_delay_gains():
    # Komarek & Polifke 2010, J. Eng. Gas Turbines Power 132:061503: τ = 3 ms, σ = 0.5 ms
    # → |F| = 0.951850 at 100 Hz and 0.641381 at 300 Hz.
    gains = np.abs(flame.gaussian_delay(np.array([100.0, 300.0]), 1.0, 3e-3, 0.5e-3))
    assert gains == pytest.approx([0.951850, 0.641381], abs=2e-6)
    # e^{+iωt}: the phase is that of the mean delay, -ωτ.
    ph = np.angle(flame.gaussian_delay(100.0, 1.0, 3e-3, 0.5e-3))
    assert ph == pytest.approx(np.angle(np.exp(-1j * 2 * np.pi * 100.0 * 3e-3)))


def test_conical_flame_gain_and_conjugated_phase():
    # Schuller, Durox & Candel 2003, Combust. Flame 134:21-34, uniform-velocity conical flame:
    # |F| = 0.97253, 0.89374, 0.48015 at ω* = 1, 2, 5 (their e^{-iωt} form).
    w = np.array([1.0, 2.0, 5.0])
    f = flame.conical_from_reduced(w)
    assert np.abs(f) == pytest.approx([0.97253, 0.89374, 0.48015], abs=2e-5)
    # Their form conjugated for e^{+iωt}: the phase is minus the phase of their expression,
    # i.e. a lag (negative) at small ω* (Taylor: F ≈ 1 - iω*/3 here).
    theirs = 2.0 / w**2 * (1.0 - np.exp(1j * w) + 1j * w)
    assert np.angle(f) == pytest.approx(-np.angle(theirs), abs=1e-12)
    assert np.angle(f[0]) < 0.0
    # Low-pass and unit gain as ω* → 0 (common practice for premixed flames).
    assert abs(flame.conical_from_reduced(1e-5)) == pytest.approx(1.0, abs=1e-9)


def test_conical_reduced_frequency():
    # ω* = ωR/(S_L cos α) (Schuller et al. 2003).
    w = flame.conical_reduced_frequency(100.0, 0.01, 0.4, np.radians(30.0))
    assert w == pytest.approx(2 * np.pi * 100.0 * 0.01 / (0.4 * np.cos(np.radians(30.0))))


def test_clip_describing_function_check_value():
    # Describing function of a clip: N = 0.608998 at n a/a_s = 2 (Gelb & Vander Velde 1968).
    assert flame.clip_describing_function(0.5) == pytest.approx(0.608998, abs=1e-6)
    assert flame.clip_describing_function(1.5) == 1.0


@pytest.mark.parametrize("amplitude", [1.1, 2.0, 3.7, 10.0])
def test_clip_describing_function_against_python_control(amplitude):
    # Independent reference: python-control's describing function of a unit saturation.
    ref = control.describing_function(control.saturation_nonlinearity(1.0), amplitude)
    assert flame.clip_describing_function(1.0 / amplitude) == pytest.approx(ref.real, abs=1e-6)


def test_flame_model_saturation_scales_linear_response():
    # FDF of a saturating n–τ flame: F = n e^{-iωτ} N(a_s/(n a)) (e^{+iωt}).
    model = flame.FlameModel(kind="n_tau", n=1.2, tau_s=2e-3, saturation=0.3)
    a = 0.5  # n a / a_s = 2
    fdf = model.describing(100.0, a)
    assert abs(fdf) == pytest.approx(1.2 * 0.608998, abs=1e-5)
    assert np.angle(fdf) == pytest.approx(np.radians(-72.0))
    assert model.describing(100.0, 0.01) == pytest.approx(model.linear(100.0))
