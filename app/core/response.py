"""The FTF point: from a record (volts, named channels) and a rig to gain and phase.

Pipeline: harmonic fit of every channel at the forcing frequency → calibrated sensor
pressures → multi-microphone plane-wave fit → velocity at the reference plane over the
mean velocity there → light fluctuation over mean light (dark offset removed) →
FTF = (Q̂'/Q̄) / (û'_ref/ū_ref), convention x(t) = Re{x̂ e^{+iωt}} (a delay gives a
falling phase). Uncertainty travels as one covariance (app.core.uncertainty.PhasorCovariance):
the harmonic fit's noise cross-spectral covariance of all channels, with its degrees of
freedom, is carried through calibration, the plane-wave fit and the ratios to the means to
the 2 × 2 covariance of (Q̂'/Q̄, û'/ū); the rig file's systematic terms enter as complex
directions. Intervals are 95 % half-widths with a Student-t coverage factor; quality figures
go with every point.

Amplitude ratios here are PEAK values (|û'|/ū with û' the peak amplitude).

The result types (FtfPoint, VelocityEstimate) live in app.core.point and are re-exported here.

Must not import Qt, pyqtgraph, matplotlib, h5py, drivers, the engine or storage.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Mapping, Sequence

import numpy as np

from ..errors import RecordError
from ..rig import Rig
from . import gas, hotwire, quality
from .harmonic import HarmonicFit, fit_harmonics
from .multimic import Medium, WaveFit, decompose, velocity_at_reference
from .point import FtfPoint, VelocityEstimate
from .uncertainty import PhasorCovariance, ratio_interval

Z95 = 1.959963984540054  # two-sided 95 % quantile of the normal distribution (ν = ∞)


@dataclass(frozen=True)
class _Prepared:
    """Channel selection and constants shared by every evaluation with one rig."""

    pressure_rows: np.ndarray
    light_row: int
    drive_row: int | None
    sensitivities: np.ndarray
    positions_m: np.ndarray
    weights: np.ndarray


def _prepare(channels: Sequence[str], rig: Rig) -> _Prepared:
    names = list(channels)
    needed = [s.channel for s in rig.pressure_sensors] + [rig.light.channel]
    missing = [c for c in needed if c not in names]
    if missing:
        raise RecordError(f"record lacks channel(s) {', '.join(missing)} named in the rig file "
                          f"'{rig.source_path}' (record has: {', '.join(names) or 'none'})")
    ref = rig.drive.reference_channel
    return _Prepared(
        pressure_rows=np.array([names.index(s.channel) for s in rig.pressure_sensors]),
        light_row=names.index(rig.light.channel),
        drive_row=names.index(ref) if ref and ref in names else None,
        sensitivities=np.array([s.sensitivity for s in rig.pressure_sensors]),
        positions_m=np.array([s.position for s in rig.pressure_sensors]),
        weights=np.array([s.weight for s in rig.pressure_sensors]),
    )


def medium_from(mean: gas.MeanFlow) -> Medium:
    st = mean.state
    return Medium(speed_of_sound_m_s=st.speed_of_sound_m_s, density_kg_m3=st.density_kg_m3,
                  mach=mean.mach_sensors, kinematic_viscosity_m2_s=st.kinematic_viscosity_m2_s,
                  gamma=st.gamma, prandtl=st.prandtl)


def _check_record(data: np.ndarray, channels: Sequence[str], sample_rate_hz: float, freq_hz: float) -> np.ndarray:
    arr = np.asarray(data, dtype=float)
    if arr.ndim != 2 or arr.shape[0] != len(channels):
        raise RecordError(f"record has shape {arr.shape}, expected ({len(channels)} channels, samples)")
    if not np.isfinite(sample_rate_hz) or sample_rate_hz <= 0:
        raise RecordError(f"sample rate {sample_rate_hz!r} Hz is not a positive number")
    if not np.isfinite(freq_hz) or not 0 < freq_hz < sample_rate_hz / 2:
        raise RecordError(f"forcing frequency {freq_hz!r} Hz is not between 0 and half the sample rate "
                          f"({sample_rate_hz / 2:g} Hz)")
    if arr.shape[1] < max(16, 2 * sample_rate_hz / freq_hz):
        raise RecordError(f"record of {arr.shape[1]} samples is too short: it needs at least two periods "
                          f"of {freq_hz:g} Hz ({int(np.ceil(2 * sample_rate_hz / freq_hz))} samples)")
    return arr


def _fit(arr: np.ndarray, channels: Sequence[str], sample_rate_hz: float, freq_hz: float, n_harmonics: int) -> HarmonicFit:
    """fit_harmonics with its input errors turned into RecordErrors that name the channel."""
    try:
        return fit_harmonics(arr, sample_rate_hz, freq_hz, n_harmonics=n_harmonics)
    except ValueError as exc:
        text = str(exc)
        if text.startswith("channel "):
            index, _, rest = text[len("channel "):].partition(":")
            if index.isdigit() and int(index) < len(channels):
                text = f"channel '{channels[int(index)]}':{rest}"
        raise RecordError(text) from None


def channel_covariance(fit: HarmonicFit) -> PhasorCovariance:
    """The harmonic fit's E[δa δaᴴ] over all channels (volts²) with its degrees of freedom."""
    matrix = fit.cov_amplitude if fit.cov_amplitude is not None else np.diag(fit.var_amplitude).astype(complex)
    return PhasorCovariance(np.asarray(matrix, dtype=complex), float(fit.noise_dof))


