"""Noise sources of the simulated burner, generated block by block (deterministic).

* Turbulent/combustion pressure noise: white Gaussian noise through a low-pass filter
  (coloured, most energy below the corner), partly common to all sensors (correlation
  coefficient ρ between sensors) — common practice for rig noise models.
* Broadband flame noise on the light channel (relative to the mean light), low-passed.
* Shot noise of the light detector, standard deviation ∝ √(mean signal) (Poisson statistics).
* The ADC: clipping at ± input range and uniform quantisation to ``bits``.

Filters keep their state across blocks (scipy.signal.lfilter with zi), so consecutive
blocks are one continuous random process. Everything draws from one numpy Generator.

Imports: numpy and scipy.signal only.
"""

from __future__ import annotations

import numpy as np
from scipy import signal


class ColouredNoise:
    """``n_channels`` streams of low-passed Gaussian noise with unit rms and correlation ρ."""

    def __init__(self, n_channels: int, sample_rate_hz: float, corner_hz: float, correlation: float,
                 rng: np.random.Generator, order: int = 2) -> None:
        corner = min(corner_hz, 0.45 * sample_rate_hz)
        self._b, self._a = signal.butter(order, corner, fs=sample_rate_hz)
        impulse = signal.lfilter(self._b, self._a, np.r_[1.0, np.zeros(int(20 * sample_rate_hz / corner) + 64)])
        self._scale = 1.0 / np.sqrt(np.sum(impulse**2))  # unit-rms output for unit-variance input
        self._n = n_channels
        self._rho = float(np.clip(correlation, 0.0, 1.0))
        self._rng = rng
        self._zi = np.zeros((n_channels, max(len(self._a), len(self._b)) - 1))

    def block(self, n_samples: int) -> np.ndarray:
        """Next ``n_samples`` of every stream, shape (n_channels, n_samples)."""
        white = self._rng.standard_normal((self._n + 1, n_samples))
        mixed = np.sqrt(1.0 - self._rho) * white[:-1] + np.sqrt(self._rho) * white[-1]
        out, self._zi = signal.lfilter(self._b, self._a, mixed, axis=-1, zi=self._zi)
        out *= self._scale
        return out


def shot_noise(mean_v: np.ndarray, coefficient_v: float, rng: np.random.Generator) -> np.ndarray:
    """Shot noise of a detector: standard deviation √(coefficient · mean) volts, per sample."""
    return np.sqrt(coefficient_v * np.clip(mean_v, 0.0, None)) * rng.standard_normal(np.shape(mean_v))


def adc(volts: np.ndarray, input_range_v: float, bits: int) -> np.ndarray:
    """Clip at ± input range and quantise to ``bits`` over the full span (in place, returned)."""
    lsb = 2.0 * input_range_v / 2.0**bits
    np.clip(volts, -input_range_v, input_range_v, out=volts)
    np.round(volts / lsb, out=volts)
    volts *= lsb
    return volts
