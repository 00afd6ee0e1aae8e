"""The phase as people read it (app.core.phase): unwrapped along frequency per amplitude, in degrees.

Time convention x(t) = Re{x̂ e^{+iωt}}: a pure delay τ gives F = e^{-iωτ}, a phase of
-360° f τ that falls with frequency (n–τ model; τ = 2 ms → -72° at 100 Hz, common practice).
"""

from __future__ import annotations

import numpy as np
import pytest

from app.core.phase import phase_as_read_deg, unwrapped_phase_rad


def test_a_delay_reads_as_a_straight_falling_line_in_any_order():
    tau_s = 2e-3
    f = np.arange(100.0, 2001.0, 100.0)
    wrapped = np.angle(np.exp(-2j * np.pi * f * tau_s))           # what the index stores, in (-π, π]
    order = np.random.default_rng(4).permutation(f.size)            # plan order need not be ascending
    shown = phase_as_read_deg(f[order], wrapped[order])
    np.testing.assert_allclose(shown, -360.0 * f[order] * tau_s, atol=1e-9)
    assert shown[list(order).index(0)] == pytest.approx(-72.0)


def test_each_amplitude_is_its_own_curve_and_gaps_are_skipped():
    f = np.array([100.0, 200.0, 300.0, 100.0, 200.0, 300.0])
    amp = np.array([0.03, 0.03, 0.03, 0.08, 0.08, 0.08])
    true = np.array([-3.0, -4.0, -5.0, -2.5, -3.5, -4.5])           # radians, below -π after the first
    ph = np.angle(np.exp(1j * true))
    ph[1] = np.nan                                                   # a point without a result
    out = unwrapped_phase_rad(f, ph, amp)
    assert np.isnan(out[1])
    np.testing.assert_allclose(out[[0, 2]], [-3.0, -5.0], atol=1e-12)   # its neighbours still join up
    np.testing.assert_allclose(out[3:], np.unwrap(ph[3:]), atol=0)      # the window's numpy.unwrap rule
    # a curve is unwrapped on its own: the other amplitude's values do not shift it
    np.testing.assert_array_equal(unwrapped_phase_rad(f[3:], ph[3:], amp[3:]), out[3:])


def test_lengths_must_agree():
    with pytest.raises(ValueError, match="same length"):
        unwrapped_phase_rad([100.0, 200.0], [0.1])
