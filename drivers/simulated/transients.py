"""Acoustic transients of the simulated burner (scenario ``[transients] enabled = true``).

The burner's model answers a drive quasi-steadily: each sample is Re{H(f) z(t)} with z the
analytic drive and H the network's steady transfer at the drive's present frequency. A real
rig rings: after the drive changes (a ramp, a new frequency, a new multi-sine) its duct modes
decay at their own rates (``stability``: σ = -Im ω), and a tuning window taken too early sees
the change unfinished. This module adds what the quasi-steady answer leaves out, for the
linear part of the response:

    c(t) = (h * x)(t) - Re{H_h(f) z(t)}

with x = Re z the drive the speaker receives, h the impulse response of the linear transfer
from drive volts to each sensor's pressure and to the heat-release ratio (the model's
``response`` at a small drive, flame lit, at the drift state of t = 0; tapered to zero below
``LOW_TAPER_HZ`` and above ``[transients] max_frequency``, so that h is real and short), and
H_h(f) = Σ_n h[n] e^{-iωn/fs} the steady transfer of that same h. In the steady state the two
terms are the same sinusoid and c vanishes to rounding, whatever the drift, the flame's
saturation or its going out do to the quasi-steady answer; after a change c is the free
decay of the modes, as a convolution gives it (Oppenheim & Schafer, Discrete-Time Signal
Processing, ch. 2 and 8: the response of an LTI system is the input convolved with h; a
sinusoid switched on at t = 0 leaves the steady answer plus the free modes).

The convolution runs block by block, uniformly partitioned (overlap-save with one partition
per block; each partition's spectrum is made once): a few hundred kilo-multiplications per
block. h is cut at ``[transients] length``; the rig's slowest mode must have decayed well
within it (the constructor says by how much it has not, from h's last tenth).

Imports: numpy and this package's model (``BurnerModel``). Never the core's estimators,
never the engine.
"""

from __future__ import annotations

import math

import numpy as np

LOW_TAPER_HZ = 20.0          # h's transfer rises from zero at DC to full at this frequency
SMALL_DRIVE_V = 1e-3         # the linear response: a drive far below any compression or clip


def _taper(freqs_hz: np.ndarray, max_hz: float) -> np.ndarray:
    """Raised-cosine edges: 0 at DC rising to 1 at LOW_TAPER_HZ; 1 up to 0.8 max_hz, 0 at max_hz."""
    w = np.ones_like(freqs_hz)
    lo = freqs_hz < LOW_TAPER_HZ
    w[lo] = 0.5 - 0.5 * np.cos(np.pi * freqs_hz[lo] / LOW_TAPER_HZ)
    top0 = 0.8 * max_hz
    hi = freqs_hz > top0
    w[hi] = 0.5 + 0.5 * np.cos(np.pi * np.minimum((freqs_hz[hi] - top0) / (max_hz - top0), 1.0))
    return w


class Transients:
    """The transient correction of one simulated burner (pressures and heat-release ratio)."""

    def __init__(self, model, state, sample_rate_hz: float, block_n: int, length_s: float, max_frequency_hz: float):
        fs = float(sample_rate_hz)
        self._fs, self._p = fs, int(block_n)
        n_h = int(math.ceil(length_s * fs / self._p)) * self._p          # whole partitions
        freqs = np.fft.rfftfreq(n_h, 1.0 / fs)
        top = min(float(max_frequency_hz), 0.5 * fs)
        taper = _taper(freqs, top)
        n_s = len(model.sensor_positions_m)
        spec = np.zeros((n_s + 1, freqs.size), dtype=complex)
        for k in np.flatnonzero(taper > 0.0):
            r = model.response(float(freqs[k]), SMALL_DRIVE_V, state, True)
            spec[:n_s, k] = r.pressure_per_v
            spec[n_s, k] = r.flame_linear * r.velocity_per_v / r.velocity_reference_m_s
        spec *= taper[None, :]
        # Im H at DC and at Nyquist must vanish for a real h (both are tapered to zero already)
        self.h = np.fft.irfft(spec, n=n_h, axis=-1)                      # (channels, n_h), real
        tail = np.max(np.abs(self.h[:, int(0.9 * n_h):]), axis=1)
        self.tail_fraction = float(np.max(tail / np.maximum(np.max(np.abs(self.h), axis=1), 1e-300)))
        k_parts = n_h // self._p
        parts = self.h.reshape(self.h.shape[0], k_parts, self._p)
        self._parts = np.fft.rfft(parts, n=2 * self._p, axis=-1)          # (channels, K, P + 1)
        self._fdl = np.zeros((k_parts, self._p + 1), dtype=complex)       # input spectra, newest first
        self._last = np.zeros(self._p)
        self._steady: dict[float, np.ndarray] = {}

    def steady(self, freq_hz: float) -> np.ndarray:
        """H_h(f) of every channel: the steady transfer of h itself (exact DTFT, cached)."""
        hit = self._steady.get(freq_hz)
        if hit is None:
            n = np.arange(self.h.shape[1])
            hit = self.h @ np.exp(-2j * np.pi * freq_hz / self._fs * n)
            if len(self._steady) > 4096:
                self._steady.clear()
            self._steady[freq_hz] = hit
        return hit

    def correction(self, parts: list[tuple[np.ndarray, np.ndarray]]) -> np.ndarray:
        """c(t) for one block: ``parts`` are (per-sample frequency in Hz, analytic drive) pairs whose
        sum is the drive the speaker receives (one pair for a sine, one per line for a multi-sine).
        Returns (channels, block) real: the pressures' rows, then the heat-release ratio's."""
        x = np.zeros(self._p)
        quasi = np.zeros((self.h.shape[0], self._p))
        for freq_hz, z in parts:
            x += z.real
            for f in np.unique(freq_hz):
                if f <= 0.0:
                    continue
                idx = np.flatnonzero(freq_hz == f)
                quasi[:, idx] += np.real(self.steady(float(f))[:, None] * z[None, idx])
        spectrum = np.fft.rfft(np.concatenate([self._last, x]))
        self._last = x
        self._fdl = np.roll(self._fdl, 1, axis=0)
        self._fdl[0] = spectrum
        y = np.fft.irfft(np.einsum("ckf,kf->cf", self._parts, self._fdl), n=2 * self._p, axis=-1)[:, self._p:]
        return y - quasi