@dataclass(frozen=True)
class _Pressures:
    """A fit's calibrated sensor pressures at one harmonic, with what the plane-wave fit weighs them by."""

    p_hat: np.ndarray                  # calibrated complex pressures, Pa
    scale: np.ndarray                  # volts → calibrated pascals, per sensor
    noise_cov: np.ndarray | None       # their noise covariance, Pa² (forcing frequency only)
    sys_var: np.ndarray | None         # each sensor's stated calibration error variance, Pa²


def _pressures(fit: HarmonicFit, prep: _Prepared, rig: Rig, harmonic: int = 1) -> _Pressures:
    freq = fit.freq_hz * harmonic
    corr = np.array([s.correction(freq) for s in rig.pressure_sensors])
    if harmonic == 1:
        volts = fit.amplitude[prep.pressure_rows]
    else:
        volts = fit.harmonics[prep.pressure_rows, harmonic - 2]
    scale = corr / prep.sensitivities                              # volts → calibrated pascals
    p_hat = volts * scale
    noise_cov = sys_var = None
    if harmonic == 1:
        cov = channel_covariance(fit)
        noise_cov = cov.matrix[np.ix_(prep.pressure_rows, prep.pressure_rows)] * np.outer(scale, scale.conj())
        u_cal = np.array([s.calibration_uncertainty(freq) for s in rig.pressure_sensors])
        if np.any(u_cal > 0):   # each sensor's stated calibration error variance, E|δp_i|² = |p_i|²(u_g² + u_φ²)
            sys_var = np.abs(p_hat) ** 2 * np.sum(u_cal**2, axis=1)
    return _Pressures(p_hat, scale, noise_cov, sys_var)


def _velocity_from_fit(fit: HarmonicFit, prep: _Prepared, rig: Rig, mean: gas.MeanFlow,
                       medium: Medium, harmonic: int = 1, generalised: bool = True,
                       pressures: _Pressures | None = None) -> tuple[complex, float, WaveFit, np.ndarray]:
    """û_ref, its variance, the wave fit and the row r with δû_ref = r·δa over all channels.

    At the forcing frequency the pressures' full noise covariance goes into the plane-wave fit
    (generalised least squares when it is well estimated and ``generalised``); r includes the fit's inflation for
    weights estimated from the same noise, so var = r Σ r̄ᵀ. At harmonics only û is wanted.
    ``pressures`` (from ``_pressures`` of the same fit, harmonic and sensors) saves recomputing them
    when only the geometry or the gas changes.
    """
    freq = fit.freq_hz * harmonic
    pr = _pressures(fit, prep, rig, harmonic) if pressures is None else pressures
    wf = decompose(pr.p_hat, prep.positions_m, freq, rig.duct.radius_m, medium,
                   weights=prep.weights, noise_cov=pr.noise_cov, noise_dof=fit.noise_dof, generalised=generalised,
                   systematic_var=pr.sys_var)
    scale = pr.scale
    u_ref, var_u = velocity_at_reference(wf, rig.duct.reference_plane, rig.duct.area_ratio)
    row = np.zeros(fit.amplitude.size, dtype=complex)
    row[prep.pressure_rows] = (np.sqrt(wf.variance_inflation) * rig.duct.area_ratio
                               * (wf._g(rig.duct.reference_plane) @ wf.estimator) * scale)
    return complex(u_ref), float(var_u), wf, row


