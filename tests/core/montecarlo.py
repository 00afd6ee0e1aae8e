"""Monte Carlo coverage of the FTF point's 95 % interval on records from tests/core/synth.py.

One clean record comes from the project's generator (synth.make_record without noise); each
trial adds fresh noise of a chosen structure, scaled so that every channel has the same
signal-to-noise ratio at f as the harmonic fit defines it, snr = (|a|²/2)/(G/T) with G the
one-sided density (for white noise of variance σ², G = 2σ²/fs, so σ² = |a|² N / (4 snr)).

The noise is white within ±BAND_HZ of f and absent outside (wider than the Hann segments'
main lobe the noise estimate looks through, so locally white), which keeps the broadband rms
of a 10 dB record below the light-channel sanity check while the density at f is exact.

Noise structures (correlation coefficients at f):
* ``independent``: every channel on its own;
* ``correlated``: the pressures share 80 % of their noise power (correlation 0.8), in phase;
* ``acoustic``: half the pressure noise power is a plane wave running downstream past the
  sensors (each sensor sees it delayed by x/(c(1+M)): coherent, phase-shifted);
* ``shared+`` / ``shared-``: flame noise, half the power of the light and of each pressure,
  reaches the light at once (with sign ±) and the sensors as a wave running upstream from
  the reference plane, delayed by (x_ref − x)/(c(1−M)).

Helpers for tests only: the noise is made here, independently of app.core.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from app.core import gas
from app.core.harmonic import fit_harmonics
from app.core.response import evaluate_point
from app.rig import Rig

from synth import make_record, n_tau

BAND_HZ = 200.0
NOISE_KINDS = ("independent", "correlated", "acoustic", "shared+", "shared-")


@dataclass(frozen=True)
class Coverage:
    gain: float
    phase: float
    trials: int
    median_gain_ci95_rel: float
    median_phase_ci95_rad: float

    def __str__(self) -> str:
        return (f"gain {100 * self.gain:.1f} %, phase {100 * self.phase:.1f} % of {self.trials} "
                f"(median ±{100 * self.median_gain_ci95_rel:.2g} %, ±{math.degrees(self.median_phase_ci95_rad):.2g}°)")


def _delayed(white: np.ndarray, delays_s: np.ndarray, fs: float) -> np.ndarray:
    """white (trials, n) delayed by each of delays_s (circularly, exact for band-limited noise)."""
    n = white.shape[-1]
    spec = np.fft.rfft(white, axis=-1)
    omega = 2 * np.pi * np.fft.rfftfreq(n, 1 / fs)
    return np.fft.irfft(spec[:, None, :] * np.exp(-1j * omega[None, None, :] * delays_s[None, :, None]), n=n, axis=-1)


def noise_batch(rng: np.random.Generator, kind: str, trials: int, n: int, sigma: np.ndarray, n_p: int,
                light_row: int, positions_m: np.ndarray, x_ref: float, c_plus: float, c_minus: float,
                fs: float, freq_hz: float) -> np.ndarray:
    """(trials, n_ch, n) noise of structure ``kind`` with per-channel standard deviations ``sigma``."""
    n_ch = sigma.size
    own = rng.standard_normal((trials, n_ch, n))
    if kind == "independent":
        mix = own
    elif kind == "correlated":
        mix = own.copy()
        common = rng.standard_normal((trials, 1, n))
        mix[:, :n_p] = math.sqrt(0.8) * common + math.sqrt(0.2) * own[:, :n_p]
    elif kind == "acoustic":
        mix = own.copy()
        wave = _delayed(rng.standard_normal((trials, n)), positions_m / c_plus, fs)
        mix[:, :n_p] = math.sqrt(0.5) * (wave + own[:, :n_p])
    elif kind in ("shared+", "shared-"):
        mix = own.copy()
        flame = rng.standard_normal((trials, n))
        wave = _delayed(flame, (x_ref - positions_m) / c_minus, fs)
        mix[:, :n_p] = math.sqrt(0.5) * (wave + own[:, :n_p])
        sign = 1.0 if kind == "shared+" else -1.0
        mix[:, light_row] = math.sqrt(0.5) * (sign * flame + own[:, light_row])
    else:
        raise ValueError(kind)
    spec = np.fft.rfft(mix, axis=-1)
    f = np.fft.rfftfreq(n, 1 / fs)
    spec[..., (np.abs(f - freq_hz) > BAND_HZ) | (f < 5.0)] = 0.0
    return np.fft.irfft(spec, n=n, axis=-1) * sigma[None, :, None]


def _true_mean_velocity_factor(rig: Rig, rng: np.random.Generator) -> float:
    """ū_true/ū_stated for flow-meter readings each off by a draw from its stated uncertainty."""
    g = rig.gas
    if not g.flows:
        return 1.0 + g.mean_velocity_uncertainty * rng.standard_normal()
    flows = tuple(f.model_copy(update={"flow": f.flow * (1.0 + f.relative_uncertainty * rng.standard_normal())})
                  for f in g.flows)
    true = rig.model_copy(update={"gas": g.model_copy(update={"flows": flows})})
    return gas.mean_flow(true).velocity_reference_m_s / gas.mean_flow(rig).velocity_reference_m_s


def with_rig_errors(rec_data: np.ndarray, rig: Rig, rng: np.random.Generator) -> np.ndarray:
    """The clean record as the rig really measures it: each sensor's gain and phase off by draws
    from its stated standard uncertainties, and the true mean velocity off by the flow meters'.

    A sensor reading (1 + ε) e^{iφ} times the pressure is Re{(1 + ε) e^{iφ} p̂ e^{iωt}}, made from
    the analytic signal of the clean sinusoid (exact over whole periods). A true mean velocity
    ū_true = s·ū_stated is the same, for the analysis, as every pressure read s times too large
    with ū and the light right (F_measured = F_true/s), so it enters as a common factor s.
    """
    out = rec_data.copy()
    s = _true_mean_velocity_factor(rig, rng)
    for i, sensor in enumerate(rig.pressure_sensors):
        u_g, u_p = sensor.calibration_uncertainty(0.0)
        factor = s * (1.0 + u_g * rng.standard_normal()) * np.exp(1j * u_p * rng.standard_normal())
        out[i] = np.real(factor * signal.hilbert(rec_data[i]))
    return out


def coverage(rig: Rig, freq_hz: float, snr_db: float, kind: str, trials: int, duration_s: float,
             seed: int, sample_rate_hz: float = 12800.0, batch: int = 100, rig_errors: bool = False) -> Coverage:
    """Fraction of trials whose 95 % gain and phase intervals hold the generator's true FTF.

    With ``rig_errors`` every trial also draws the sensors' calibration errors and the flow
    meters' errors from the rig file's stated standard uncertainties (with_rig_errors)."""
    mean = gas.mean_flow(rig)
    rec = make_record(rig, freq_hz, n_tau(0.85, 2.3e-3), duration_s=duration_s, sample_rate_hz=sample_rate_hz,
                      noise_pa=0.0, light_noise_v=0.0, white=True)
    n = rec.data.shape[1]
    amp = np.abs(fit_harmonics(rec.data, sample_rate_hz, freq_hz).amplitude)
    sigma = np.sqrt(amp**2 * n / (4 * 10 ** (snr_db / 10)))
    n_p = len(rig.pressure_sensors)
    light_row = rec.channels.index(rig.light.channel)
    if rig.drive.reference_channel:
        sigma[rec.channels.index(rig.drive.reference_channel)] = 1e-4
    c = mean.state.speed_of_sound_m_s
    positions = np.array([s.position for s in rig.pressure_sensors])
    rng = np.random.default_rng(seed)
    hits_g = hits_p = 0
    widths_g, widths_p = [], []
    truth = rec.true_ftf
    for start in range(0, trials, batch):
        k = min(batch, trials - start)
        noise = noise_batch(rng, kind, k, n, sigma, n_p, light_row, positions, rig.duct.reference_plane,
                            c * (1 + mean.mach_sensors), c * (1 - mean.mach_sensors), sample_rate_hz, freq_hz)
        for trial in noise:
            clean = with_rig_errors(rec.data, rig, rng) if rig_errors else rec.data
            pt = evaluate_point(clean + trial, rec.channels, sample_rate_hz, freq_hz, rig, mean)
            hits_g += abs(pt.gain - abs(truth)) <= pt.gain_ci95
            hits_p += abs(math.remainder(pt.phase_rad - np.angle(truth), 2 * math.pi)) <= pt.phase_ci95_rad
            widths_g.append(pt.gain_ci95 / abs(truth))
            widths_p.append(pt.phase_ci95_rad)
    return Coverage(gain=hits_g / trials, phase=hits_p / trials, trials=trials,
                    median_gain_ci95_rel=float(np.median(widths_g)), median_phase_ci95_rad=float(np.median(widths_p)))
