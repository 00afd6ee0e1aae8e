"""Multi-sine building blocks: Schroeder phases, the line grid, per-line amplitudes and estimates.

Convention: x(t) = Re{x̂ e^{+iωt}}, t = 0 at the first sample of the window.
"""

from __future__ import annotations

import numpy as np
import pytest

from app.core.multisine import (LineGrid, crest_factor, line_amplitudes, line_grid, period_waveform,
                                schroeder_phases)


def test_schroeder_crest_factor_is_near_the_published_value():
    # Schroeder 1970 (IEEE Trans. Inf. Theory IT-16, 85-89): phases -πk(k-1)/K give a peak
    # factor near 1.7 for K = 50 equal lines (sqrt(2K) = 10 with all phases equal)
    k = 50
    grid = LineGrid(51200.0, 51200, tuple(range(1, k + 1)))
    fine = period_waveform(grid, np.ones(k), schroeder_phases(k))
    assert crest_factor(fine) == pytest.approx(1.7, abs=0.05)
    equal = period_waveform(grid, np.ones(k), np.zeros(k))
    assert crest_factor(equal) == pytest.approx(np.sqrt(2 * k), rel=1e-6)


def test_grid_holds_every_plan_frequency_in_whole_periods():
    grid = line_grid(np.arange(100.0, 2001.0, 50.0), 25600.0)
    assert grid.period_samples == 512 and grid.grid_hz == 50.0
    assert np.allclose(grid.freqs_hz, np.arange(100.0, 2001.0, 50.0))
    odd = line_grid([101.3, 250.0, 777.7], 25600.0, max_period_s=0.5)   # rounded onto a 2 Hz grid
    assert np.max(np.abs(odd.freqs_hz - [101.3, 250.0, 777.7])) <= 0.5 * odd.grid_hz + 1e-9


def test_line_amplitudes_are_exact_on_whole_periods():
    grid = LineGrid(10000.0, 200, (3, 7, 20))
    t = np.arange(4 * 200) / 10000.0
    true = np.array([[1.0 + 0.5j, 0.2j], [0.3, -0.1], [2.0 * np.exp(-1j), 0.05]])   # (lines, channels)
    x = sum(np.real(true[k][:, None] * np.exp(2j * np.pi * f * t)[None, :]) for k, f in enumerate(grid.freqs_hz))
    assert np.allclose(line_amplitudes(x, grid), true, atol=1e-12)
    with pytest.raises(ValueError, match="whole number"):
        line_amplitudes(x[:, :-1], grid)