def _systematic_directions(fit: HarmonicFit, prep: _Prepared, rig: Rig, mean: gas.MeanFlow,
                           vel_ratio: complex, wf: WaveFit | None = None) -> tuple[tuple[str, complex], ...]:
    """Named complex shifts δ_k of û/ū for one standard uncertainty of each systematic input.

    The inputs are the rig file's stated standard uncertainties (GUM type B): the gas
    temperature, each sensor's position, each sensor's calibration (relative gain and phase:
    the calibration file's per-frequency values when one is referenced, else the sensor's
    ``gain_uncertainty`` / ``phase_uncertainty``) and each flow meter's reading (or the stated
    mean velocity). A wrong temperature shifts the speed of sound, the density and the metered
    mean velocity; a wrong position shifts the plane-wave fit (both by finite differences
    through the same fit). A calibration error of sensor i scales its pressure by (1 + ε) or
    e^{iε}: û is linear in the pressures, û = r·p, so δû = r_i p_i ε (or i r_i p_i ε) exactly
    to first order. A flow meter's error moves ū_ref 1:1 through the mass flow (and, slightly,
    the Mach number in the wave numbers: taken through the same fit). Each moves û/ū in a
    definite complex direction, so gain and phase get Σ Re(δ_k/U)² and Σ Im(δ_k/U)²
    (JCGM 100:2008 §5.1.2), not |δ|²/2 each.
    """
    shifts: list[tuple[str, complex]] = []
    pressures = _pressures(fit, prep, rig)          # the same calibrated pressures under every shift
    d_t = rig.gas.temperature_uncertainty
    if d_t > 0:
        g = rig.gas
        t_ref = None if g.temperature_at_reference is None else g.temperature_at_reference + d_t
        warm = rig.model_copy(update={"gas": g.model_copy(update={"temperature": g.temperature + d_t,
                                                                    "temperature_at_reference": t_ref})})
        mean_w = gas.mean_flow(warm)
        u_w = _velocity_from_fit(fit, prep, warm, mean_w, medium_from(mean_w), pressures=pressures)[0]
        shifts.append(("gas temperature", u_w / mean_w.velocity_reference_m_s - vel_ratio))
    medium = medium_from(mean)
    for i, sensor in enumerate(rig.pressure_sensors):
        if sensor.position_uncertainty > 0:
            moved = prep.positions_m.copy()
            moved[i] += sensor.position_uncertainty
            u_m = _velocity_from_fit(fit, replace(prep, positions_m=moved), rig, mean, medium, pressures=pressures)[0]
            shifts.append((f"{sensor.channel} position", u_m / mean.velocity_reference_m_s - vel_ratio))
    if wf is not None:
        # δû/ū per unit relative change of each calibrated pressure: r_i p_i / ū
        per_sensor = (rig.duct.area_ratio * (wf._g(rig.duct.reference_plane) @ wf.estimator) * wf.pressures_pa
                      / mean.velocity_reference_m_s)
        for i, sensor in enumerate(rig.pressure_sensors):
            u_gain, u_phase = sensor.calibration_uncertainty(fit.freq_hz)
            if u_gain > 0:
                shifts.append((f"{sensor.channel} calibration gain", complex(per_sensor[i] * u_gain)))
            if u_phase > 0:
                shifts.append((f"{sensor.channel} calibration phase", complex(1j * per_sensor[i] * u_phase)))
    g = rig.gas
    if not g.flows and g.mean_velocity_uncertainty > 0:
        # a stated mean velocity: ū_ref itself is off, 1:1 and opposite in U = û/ū
        shifts.append(("mean velocity", complex(-vel_ratio * g.mean_velocity_uncertainty)))
    for i, meter in enumerate(g.flows):
        if meter.relative_uncertainty > 0 and meter.flow > 0:
            flows = list(g.flows)
            flows[i] = meter.model_copy(update={"flow": meter.flow * (1.0 + meter.relative_uncertainty)})
            high = rig.model_copy(update={"gas": g.model_copy(update={"flows": tuple(flows)})})
            mean_h = gas.mean_flow(high)
            u_h = _velocity_from_fit(fit, prep, high, mean_h, medium_from(mean_h), pressures=pressures)[0]
            shifts.append((f"flow meter {meter.name}", u_h / mean_h.velocity_reference_m_s - vel_ratio))
    return tuple(shifts)


