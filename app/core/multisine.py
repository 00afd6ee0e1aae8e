"""Multi-sine forcing: Schroeder phases, a line grid with whole periods, and per-line estimates.

A multi-sine is x(t) = Σ_k a_k cos(2π f_k t + φ_k) with every f_k a whole multiple of the
grid frequency f0 = fs / N (N samples per period), so a window of whole periods holds every
line exactly and the lines are orthogonal there. Schroeder phases (Schroeder 1970, IEEE
Trans. Inf. Theory IT-16, "Synthesis of low-peak-factor signals and binary sequences with low
autocorrelation") φ_k = -π k (k - 1) / K keep the peak low: crest factor peak / rms near 1.7
for K = 50 equal lines, against sqrt(2 K) for equal phases.

Per-line estimates reuse the single-frequency chain of :mod:`app.core.response`: for line k
every OTHER line is removed from the window (its complex amplitude per channel is the exact
DFT coefficient on whole periods) and the remainder goes through the same harmonic fit and
multi-microphone velocity (or the whole FTF evaluation) as a sine record. The harmonic fit
then estimates the noise near f_k from what is really noise, not from the neighbouring lines.

Caution: a non-linear flame couples the lines (intermodulation, a shared saturation), so an
FTF from a multi-sine is the LINEAR FTF only; amplitude-dependent (FDF) points need sines.

Pure numpy: must not import Qt, pyqtgraph, matplotlib, h5py, drivers, the engine or storage.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..errors import FlamebodeError
from ..rig import Rig
from .response import FtfPoint, VelocityEstimate, evaluate_point, measure_velocity


def schroeder_phases(n_lines: int) -> np.ndarray:
    """φ_k = -π k (k - 1) / K, k = 1..K (Schroeder 1970), radians."""
    k = np.arange(1, int(n_lines) + 1, dtype=float)
    return -np.pi * k * (k - 1.0) / n_lines


def crest_factor(x: np.ndarray) -> float:
    """Peak over rms of a sampled waveform."""
    x = np.asarray(x, dtype=float)
    return float(np.max(np.abs(x)) / np.sqrt(np.mean(x * x)))


@dataclass(frozen=True)
class LineGrid:
    """Lines on a grid of ``period_samples`` samples: line k has ``harmonics[k]`` cycles per period."""

    sample_rate_hz: float
    period_samples: int
    harmonics: tuple[int, ...]

    @property
    def grid_hz(self) -> float:
        return self.sample_rate_hz / self.period_samples

    @property
    def freqs_hz(self) -> np.ndarray:
        return np.asarray(self.harmonics, dtype=float) * self.grid_hz

    @property
    def period_s(self) -> float:
        return self.period_samples / self.sample_rate_hz

    def periods_for(self, min_duration_s: float) -> int:
        return max(1, math.ceil(min_duration_s / self.period_s - 1e-9))


def line_grid(freqs_hz: Sequence[float], sample_rate_hz: float, max_period_s: float = 1.0) -> LineGrid:
    """A grid holding every frequency of ``freqs_hz`` (to within half a grid step).

    The period is the shortest whole number of samples on which every frequency is a whole
    number of cycles to within 1e-6 of a cycle (e.g. 50 Hz steps at 25.6 kHz: 512 samples);
    when none is shorter than ``max_period_s`` the lines are rounded onto the grid of that
    period (an error of at most half of 1 / max_period_s in frequency)."""
    f = np.unique(np.asarray(freqs_hz, dtype=float))
    fs = float(sample_rate_hz)
    if f.size == 0 or f[0] <= 0 or f[-1] >= fs / 2:
        raise ValueError(f"multi-sine lines must lie between 0 and half the sample rate, got {f}")
    n_max = max(2, int(round(max_period_s * fs)))
    f_min_step = float(np.min(np.diff(f))) if f.size > 1 else float(f[0])
    start = max(2, int(math.floor(fs / max(f_min_step, f[0]))))
    for n in range(start, n_max + 1):
        cycles = f * n / fs
        if np.all(np.abs(cycles - np.round(cycles)) < 1e-6):
            return LineGrid(fs, n, tuple(int(c) for c in np.round(cycles)))
    harmonics = sorted(set(int(max(1, round(x))) for x in f * n_max / fs))
    return LineGrid(fs, n_max, tuple(harmonics))


def period_waveform(grid: LineGrid, amplitudes_v: Sequence[float], phases_rad: Sequence[float]) -> np.ndarray:
    """One period of Σ a_k cos(2π m_k n / N + φ_k), n = 0..N-1 (volts)."""
    n = np.arange(grid.period_samples)
    m = np.asarray(grid.harmonics, dtype=float)
    a = np.asarray(amplitudes_v, dtype=float)
    ph = np.asarray(phases_rad, dtype=float)
    return (a[:, None] * np.cos(2.0 * np.pi * np.outer(m, n) / grid.period_samples + ph[:, None])).sum(axis=0)


def line_amplitudes(data: np.ndarray, grid: LineGrid) -> np.ndarray:
    """Complex amplitudes (peak, e^{+iωt}, t = 0 at the first sample) of every line on every channel.

    ``data`` (n_ch, n) must hold a whole number of grid periods. Returns (n_lines, n_ch)."""
    arr = np.asarray(data, dtype=float)
    n = arr.shape[1]
    if n % grid.period_samples:
        raise ValueError(f"a multi-sine window of {n} samples is not a whole number of "
                         f"{grid.period_samples}-sample periods")
    spectrum = np.fft.rfft(arr, axis=1) * (2.0 / n)
    bins = np.asarray(grid.harmonics) * (n // grid.period_samples)
    return spectrum[:, bins].T


def _others_removed(arr: np.ndarray, grid: LineGrid, amps: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(the model of all lines, the per-line cos/sin basis factors) for the window."""
    n = arr.shape[1]
    t = np.arange(n)
    model = np.zeros_like(arr)
    waves = []
    for m, a in zip(grid.harmonics, amps):
        e = np.exp(2j * np.pi * m * t / grid.period_samples)
        wave = np.real(a[:, None] * e[None, :])
        waves.append(wave)
        model += wave
    return model, np.array(waves)


def _per_line(data: np.ndarray, grid: LineGrid):
    arr = np.asarray(data, dtype=float)
    amps = line_amplitudes(arr, grid)
    model, waves = _others_removed(arr, grid, amps)
    base = arr - model
    for k, f in enumerate(grid.freqs_hz):
        yield k, float(f), base + waves[k]


def measure_lines(data: np.ndarray, channels: Sequence[str], sample_rate_hz: float, grid: LineGrid,
                  rig: Rig) -> list[VelocityEstimate | None]:
    """The velocity estimate at the reference plane at every line (None where it failed)."""
    out: list[VelocityEstimate | None] = []
    for _, f, one in _per_line(data, grid):
        try:
            out.append(measure_velocity(one, channels, sample_rate_hz, f, rig))
        except (ArithmeticError, ValueError, np.linalg.LinAlgError, FlamebodeError):
            out.append(None)
    return out


def evaluate_lines(data: np.ndarray, channels: Sequence[str], sample_rate_hz: float, grid: LineGrid,
                   rig: Rig) -> list[FtfPoint | None]:
    """The FTF point (LINEAR flame only, see the module notes) at every line (None where it failed)."""
    out: list[FtfPoint | None] = []
    for _, f, one in _per_line(data, grid):
        try:
            out.append(evaluate_point(one, channels, sample_rate_hz, f, rig))
        except (ArithmeticError, ValueError, np.linalg.LinAlgError, FlamebodeError):
            out.append(None)
    return out
