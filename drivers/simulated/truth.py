"""The ONLY place the simulator's true answers are exposed (tests, "show truth" overlay).

The measurement code never reads this module (it lives in drivers, which the core may
not import). All complex values use e^{+iωt}; amplitude ratios a = |û_ref|/ū_ref and
drive voltages are PEAK values. On a rig that is linearly unstable (``true_stability``) the
self-excited oscillation saturates the flame, so what a measurement finds there is not
``true_ftf``; the velocity and pressure functions give the forced line only.

Imports: numpy, app.rig and this package only.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .burner import SimulatedBurner
from .model import BurnerModel, DriftState, build_flame
from .scenario import Scenario, load_scenario
from .stability import Stability, stability

Source = SimulatedBurner | Scenario | str | Path


def _model(source: Source) -> tuple[BurnerModel, DriftState]:
    """The true model and the drift state to evaluate it at (the burner's current one)."""
    if isinstance(source, SimulatedBurner):
        return source.model, source.model.drift_state(source.time_s)
    scenario = source if isinstance(source, Scenario) else load_scenario(source)
    model = BurnerModel(scenario.load_rig(), scenario, scenario.seed)
    return model, model.nominal_state()


def true_stability(source: Source) -> Stability:
    """Modes of the simulated rig with its linear flame (e^{+iωt}: growth σ = -Im ω > 0)."""
    if isinstance(source, SimulatedBurner):
        return source.stability
    scenario = source if isinstance(source, Scenario) else load_scenario(source)
    return stability(scenario)


def true_ftf(source: Source, freq_hz: float | np.ndarray, amplitude_ratio: float | np.ndarray = 0.0):
    """True FTF/FDF (Q̂'/Q̄)/(û_ref/ū_ref) at peak amplitude ratio ``amplitude_ratio``."""
    if isinstance(source, SimulatedBurner):
        flame = source.model.flame
    else:
        scenario = source if isinstance(source, Scenario) else load_scenario(source)
        flame = build_flame(scenario, scenario.load_rig())
    out = flame.describing(freq_hz, amplitude_ratio)
    return complex(out) if np.ndim(out) == 0 else out


def true_velocity_per_volt(source: Source, freq_hz: float, drive_v: float = 0.05) -> complex:
    """û_ref (m/s, peak) per peak volt at the amplifier input, just upstream of the flame."""
    model, state = _model(source)
    return model.response(float(freq_hz), float(drive_v), state).velocity_per_v


def true_pressure_per_volt(source: Source, freq_hz: float, drive_v: float = 0.05) -> np.ndarray:
    """Complex pressure (Pa per peak volt) at each of the rig's sensors, in rig order."""
    model, state = _model(source)
    return model.response(float(freq_hz), float(drive_v), state).pressure_per_v


def true_amplitude_ratio(source: Source, freq_hz: float, drive_v: float) -> float:
    """Peak |û_ref|/ū_ref reached at a steady drive of ``drive_v`` peak volts."""
    model, state = _model(source)
    r = model.response(float(freq_hz), float(drive_v), state)
    return abs(r.velocity_per_v) * drive_v / r.velocity_reference_m_s


def true_mean_velocity_reference(source: Source) -> float:
    """True bulk velocity ū_ref at the reference plane (m/s), including drift."""
    model, state = _model(source)
    return model.flow_state(state, flame=True).velocity_reference_m_s


def true_sensor_factors(source: Source) -> dict[str, complex]:
    """True complex sensitivity (V/Pa, with its phase error) of each pressure channel."""
    model, _ = _model(source)
    return {s.channel: complex(c) for s, c in zip(model.rig.pressure_sensors, model.sensor_factor)}


def true_relative_factors(source: Source, reference: str) -> dict[str, complex]:
    """True relative calibration factors C_i = r_ref / r_i of each pressure channel, where
    r = (true complex sensitivity) / (the rig file's nominal sensitivity).

    Multiplying sensor i's pressure (volts over its nominal sensitivity) by C_i expresses
    it in the reference sensor's units, amplitude and phase; C_ref = 1. This is what a
    common-plane calibration against ``reference`` must find (it cannot find r_ref itself)."""
    model, _ = _model(source)
    names = [s.channel for s in model.rig.pressure_sensors]
    if reference not in names:
        raise KeyError(f"no pressure sensor {reference!r} (sensors: {', '.join(names)})")
    nominal = np.array([s.sensitivity for s in model.rig.pressure_sensors])
    r = model.sensor_factor / nominal
    r_ref = r[names.index(reference)]
    return {name: complex(r_ref / ri) for name, ri in zip(names, r)}


def true_hot_wire_velocity_per_volt(source: Source, freq_hz: float, drive_v: float = 0.05) -> complex:
    """What the simulated hot-wire sees per peak drive volt at its position (m/s/V): the network's
    acoustic velocity there plus the scenario's convected wave (the convective noise aside)."""
    model, state = _model(source)
    u = model.response(freq_hz, drive_v, state, True).probe_velocity_per_v
    if u is None:
        raise ValueError("the rig has no [hot_wire]")
    return complex(u)


def true_light_factor(burner: SimulatedBurner) -> float:
    """The mean light at the burner's thermal power over the light at the scenario's nominal power
    (the light chain's true non-linearity included)."""
    return float(burner._light_chain_factor())