def _mean_flow(rig: Rig, mean_flow: gas.MeanFlow | None) -> gas.MeanFlow:
    return mean_flow if mean_flow is not None else gas.mean_flow(rig)


def _fit_record(data: np.ndarray, channels: Sequence[str], sample_rate_hz: float, freq_hz: float, rig: Rig,
                mean_flow: gas.MeanFlow | None, n_harmonics: int
                ) -> tuple[np.ndarray, _Prepared, gas.MeanFlow, HarmonicFit]:
    """Checked samples, the rig's channel selection, the mean flow and the harmonic fit of a record."""
    arr = _check_record(data, channels, sample_rate_hz, freq_hz)
    prep = _prepare(channels, rig)
    return arr, prep, _mean_flow(rig, mean_flow), _fit(arr, channels, sample_rate_hz, freq_hz, n_harmonics)


def measure_velocity(data: np.ndarray, channels: Sequence[str], sample_rate_hz: float, freq_hz: float,
                     rig: Rig, mean_flow: gas.MeanFlow | None = None) -> VelocityEstimate:
    """Velocity amplitude at the reference plane from one window (used while tuning).

    The same estimator as the record's (:func:`evaluate_point`): the generalised fit where the
    window holds enough segments for its noise covariance (``multimic.decompose``), else the
    rig's weights. With uncalibrated sensors the two weightings differ systematically (by 7.5 %
    at 700 Hz on the demo rig), so tuning with one and recording with the other aimed the drive
    at the target as one estimator sees it and flagged the record as off target by the other.
    """
    _, prep, mean, fit = _fit_record(data, channels, sample_rate_hz, freq_hz, rig, mean_flow, 1)
    return _velocity_and_row(fit, prep, rig, mean)[0]


def _velocity_estimate(fit: HarmonicFit, prep: _Prepared, rig: Rig, mean: gas.MeanFlow) -> VelocityEstimate:
    return _velocity_and_row(fit, prep, rig, mean)[0]


def _velocity_and_row(fit: HarmonicFit, prep: _Prepared, rig: Rig, mean: gas.MeanFlow, generalised: bool = True
                      ) -> tuple[VelocityEstimate, np.ndarray]:
    medium = medium_from(mean)
    u_ref, var_u, wf, row = _velocity_from_fit(fit, prep, rig, mean, medium, generalised=generalised)
    u_mean = mean.velocity_reference_m_s
    ratio = abs(u_ref) / u_mean
    p_peak = float(np.max(np.abs(fit.amplitude[prep.pressure_rows] / prep.sensitivities)))
    drive = complex(fit.amplitude[prep.drive_row]) if prep.drive_row is not None else None
    return VelocityEstimate(
        freq_hz=fit.freq_hz, velocity_ref=u_ref, amplitude_ratio=float(ratio),
        sigma_ratio=float(np.sqrt(var_u / 2.0) / u_mean), var_velocity_ref=var_u,
        mean_velocity_ref_m_s=u_mean, drive_phasor=drive, cond=float(wf.cond), residual=float(wf.residual),
        pair_spread=float(wf.pair_spread_at(rig.duct.reference_plane)), any_pair_in_band=bool(wf.any_pair_in_band),
        pressure_peak_pa=p_peak, wave_fit=wf, dof=float(wf.cov_dof)), row


