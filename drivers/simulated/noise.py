"""Noise sources of the simulated burner, generated block by block (deterministic).

* Turbulent/combustion pressure noise: white Gaussian noise through a low-pass filter
  (coloured, most energy below the corner), partly common to all sensors (correlation
  coefficient ρ between sensors) — common practice for rig noise models.
* Broadband flame noise on the light channel (relative to the mean light), low-passed.
* Shot noise of the light detector, standard deviation ∝ √(mean signal) (Poisson statistics).
* The ADC: clipping at ± input range and uniform quantisation to ``bits``.
* Noise that travels as sound (:class:`SoundNoise`): a noise stream band-passed about the
  drive frequency f and heard at each channel as |c| x(t − τ) with τ = −arg(c)/ω, c that
  channel's linear response at f (from the network). Near f this is Re{c X e^{iωt}}: the
  noise is coherent across the sensors with the network's inter-sensor phase, and the light
  carries the flame's share. Only the band about f is modelled (a pure delay has the right
  phase at f, and the network's response is smooth within the band); the broadband levels of
  the channels are those of their own noise.

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


class SoundNoise:
    """One noise stream heard by several channels through complex responses at the drive frequency.

    ``block(n, freq_hz, responses)`` returns (n_channels, n): the stream (unit-rms coloured
    noise through ``source``, band-passed to f·[3/4, 4/3], geometric centre f, zero phase
    there) delayed and scaled per channel. The stream's history is kept so delays up to one
    period reach back into the previous block (linear interpolation between samples); the
    band-pass is re-designed, with its state reset, when f changes.
    """

    def __init__(self, source: ColouredNoise, sample_rate_hz: float, history_s: float = 0.25) -> None:
        self._source = source
        self._fs = float(sample_rate_hz)
        self._history = np.zeros(int(np.ceil(history_s * sample_rate_hz)) + 2)
        self._freq_hz = 0.0
        self._b = self._a = self._zi = None

    def _design(self, freq_hz: float) -> None:
        lo, hi = 0.75 * freq_hz, min(freq_hz / 0.75, 0.45 * self._fs)
        self._b, self._a = signal.butter(1, [lo, hi], btype="bandpass", fs=self._fs)
        self._zi = np.zeros(max(len(self._a), len(self._b)) - 1)
        self._freq_hz = freq_hz

    def block(self, n_samples: int, freq_hz: float, responses: np.ndarray) -> np.ndarray:
        raw = self._source.block(n_samples)[0]
        period = self._fs / freq_hz if freq_hz > 0 else np.inf
        if not np.isfinite(period) or period + 2 > self._history.size:
            self._history = np.concatenate([self._history, np.zeros(n_samples)])[-self._history.size:]
            return np.zeros((len(responses), n_samples))
        if freq_hz != self._freq_hz:
            self._design(freq_hz)
        band, self._zi = signal.lfilter(self._b, self._a, raw, zi=self._zi)
        line = np.concatenate([self._history, band])
        start = self._history.size
        c = np.asarray(responses, dtype=complex)
        delay = np.mod(-np.angle(c), 2 * np.pi) / (2 * np.pi) * period          # samples, in [0, period)
        pos = start + np.arange(n_samples)[None, :] - delay[:, None]
        i0 = np.minimum(np.floor(pos).astype(int), line.size - 2)
        frac = pos - i0
        out = (1.0 - frac) * line[i0] + frac * line[i0 + 1]
        self._history = line[-self._history.size:]
        return np.abs(c)[:, None] * out


class SoundSources:
    """The simulated rig's two sound sources of noise: inflow sound from the plenum and the
    flame's radiated noise, each a :class:`SoundNoise` stream.

    ``block(n, freq_hz, transfers, inflow_power, flame_power)``: ``transfers`` are the
    network's (inflow, flame) response rows at f (sensor pressures ..., light q'/Q̄; the
    model's ``noise_transfers``), or None without a drive. The inflow source is scaled so its
    mean-square pressure over the sensors, near f, is ``inflow_power`` (Pa²: a share of the
    pressure noise); the flame source is q_n/Q̄ of mean square ``flame_power`` (a share of the
    light's flame noise). Returns (channels, n): pressures in Pa, then the light's q'/Q̄.
    """

    def __init__(self, n_channels: int, sample_rate_hz: float, inflow_corner_hz: float, flame_corner_hz: float,
                 rng: np.random.Generator) -> None:
        self._n = int(n_channels)
        self._inflow = SoundNoise(ColouredNoise(1, sample_rate_hz, inflow_corner_hz, 0.0, rng), sample_rate_hz)
        self._flame = SoundNoise(ColouredNoise(1, sample_rate_hz, flame_corner_hz, 0.0, rng), sample_rate_hz)

    def block(self, n_samples: int, freq_hz: float, transfers: tuple[np.ndarray, np.ndarray] | None,
              inflow_power: float, flame_power: float) -> np.ndarray:
        if transfers is None:
            for stream in (self._inflow, self._flame):
                stream.block(n_samples, 0.0, np.zeros(self._n))      # the streams run on
            return np.zeros((self._n, n_samples))
        inflow, flame = transfers
        n_p = inflow.size - 1
        rms = float(np.sqrt(np.mean(np.abs(inflow[:n_p]) ** 2)))
        k_in = np.sqrt(inflow_power) / rms if rms > 0 else 0.0
        out = self._inflow.block(n_samples, freq_hz, k_in * inflow)
        out += self._flame.block(n_samples, freq_hz, np.sqrt(flame_power) * flame)
        return out
