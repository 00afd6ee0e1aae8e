"""Relative calibration of the pressure sensors by the common-plane method.

All sensors sit at one axial plane (a calibration holder) and see the same pressure, forced
with a sine below the duct's first transverse cut-on. Per frequency, from the sensors'
phasors over n_d segments of the record, the cross-spectra G_ref,i = mean(conj(P_ref)·P_i)
give the complex correction factor of sensor i relative to the reference sensor,

    C_i = G_ref,ref / G_ref,i          (app.core.multimic.relative_calibration; common practice)

so that C_i·p_i (p_i = volts over the nominal sensitivity) reads in the reference sensor's
amplitude and phase; C_ref = 1. Its coherence γ² = |G_ref,i|²/(G_ref,ref·G_i,i) and the
random error of a transfer function (Bendat & Piersol, Random Data, ch. 9):

    u(|C|)/|C| ≈ √(1 − γ²) / (|γ| √(2 n_d)),   u(arg C) ≈ the same, in radians.

A relative calibration cannot find the reference sensor's own error: its nominal
sensitivity (the rig file's) sets the scale of every pressure, hence of û and of the FTF gain.

Also here: the duct's first transverse cut-on (f = 1.8412·c/(2πr), first zero of J1', a
handbook value), the consistency check of two calibrations made against different reference
sensors, and the interpolation of a calibration onto measurement frequencies, which refuses
to extrapolate beyond the calibrated band.

Convention x(t) = Re{x̂ e^{+iωt}}. Pure numpy: must not import Qt, plotting, h5py, drivers,
the engine, storage or the front end.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..errors import FlamebodeError
from ..rig import DRY_AIR, Rig
from . import gas
from .multimic import relative_calibration

BESSEL_J1_PRIME_ZERO = 1.8412  # first zero of J1'(x): the (1,1) transverse mode of a circular duct (handbook)
MIN_SEGMENTS = 4
MIN_PERIODS_PER_SEGMENT = 4.0
CONSISTENCY_LIMIT = 3.0        # |deviation| / its standard uncertainty above which two references disagree


class CalibrationError(FlamebodeError, ValueError):
    """A calibration cannot be computed or used as asked; the message says why and where."""


class CalibrationBandError(CalibrationError):
    """A frequency outside the band a calibration covers (it is never extrapolated)."""


# ----------------------------------------------------------------------------- cut-on
def first_cut_on_hz(radius_m: float, speed_of_sound_m_s: float) -> float:
    """First transverse cut-on of a circular duct, f = 1.8412·c/(2πr) (Bessel J1' zero, handbook)."""
    if not (math.isfinite(radius_m) and radius_m > 0):
        raise CalibrationError(f"duct radius must be > 0 m, got {radius_m!r}")
    if not (math.isfinite(speed_of_sound_m_s) and speed_of_sound_m_s > 0):
        raise CalibrationError(f"speed of sound must be > 0 m/s, got {speed_of_sound_m_s!r}")
    return BESSEL_J1_PRIME_ZERO * speed_of_sound_m_s / (2.0 * math.pi * radius_m)


def duct_cut_on_hz(rig: Rig) -> float:
    """The sensor duct's first transverse cut-on at the rig's gas temperature and pressure.

    The duct holds air (no flow during a calibration) or the rig's mixture; the lower speed
    of sound of the two gives the lower, safer cut-on."""
    t, p = rig.gas.temperature, rig.gas.pressure
    c_air = gas.mixture_state(DRY_AIR, t, p).speed_of_sound_m_s
    c_mix = gas.mean_flow(rig).state.speed_of_sound_m_s
    return first_cut_on_hz(rig.duct.radius_m, min(c_air, c_mix))


def split_at_cut_on(freqs_hz: Sequence[float], cut_on_hz: float) -> tuple[list[float], list[float]]:
    """(frequencies below the cut-on, frequencies at or above it: refused)."""
    kept = [float(f) for f in freqs_hz if f < cut_on_hz]
    refused = [float(f) for f in freqs_hz if f >= cut_on_hz]
    return kept, refused


# ----------------------------------------------------------------------------- estimation
def segment_phasors(pressures: np.ndarray, sample_rate_hz: float, freq_hz: float,
                    n_segments: int = 16, n_harmonics: int = 3) -> np.ndarray:
    """Complex amplitudes (peak, e^{+iωt}) at ``freq_hz`` of each channel in each segment.

    ``pressures`` is (channels, samples). The record is cut into ``n_segments`` equal,
    non-overlapping segments (fewer if a segment would hold fewer than 4 periods); each is
    fitted by least squares on [1, cos kωt, sin kωt] for k = 1..``n_harmonics`` (harmonics
    below Nyquist only), so an offset or the speaker's harmonics never leak into the line.
    Returns (segments, channels); the time origin restarts in each segment, which cancels
    in every cross-spectrum."""
    x = np.asarray(pressures, dtype=float)
    if x.ndim != 2 or x.shape[0] < 1:
        raise CalibrationError(f"expected a (sensors, samples) record, got shape {x.shape}")
    if not np.all(np.isfinite(x)):
        raise CalibrationError("the calibration record holds non-finite samples")
    fs, f = float(sample_rate_hz), float(freq_hz)
    if not (fs > 0 and 0 < f < fs / 2):
        raise CalibrationError(f"frequency {f!r} Hz must lie between 0 and half the {fs!r} Hz sample rate")
    n = x.shape[1]
    periods = n * f / fs
    n_seg = int(min(n_segments, math.floor(periods / MIN_PERIODS_PER_SEGMENT)))
    if n_seg < MIN_SEGMENTS:
        raise CalibrationError(f"record of {n} samples holds {periods:.1f} periods of {f:g} Hz: at least "
                               f"{MIN_SEGMENTS * MIN_PERIODS_PER_SEGMENT:g} are needed ({MIN_SEGMENTS} segments "
                               f"of {MIN_PERIODS_PER_SEGMENT:g} periods)")
    seg_len = n // n_seg
    t = np.arange(seg_len) / fs
    orders = [k for k in range(1, max(1, n_harmonics) + 1) if k * f < 0.49 * fs]
    cols = [np.ones(seg_len)]
    for k in orders:
        cols += [np.cos(2 * np.pi * k * f * t), np.sin(2 * np.pi * k * f * t)]
    design = np.stack(cols, axis=1)                                    # (L, 1 + 2K)
    segs = x[:, : n_seg * seg_len].reshape(x.shape[0], n_seg, seg_len)  # (ch, seg, L)
    beta = np.linalg.lstsq(design, segs.reshape(-1, seg_len).T, rcond=None)[0]  # (1 + 2K, ch*seg)
    phasor = beta[1] - 1j * beta[2]                                    # Re{a e^{iωt}} = a_r cos − a_i sin
    return phasor.reshape(x.shape[0], n_seg).T


@dataclass(frozen=True, eq=False)
class FrequencyFactors:
    """Relative factors of every sensor at one frequency (arrays in sensor order)."""

    freq_hz: float
    factor: np.ndarray          # C_i (complex), 1 for the reference
    coherence: np.ndarray       # γ² between the reference and sensor i (1 for the reference)
    u_gain_rel: np.ndarray      # standard uncertainty of |C_i| / |C_i|
    u_phase_rad: np.ndarray     # standard uncertainty of arg C_i, rad
    n_segments: int
    reference_amplitude: float  # rms over segments of the reference sensor's |P| (its units, peak)


def common_plane_factors(phasors: np.ndarray, reference_index: int, freq_hz: float) -> FrequencyFactors:
    """C_i = G_ref,ref / G_ref,i with coherence and Bendat & Piersol (ch. 9) uncertainty.

    ``phasors`` is (segments, sensors) from :func:`segment_phasors`."""
    p = np.asarray(phasors, dtype=complex)
    n_d, n_s = p.shape
    if not 0 <= reference_index < n_s:
        raise CalibrationError(f"reference sensor index {reference_index} is not one of the {n_s} sensors")
    if n_d < 2:
        raise CalibrationError(f"a coherence needs at least 2 segments, got {n_d}")
    g = p.conj().T @ p / n_d                       # G[a, b] = mean(conj(P_a) P_b)
    g_rr = float(np.real(g[reference_index, reference_index]))
    g_ri = g[reference_index]
    g_ii = np.real(np.diag(g))
    if not g_rr > 0:
        raise CalibrationError(f"the reference sensor shows no signal at {freq_hz:g} Hz")
    dead = np.flatnonzero(np.abs(g_ri) == 0)
    if dead.size:
        raise CalibrationError(f"sensor number {int(dead[0]) + 1} shows no signal coherent with the reference at "
                               f"{freq_hz:g} Hz")
    factor = np.asarray(relative_calibration(g_rr, g_ri), dtype=complex)
    coherence = np.clip(np.abs(g_ri) ** 2 / (g_rr * g_ii), 0.0, 1.0)
    with np.errstate(divide="ignore"):
        u = np.sqrt(1.0 - coherence) / (np.sqrt(coherence) * math.sqrt(2.0 * n_d))
    u[reference_index] = 0.0
    coherence[reference_index] = 1.0
    factor[reference_index] = 1.0
    return FrequencyFactors(float(freq_hz), factor, coherence, u.copy(), u.copy(), n_d, math.sqrt(g_rr))


@dataclass(frozen=True, eq=False)
class Calibration:
    """A relative calibration over a band: per frequency and sensor, C with its uncertainty."""

    sensors: tuple[str, ...]
    reference: str
    freq_hz: np.ndarray         # (n_f,) strictly increasing
    factor: np.ndarray          # (n_f, n_s) complex
    u_gain_rel: np.ndarray      # (n_f, n_s)
    u_phase_rad: np.ndarray     # (n_f, n_s)
    coherence: np.ndarray       # (n_f, n_s)
    method: str = "common-plane"
    source: str = ""            # where it came from (a file), for messages

    def __post_init__(self) -> None:
        n_f, n_s = self.freq_hz.size, len(self.sensors)
        where = self.source or "calibration"
        if n_f < 1 or any(np.shape(a) != (n_f, n_s) for a in (self.factor, self.u_gain_rel, self.u_phase_rad,
                                                                  self.coherence)):
            raise CalibrationError(f"{where}: factors must have one row per frequency ({n_f}) and one column "
                                   f"per sensor ({n_s})")
        if np.any(np.diff(self.freq_hz) <= 0):
            raise CalibrationError(f"{where}: frequencies must be strictly increasing")
        if self.reference not in self.sensors:
            raise CalibrationError(f"{where}: reference sensor {self.reference!r} is not among its sensors "
                                   f"({', '.join(self.sensors)})")

    @property
    def band_hz(self) -> tuple[float, float]:
        return float(self.freq_hz[0]), float(self.freq_hz[-1])

    def column(self, sensor: str) -> int:
        try:
            return self.sensors.index(sensor)
        except ValueError:
            raise CalibrationError(f"{self.source or 'calibration'}: no sensor {sensor!r} "
                                   f"(it has {', '.join(self.sensors)})") from None


def assemble(points: Sequence[FrequencyFactors], sensors: Sequence[str], reference: str,
             method: str = "common-plane") -> Calibration:
    """One :class:`Calibration` from per-frequency results (sorted by frequency)."""
    pts = sorted(points, key=lambda q: q.freq_hz)
    if not pts:
        raise CalibrationError("no frequency was calibrated")
    return Calibration(tuple(sensors), reference, np.array([q.freq_hz for q in pts]),
                       np.array([q.factor for q in pts]), np.array([q.u_gain_rel for q in pts]),
                       np.array([q.u_phase_rad for q in pts]), np.array([q.coherence for q in pts]), method)


def calibrate_record(pressures: np.ndarray, sensors: Sequence[str], reference: str, sample_rate_hz: float,
                     freq_hz: float, n_segments: int = 16) -> FrequencyFactors:
    """Factors at one frequency from a holder record of the sensors' pressures (nominal Pa)."""
    names = list(sensors)
    if len(names) < 2 or np.shape(pressures)[0] != len(names):
        raise CalibrationError(f"a relative calibration needs one record row per sensor and at least 2 sensors "
                               f"(got {np.shape(pressures)[0]} rows for {len(names)} sensors)")
    if reference not in names:
        raise CalibrationError(f"reference sensor {reference!r} is not a pressure sensor ({', '.join(names)})")
    phasors = segment_phasors(pressures, sample_rate_hz, freq_hz, n_segments)
    return common_plane_factors(phasors, names.index(reference), freq_hz)


# ----------------------------------------------------------------------------- consistency
@dataclass(frozen=True)
class Consistency:
    """C_i/ref1 × C_ref1/ref2 against C_i/ref2: the largest normalised deviation and where."""

    worst_z: float              # largest |deviation| / standard uncertainty (gain or phase)
    worst_sensor: str
    worst_freq_hz: float
    worst_part: str             # "gain" or "phase"
    limit: float = CONSISTENCY_LIMIT

    @property
    def consistent(self) -> bool:
        return self.worst_z <= self.limit


def consistency(first: Calibration, second: Calibration, limit: float = CONSISTENCY_LIMIT) -> Consistency:
    """Check two calibrations against different references at their common frequencies.

    With C_i/r1 from ``first`` and C_r1/r2, C_i/r2 from ``second``, the product
    C_i/r1·C_r1/r2 must equal C_i/r2. The deviation's variance is the sum of the three
    factors' variances (conservative when both come from the same records)."""
    if first.reference == second.reference:
        raise CalibrationError(f"both calibrations use reference {first.reference!r}: repeat with another one")
    if set(first.sensors) != set(second.sensors):
        raise CalibrationError("the two calibrations are not of the same sensors")
    common = np.intersect1d(first.freq_hz, second.freq_hz)
    if common.size == 0:
        raise CalibrationError("the two calibrations share no frequency")
    ia = np.searchsorted(first.freq_hz, common)
    ib = np.searchsorted(second.freq_hz, common)
    r1 = second.column(first.reference)
    worst = (0.0, first.sensors[0], float(common[0]), "gain")
    for name in first.sensors:
        if name in (first.reference, second.reference):
            continue   # C_r1/r1 = 1 and C_r2/r2 = 1 make these two identities
        a, b = first.column(name), second.column(name)
        ratio = first.factor[ia, a] * second.factor[ib, r1] / second.factor[ib, b]
        for part, dev, u in (
                ("gain", np.log(np.abs(ratio)),
                 np.sqrt(first.u_gain_rel[ia, a] ** 2 + second.u_gain_rel[ib, r1] ** 2
                         + second.u_gain_rel[ib, b] ** 2)),
                ("phase", np.angle(ratio),
                 np.sqrt(first.u_phase_rad[ia, a] ** 2 + second.u_phase_rad[ib, r1] ** 2
                         + second.u_phase_rad[ib, b] ** 2))):
            with np.errstate(divide="ignore", invalid="ignore"):
                z = np.where(u > 0, np.abs(dev) / u, np.where(np.abs(dev) > 0, np.inf, 0.0))
            k = int(np.argmax(z))
            if z[k] > worst[0]:
                worst = (float(z[k]), name, float(common[k]), part)
    return Consistency(*worst, limit=limit)


# ----------------------------------------------------------------------------- use
def factors_at(cal: Calibration, freq_hz: float) -> np.ndarray:
    """Every sensor's C at ``freq_hz``: gain and unwrapped phase interpolated linearly.

    Refuses (CalibrationBandError) a frequency outside the calibrated band: a calibration is
    never extrapolated."""
    lo, hi = cal.band_hz
    f = float(freq_hz)
    if not (lo <= f <= hi):
        raise CalibrationBandError(f"{cal.source or 'calibration'}: {f:g} Hz lies outside the calibrated band "
                                   f"{lo:g}-{hi:g} Hz; calibrate over a band that covers it")
    gain = np.abs(cal.factor)
    phase = np.unwrap(np.angle(cal.factor), axis=0)
    out = np.empty(len(cal.sensors), dtype=complex)
    for j in range(len(cal.sensors)):
        out[j] = np.interp(f, cal.freq_hz, gain[:, j]) * np.exp(1j * np.interp(f, cal.freq_hz, phase[:, j]))
    return out


def outside_band(cal: Calibration, freqs_hz: Sequence[float]) -> list[float]:
    """The frequencies of ``freqs_hz`` a calibration does not cover."""
    lo, hi = cal.band_hz
    return [float(f) for f in freqs_hz if not lo <= f <= hi]