def evaluate_point(data: np.ndarray, channels: Sequence[str], sample_rate_hz: float, freq_hz: float,
                   rig: Rig, mean_flow: gas.MeanFlow | None = None) -> FtfPoint:
    """Evaluate one record into an FTF point with 95 % intervals and quality figures."""
    arr, prep, mean, fit = _fit_record(data, channels, sample_rate_hz, freq_hz, rig, mean_flow, 3)
    vel, row_u = _velocity_and_row(fit, prep, rig, mean)
    medium = medium_from(mean)

    light_mean = float(fit.offset[prep.light_row]) - rig.light.dark_offset
    warnings: list[str] = []
    unsteady = float(fit.rms_residual[prep.light_row])
    if light_mean <= 3.0 * unsteady:
        raise RecordError(f"light on '{rig.light.channel}' gives no usable Q'/Q: its mean is {light_mean:.4g} V above "
                          f"the dark offset ({rig.light.dark_offset:.4g} V) with {unsteady:.4g} V rms that is not the "
                          f"forcing: no flame, a flame going out or re-lighting during the record, or a wrong "
                          f"dark offset")
    light_ratio = complex(fit.amplitude[prep.light_row]) / light_mean

    vel_ratio = vel.velocity_ref / vel.mean_velocity_ref_m_s
    if vel_ratio == 0:
        raise RecordError("velocity amplitude at the reference plane is zero: no forcing in this record")
    ftf = light_ratio / vel_ratio
    # One covariance from the channels to (Q̂'/Q̄, û'/ū): rows of the linear maps from the channel
    # phasors; the light's and the pressures' noise correlations enter through the cross term.
    row_light = np.zeros(fit.amplitude.size, dtype=complex)
    row_light[prep.light_row] = 1.0 / light_mean
    cov_ch = channel_covariance(fit)
    pair = cov_ch.propagate(np.vstack([row_light, row_u / vel.mean_velocity_ref_m_s]))
    pair = PhasorCovariance(pair.matrix, min(cov_ch.dof, vel.dof))
    named = [(name, -shift / vel_ratio)                                       # δF/F = −δU/U
             for name, shift in _systematic_directions(fit, prep, rig, mean, vel_ratio, vel.wave_fit)]
    # The dark offset's standard uncertainty shifts Q̄ = mean light − dark, hence |Q̂'/Q̄|: a real
    # (gain-only) direction u_dark/Q̄ (JCGM 100:2008 §5.1.2; the rig file states u_dark).
    if rig.light.dark_offset_uncertainty > 0:
        named.append(("dark offset", complex(rig.light.dark_offset_uncertainty / light_mean)))
    budget = tuple((name, complex(d)) for name, d in named)
    # the velocity ratio's propagated relative standard uncertainty: noise and every systematic
    # input of the velocity side (all but the dark offset), E|δU|²/|U|²
    vel_rel_u = float(np.sqrt(vel.var_velocity_ref / abs(vel.velocity_ref) ** 2
                              + sum(abs(d) ** 2 for name, d in named if name != "dark offset")))
    # and of its modulus |û'|/ū alone: half the circular noise, the real parts of the directions
    ratio_rel_u = float(np.sqrt(0.5 * vel.var_velocity_ref / abs(vel.velocity_ref) ** 2
                                + sum(d.real ** 2 for name, d in named if name != "dark offset")))
    directions = np.array([d for _, d in budget], dtype=complex)
    interval = ratio_interval(light_ratio, vel_ratio, pair, directions)
    rel_var_random = interval.random_rel_var
    rel_var_sys = interval.systematic_gain_var + interval.systematic_phase_var
    sigma_rel = float(np.sqrt(0.5 * (interval.sigma_gain_rel**2 + interval.sigma_phase_rad**2)))
    gain = abs(ftf)

    # the forcing's 2nd and 3rd harmonics at the reference plane, those below half the sample rate
    # (above it the record holds no such harmonic to measure: a 4.3 kHz point at 25.6 kS/s has no 3rd)
    overtones = [abs(_velocity_from_fit(fit, prep, rig, mean, medium, harmonic=k)[0]) for k in (2, 3)
                 if k * freq_hz < 0.5 * sample_rate_hz]
    figures = {
        "snr_db_pressure_min": float(np.min(fit.snr_db[prep.pressure_rows])),
        "snr_db_light": float(fit.snr_db[prep.light_row]),
        "mmm_residual": vel.residual,
        "pair_spread": vel.pair_spread,
        "pair_spread_z": float(vel.wave_fit.pair_spread_z_at(rig.duct.reference_plane)),
        "cond": vel.cond,
        "velocity_rel_uncertainty": vel_rel_u,
        "velocity_ratio_rel_uncertainty": ratio_rel_u,
        "conditioning_grade": float(quality.conditioning_grade(vel.cond, vel_rel_u)),
        "distortion_velocity": float(np.sqrt(np.sum(np.square(overtones))) / abs(vel.velocity_ref)),
        "distortion_light": float(fit.distortion[prep.light_row]),
        "light_mean_v": float(fit.offset[prep.light_row]),
        "light_max_v": float(np.max(arr[prep.light_row])),
        "relative_uncertainty": sigma_rel,
        "relative_uncertainty_random": float(np.sqrt(rel_var_random / 2.0)),
        "relative_uncertainty_systematic": float(np.sqrt(rel_var_sys / 2.0)),
        "sigma_gain_rel": interval.sigma_gain_rel,
        "sigma_phase_rad": interval.sigma_phase_rad,
        "dof_gain": interval.dof_gain,
        "dof_phase": interval.dof_phase,
        "coverage_factor_gain": interval.k_gain,
        "coverage_factor_phase": interval.k_phase,
        "interval_linear": float(interval.linear),
        # the larger of the two relative 95 % half-widths (gain / gain, phase in rad): "too-uncertain"
        "relative_ci95": float(max(interval.gain_ci95 / gain if gain > 0 else np.inf, interval.phase_ci95_rad)),
    }
    # SNR of every channel at the forcing frequency, by channel name.
    figures.update({f"snr_db_ch_{name}": float(db) for name, db in zip(channels, fit.snr_db)})
    figures.update(quality.drift_figures(fit, arr, lambda f: _velocity_estimate(f, prep, rig, mean), prep.light_row))
    text = quality.conditioning_warning(freq_hz, vel.cond, vel_rel_u, vel.any_pair_in_band)
    if text:
        warnings.append(text)
    if rig.hot_wire is not None:
        hw_figures, hw_warnings = _hot_wire_check(arr, channels, sample_rate_hz, freq_hz, rig, prep, vel.wave_fit,
                                                  vel.mean_velocity_ref_m_s)
        figures.update(hw_figures)
        warnings.extend(hw_warnings)
    return FtfPoint(freq_hz=float(freq_hz), velocity=vel, light_ratio=light_ratio, ftf=complex(ftf),
                    gain=float(gain), phase_rad=float(np.angle(ftf)),
                    gain_ci95=interval.gain_ci95, phase_ci95_rad=interval.phase_ci95_rad,
                    quality=figures, warnings=tuple(warnings), covariance=pair, interval=interval,
                    budget=budget)


