"""Hot-wire cross-check of the multi-microphone velocity at one FTF point.

A hot-wire in the sensor duct measures the axial velocity at its position directly. Its bridge
voltage is converted to velocity sample by sample through King's law, U = ((E² − A)/B)^(1/n)
(King 1914; free exponent n of Collis & Williams 1959), and the velocity record gets the same
harmonic fit as every other channel (``app.core.harmonic``). That phasor is compared with the
plane-wave fit's velocity AT THE WIRE'S POSITION (``WaveFit.velocity_at``), both in the sensor
duct's cross-section, convention x(t) = Re{x̂ e^{+iωt}}:

* ``ratio`` û_hw / û_mmm(x_hw) (its modulus and phase, each with a 95 % half-width) and the
  difference d = û_hw − û_mmm with its standard error: E|δd|² = E|δû_hw|² (the wire's noise) +
  E|δû_mmm|² (the sensors' noise, independent of the wire's) + Σ|δ_k|² over the stated
  systematic inputs (the wire's calibration gain and phase, each sensor's calibration, GUM type
  B); z = |d| / √E|δd|², so P(z > 3) = e^{-9} for a complex Gaussian d. The ratio's gain and
  phase get each direction's real and imaginary part (JCGM 100:2008 §5.1.2).
* the coherence γ² = |Σ a_k b̄_k|² / (Σ|a_k|² Σ|b_k|²) of the two phasors over the record's
  segments (Bendat & Piersol, Random Data, ch. 9, with the segment phasors as the Fourier
  coefficients at the forcing line). Sound seen by both gives γ² near 1; a convective
  disturbance (vorticity, turbulence, entropy spots carried with the flow) is seen by the wire
  but not by the wall pressures, which the plane-wave fit keeps to acoustic waves (common
  practice), so γ² falls, and a disturbance locked to the forcing shows as a difference instead.

Carried to the reference plane (``carry_to_reference``): where the wire sits in the sensor duct
(between its upstream end and the reference plane) and not near a velocity node, the plane-wave
field gives the transfer T = û_ref/û(x_hw) (the reference plane's û as the point reports it,
area change included), and û_hw·T/ū_ref is the hot-wire's own u'/ū at the reference plane, to
set beside the multi-microphone one the drive was tuned to. Its relative error is
δû_hw/û_hw + δT/T, the two independent: the wire's noise and stated calibration, and T's from
the sensors' noise (δT/T = (g_ref/û_ref − g_x/û_x)·δa through the wave amplitudes' covariance),
their stated calibrations and the wire's stated position. Near a velocity node
(|û(x_hw)| < NODE_FRACTION·|û(x_ref)| in the sensor duct) T would multiply the wire's errors
several times, and outside the sensor duct the fitted field does not describe the wire's
place: there the wire is compared at its own position only, and a note says why.

The samples where the voltage falls below the zero-flow voltage (E² < A, a flow reversal at the
wire, which a single wire cannot tell from forward flow) are counted (``below_zero_flow``) and
read as zero velocity.

Imports: numpy, ``app.core.harmonic`` (the same fit as the other channels) and ``app.errors``.
Never Qt, drivers, the engine or storage.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import RecordError
from .harmonic import fit_harmonics

N_SEGMENTS = 16            # segments for the coherence (a γ² estimate from K segments is biased by ~1/K)
NODE_FRACTION = 0.25       # below it the wire is too near a velocity node to carry its reading (judgement)
COHERENCE_MIN = 0.8        # below it the wire sees much that the sound field does not (judgement)
DIFFERENCE_Z_MAX = 3.0     # beyond it the two velocities disagree beyond their uncertainty

# The cross-check's quality figures: key → (label, unit) for tables, review and export.
FIGURE_LABELS = {
    "hotwire_ratio": ("hot-wire / multi-microphone velocity", ""),
    "hotwire_ratio_ci95": ("its 95 % half-width", ""),
    "hotwire_phase_diff_rad": ("hot-wire phase minus multi-microphone phase", "rad"),
    "hotwire_phase_ci95_rad": ("its 95 % half-width", "rad"),
    "hotwire_diff_z": ("hot-wire difference over its standard error", ""),
    "hotwire_coherence": ("hot-wire coherence with the multi-microphone velocity (γ²)", ""),
    "hotwire_mean_velocity_m_s": ("hot-wire mean velocity", "m/s"),
    "hotwire_velocity_ratio": ("hot-wire |u'|/ū carried to the reference plane", ""),
    "hotwire_velocity_ratio_ci95": ("its 95 % half-width", ""),
    "hotwire_below_zero_flow": ("hot-wire samples below its zero-flow voltage", ""),
}


@dataclass(frozen=True)
class HotWireCheck:
    """The hot-wire's velocity at its position against the plane-wave fit's there (m/s, peak)."""

    velocity_hotwire: complex
    velocity_mmm: complex
    var_hotwire: float          # E|δû_hw|² from the wire's noise, (m/s)²
    var_mmm: float              # E|δû_mmm|² at the wire's position from the sensors' noise, (m/s)²
    coherence: float            # γ² over the record's segments
    n_segments: int
    mean_velocity_m_s: float    # the wire's mean velocity
    below_zero_flow: float      # fraction of samples below the zero-flow voltage
    # systematic shifts of û_hw and û_mmm for one standard uncertainty of each stated input (m/s,
    # complex): the wire's calibration gain and phase, the sensors' calibrations
    directions_hotwire: tuple[complex, ...] = ()
    directions_mmm: tuple[complex, ...] = ()

    @property
    def _var_difference(self) -> float:
        return (self.var_hotwire + self.var_mmm + sum(abs(d) ** 2 for d in self.directions_hotwire)
                + sum(abs(d) ** 2 for d in self.directions_mmm))

    def _ratio_variances(self) -> tuple[float, float]:
        """(relative gain, phase) variances of the ratio: the circular noise halves into each, every
        systematic direction δ_k goes in as Re(δ_k/û)² and Im(δ_k/û)² (JCGM 100:2008 §5.1.2)."""
        u_h, u_m = self.velocity_hotwire, self.velocity_mmm
        if u_h == 0 or u_m == 0:
            return float("inf"), float("inf")
        noise = 0.5 * (self.var_hotwire / abs(u_h) ** 2 + self.var_mmm / abs(u_m) ** 2)
        rel = [d / u_h for d in self.directions_hotwire] + [d / u_m for d in self.directions_mmm]
        return noise + sum(r.real**2 for r in rel), noise + sum(r.imag**2 for r in rel)

    @property
    def ratio(self) -> complex:
        return self.velocity_hotwire / self.velocity_mmm if self.velocity_mmm != 0 else complex(np.nan, np.nan)

    @property
    def difference_z(self) -> float:
        """|û_hw − û_mmm| over the standard error of the difference (noise and stated inputs)."""
        var = self._var_difference
        d = abs(self.velocity_hotwire - self.velocity_mmm)
        return float(d / np.sqrt(var)) if var > 0 else (0.0 if d == 0 else float("inf"))

    @property
    def ratio_ci95(self) -> float:
        """95 % half-width of |ratio| (first order, normal coverage factor)."""
        return float(1.959963984540054 * abs(self.ratio) * np.sqrt(self._ratio_variances()[0]))

    @property
    def phase_ci95_rad(self) -> float:
        return float(1.959963984540054 * np.sqrt(self._ratio_variances()[1]))

    def figures(self) -> dict[str, float]:
        r = self.ratio
        return {"hotwire_ratio": float(abs(r)), "hotwire_ratio_ci95": self.ratio_ci95,
                "hotwire_phase_diff_rad": float(np.angle(r)), "hotwire_phase_ci95_rad": self.phase_ci95_rad, "hotwire_diff_z": self.difference_z,
                "hotwire_coherence": float(self.coherence), "hotwire_mean_velocity_m_s": self.mean_velocity_m_s,
                "hotwire_below_zero_flow": float(self.below_zero_flow)}

    def warnings(self, freq_hz: float) -> tuple[str, ...]:
        out = []
        if self.difference_z > DIFFERENCE_Z_MAX:
            r = self.ratio
            out.append(f"at {freq_hz:g} Hz the hot-wire velocity differs from the multi-microphone one at its position "
                       f"beyond their uncertainty (ratio {abs(r):.3g}, phase {np.degrees(np.angle(r)):+.3g}°, "
                       f"z = {self.difference_z:.3g}): a convective disturbance locked to the forcing, a wrong wire "
                       f"calibration or position, or a sensor error")
        if self.coherence < COHERENCE_MIN:
            out.append(f"at {freq_hz:g} Hz the hot-wire and the multi-microphone velocity are coherent only to "
                       f"γ² = {self.coherence:.2f}: the wire sees a disturbance that is not sound (convective, "
                       f"turbulence) which the multi-microphone method filters out")
        if self.below_zero_flow > 0.0:
            out.append(f"at {freq_hz:g} Hz {100 * self.below_zero_flow:.2g} % of the hot-wire samples are below its "
                       f"zero-flow voltage (flow reversal at the wire, which it reads as forward flow)")
        return tuple(out)


@dataclass(frozen=True)
class CarriedVelocity:
    """The hot-wire's û over ū at the reference plane, through the plane-wave field's transfer."""

    velocity_ratio: complex     # û_hw T / ū_ref
    gain_var_rel: float         # relative variance of |velocity_ratio|
    phase_var: float            # variance of its phase, rad²

    @property
    def ratio_ci95(self) -> float:
        """95 % half-width of |û_hw T|/ū_ref (first order, normal coverage factor)."""
        return float(1.959963984540054 * abs(self.velocity_ratio) * np.sqrt(self.gain_var_rel))

    def figures(self) -> dict[str, float]:
        return {"hotwire_velocity_ratio": float(abs(self.velocity_ratio)), "hotwire_velocity_ratio_ci95": self.ratio_ci95}


def carry_to_reference(check: HotWireCheck, transfer: complex, transfer_rel_var: float,
                       transfer_rel_directions: tuple[complex, ...], mean_velocity_ref_m_s: float) -> CarriedVelocity:
    """û_hw·T/ū_ref with its gain and phase variances.

    ``transfer`` T = û_ref/û(x_hw) of the plane-wave fit; ``transfer_rel_var`` E|δT/T|² from the
    sensors' noise; ``transfer_rel_directions`` the relative shifts δT/T for one standard
    uncertainty of each stated input (sensor calibrations, the wire's position). The wire's noise
    and T's are independent (circular: half to the gain, half to the phase); each systematic
    direction goes in as Re² to the gain and Im² to the phase (JCGM 100:2008 §5.1.2).
    """
    u_hw = check.velocity_hotwire
    if u_hw == 0 or transfer == 0 or not mean_velocity_ref_m_s > 0:
        return CarriedVelocity(complex(np.nan, np.nan), float("inf"), float("inf"))
    noise = 0.5 * (check.var_hotwire / abs(u_hw) ** 2 + transfer_rel_var)
    rel = [d / u_hw for d in check.directions_hotwire] + list(transfer_rel_directions)
    return CarriedVelocity(u_hw * transfer / mean_velocity_ref_m_s, noise + sum(r.real**2 for r in rel),
                           noise + sum(r.imag**2 for r in rel))


def velocity_from_voltage(voltage_v: np.ndarray, a_v2: float, b: float, n: float) -> tuple[np.ndarray, float]:
    """U = ((E² − A)/B)^(1/n) sample by sample, and the fraction of samples with E² < A (read as 0)."""
    q = (np.square(np.asarray(voltage_v, dtype=float)) - a_v2) / b
    below = float(np.mean(q < 0)) if q.size else 0.0
    return np.power(np.clip(q, 0.0, None), 1.0 / n), below


def segment_phasors(x: np.ndarray, sample_rate_hz: float, freq_hz: float, n_segments: int = N_SEGMENTS
                    ) -> np.ndarray:
    """Complex amplitude at ``freq_hz`` of each channel in each of ``n_segments`` equal segments
    (least squares on offset, cos, sin per segment; phase referred to the record's first sample,
    so a steady sinusoid gives the same phasor in every segment). Shape (n_ch, n_segments)."""
    data = np.atleast_2d(np.asarray(x, dtype=float))
    length = data.shape[1] // n_segments
    if length < 8:
        raise RecordError(f"record of {data.shape[1]} samples is too short for {n_segments} segments")
    w = 2 * np.pi * freq_hz / sample_rate_hz
    t = np.arange(length)
    basis = np.column_stack([np.ones(length), np.cos(w * t), np.sin(w * t)])
    proj = np.linalg.pinv(basis)                                     # (3, L)
    seg = data[:, :n_segments * length].reshape(data.shape[0], n_segments, length)
    beta = seg @ proj.T                                              # (n_ch, K, 3)
    local = beta[..., 1] - 1j * beta[..., 2]                         # x = Re{a e^{iωt'}} in the segment
    return local * np.exp(-1j * w * length * np.arange(n_segments))[None, :]


def coherence(a: np.ndarray, b: np.ndarray) -> float:
    """γ² of two phasor sequences over their segments."""
    num = abs(np.sum(a * np.conj(b))) ** 2
    den = float(np.sum(np.abs(a) ** 2) * np.sum(np.abs(b) ** 2))
    return float(num / den) if den > 0 else 0.0


def cross_check(voltage_v: np.ndarray, velocity_mmm: complex, var_mmm: float, pressure_v: np.ndarray,
                velocity_row: np.ndarray, sample_rate_hz: float, freq_hz: float, a_v2: float, b: float, n: float,
                gain_uncertainty: float = 0.0, phase_uncertainty_rad: float = 0.0,
                directions_mmm: tuple[complex, ...] = (), n_segments: int = N_SEGMENTS) -> HotWireCheck:
    """The cross-check of one record.

    ``voltage_v``: the wire's bridge voltage samples; ``velocity_mmm`` and ``var_mmm``: the
    plane-wave fit's û at the wire's position and E|δû|² there; ``pressure_v`` (n_sensors, n):
    the fit's sensors' samples in volts and ``velocity_row`` the fit's linear map from their
    phasors (volts, calibration and sensitivity included) to û at the wire, so that the same
    estimate applies to each segment for the coherence. A, B, n: King's law; ``gain_uncertainty``
    (relative) and ``phase_uncertainty_rad``: the wire's stated standard uncertainties;
    ``directions_mmm``: the shifts of û_mmm for one standard uncertainty of each sensor's stated
    calibration (m/s).
    """
    u, below = velocity_from_voltage(voltage_v, a_v2, b, n)
    fit = fit_harmonics(u, sample_rate_hz, freq_hz, n_harmonics=1)
    u_hw = complex(fit.amplitude[0])
    var_hw = float(fit.var_amplitude[0])
    dirs_hw = tuple(d for d in (u_hw * gain_uncertainty, 1j * u_hw * phase_uncertainty_rad) if d != 0)
    p = np.atleast_2d(np.asarray(pressure_v, dtype=float))
    k = segment_phasors(np.vstack([u[None, :], p]), sample_rate_hz, freq_hz, n_segments)
    seg_hw, seg_mmm = k[0], np.asarray(velocity_row, dtype=complex) @ k[1:]
    return HotWireCheck(u_hw, complex(velocity_mmm), var_hw, float(var_mmm), coherence(seg_hw, seg_mmm), n_segments,
                        float(fit.offset[0]), below, dirs_hw, tuple(complex(d) for d in directions_mmm))


__all__ = ["FIGURE_LABELS", "NODE_FRACTION", "CarriedVelocity", "HotWireCheck", "carry_to_reference", "coherence", "cross_check", "segment_phasors", "velocity_from_voltage"]