def _hot_wire_check(arr: np.ndarray, channels: Sequence[str], sample_rate_hz: float, freq_hz: float, rig: Rig,
                    prep: _Prepared, wf: WaveFit, mean_velocity_ref_m_s: float) -> tuple[dict[str, float], tuple[str, ...]]:
    """The hot-wire cross-check's figures and warnings (``app.core.hotwire``): the wire's velocity
    against the plane-wave fit's at the wire's position, in the sensor duct (no area ratio). The
    multi-microphone side's systematic directions: each sensor's stated calibration and the wire's
    stated position (near a velocity node û(x) changes fast along the duct)."""
    hw = rig.hot_wire
    assert hw is not None
    names = list(channels)
    if hw.channel not in names:
        return {}, (f"the rig names a hot-wire on '{hw.channel}' but the record has no such channel: no cross-check",)
    if hw.kings_a is None or hw.kings_b is None or hw.kings_n is None:
        return {}, ("the hot-wire's King's law is not known (a rig not loaded through app.rig.load_rig): no "
                    "cross-check",)
    x = hw.position
    scale = np.array([s.correction(freq_hz) for s in rig.pressure_sensors]) / prep.sensitivities
    row_pa = wf._g(x) @ wf.estimator
    row_v = row_pa * scale                                   # û(x) per sensor phasor in volts
    # the sensors' stated calibration errors move û(x) by r_i p_i ε_g or i r_i p_i ε_φ (as at the
    # reference plane, _systematic_directions)
    per_sensor = row_pa * wf.pressures_pa
    dirs = []
    for i, sensor in enumerate(rig.pressure_sensors):
        u_g, u_p = sensor.calibration_uncertainty(freq_hz)
        dirs += [complex(per_sensor[i] * u_g)] if u_g > 0 else []
        dirs += [complex(1j * per_sensor[i] * u_p)] if u_p > 0 else []
    if hw.position_uncertainty > 0:      # the wire's stated position error moves û_mmm(x) along the duct
        dirs.append(wf.velocity_at(x + hw.position_uncertainty) - wf.velocity_at(x))
    try:
        check = hotwire.cross_check(arr[names.index(hw.channel)], wf.velocity_at(x), wf.velocity_variance_at(x),
                                    arr[prep.pressure_rows], row_v, sample_rate_hz, freq_hz,
                                    hw.kings_a, hw.kings_b, hw.kings_n, hw.gain_uncertainty, hw.phase_uncertainty,
                                    directions_mmm=tuple(dirs))
    except (ValueError, RecordError) as exc:
        return {}, (f"hot-wire cross-check not made: {exc}",)
    carried, note = _hot_wire_at_reference(check, wf, rig, mean_velocity_ref_m_s, freq_hz)
    return {**check.figures(), **carried}, check.warnings(freq_hz) + note


def _hot_wire_at_reference(check: hotwire.HotWireCheck, wf: WaveFit, rig: Rig, mean_velocity_ref_m_s: float,
                           freq_hz: float) -> tuple[dict[str, float], tuple[str, ...]]:
    """The wire's u'/ū carried to the reference plane through the plane-wave field, where the
    geometry allows (``app.core.hotwire``: in the sensor duct, not near a velocity node)."""
    hw, duct = rig.hot_wire, rig.duct
    assert hw is not None
    x, x_ref = hw.position, duct.reference_plane
    if not duct.upstream_end <= x <= x_ref:
        return {}, (f"the hot-wire at x = {x:g} m lies outside the sensor duct ({duct.upstream_end:g} to "
                    f"{x_ref:g} m): compared at its position only, not carried to the reference plane",)
    u_x, u_r = wf.velocity_at(x), wf.velocity_at(x_ref)
    if abs(u_x) < hotwire.NODE_FRACTION * abs(u_r):
        return {}, (f"at {freq_hz:g} Hz the hot-wire sits near a velocity node (|û| there {abs(u_x) / abs(u_r):.2g} "
                    f"of the reference plane's): compared at its position only, not carried to the reference plane",)
    v = wf._g(x_ref) / u_r - wf._g(x) / u_x                  # δT/T = v·δa
    var_t = float(np.real(v @ wf.cov_a @ np.conj(v)))
    per_sensor = (v @ wf.estimator) * wf.pressures_pa        # δT/T per unit relative change of each pressure
    dirs = []
    for i, sensor in enumerate(rig.pressure_sensors):
        u_g, u_p = sensor.calibration_uncertainty(freq_hz)
        dirs += [complex(per_sensor[i] * u_g)] if u_g > 0 else []
        dirs += [complex(1j * per_sensor[i] * u_p)] if u_p > 0 else []
    if hw.position_uncertainty > 0:                            # T = û_ref/û(x): a moved wire changes û(x)
        dirs.append(complex(u_x / wf.velocity_at(x + hw.position_uncertainty) - 1.0))
    transfer = u_r * duct.area_ratio / u_x
    return hotwire.carry_to_reference(check, transfer, var_t, tuple(dirs), mean_velocity_ref_m_s).figures(), ()


def point_summary(point: FtfPoint) -> Mapping[str, object]:
    """Plain numbers for tables and JSON (the ``--json`` form of ``flamebode reprocess``)."""
    return {
        "frequency_hz": point.freq_hz,
        "velocity_ratio": point.velocity.amplitude_ratio,
        "velocity_ratio_basis": "peak",
        "gain": point.gain,
        "gain_ci95": point.gain_ci95,
        "phase_rad": point.phase_rad,
        "phase_ci95_rad": point.phase_ci95_rad,
        "mean_velocity_ref_m_s": point.velocity.mean_velocity_ref_m_s,
        "velocity_ratio_sigma": point.velocity.sigma_ratio,
        # standard uncertainty of |û'|/ū from noise and every stated systematic input (1σ)
        "velocity_ratio_uncertainty": point.velocity.amplitude_ratio * point.quality.get(
            "velocity_ratio_rel_uncertainty", float("nan")),
        "budget": [{"input": name, "gain_rel": d.real, "phase_rad": d.imag} for name, d in point.budget],
        "gain_dof": point.interval.dof_gain if point.interval is not None else None,
        "phase_dof": point.interval.dof_phase if point.interval is not None else None,
        "interval_method": None if point.interval is None else ("linear" if point.interval.linear else "bootstrap"),
        "quality": dict(point.quality),
        "warnings": list(point.warnings),
    }
