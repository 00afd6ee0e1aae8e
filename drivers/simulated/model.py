"""The true physics of one simulated burner, assembled from a rig and a scenario.

Builds the loudspeaker, the flame model, the acoustic network (per frequency, per
drift state, with or without flame), the true sensor factors and the drift, and turns
an analytic drive signal into analytic pressures, the heat-release ratio and the
reference-plane velocity amplitude. Flame saturation enters through the describing
function of a clip, found by bisection on the amplitude fixed point.

The steady forced response is physical only for a rig that is linearly stable with its
flame (``stability``). For an unstable one the burner adds the self-excited oscillation
(``selfexcited``) to the forced signals (``Oscillation``) and caps the flame factor of the
forced response at ``flame_factor_cap`` (the flame gain the oscillation leaves).

Imports: numpy, app.rig, app.core.gas (gas properties only) and this package. Never the
core's estimators (multimic, harmonic, response, quality).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from app.core.gas import mean_flow, mixture_state
from app.rig import Rig

from .acoustics import BurnerGeometry, BurnerNetwork, FlowState, Medium, apply, chain, duct_matrix
from .flame import FlameModel, GaussianTerm
from .loudspeaker import Loudspeaker
from .scenario import Scenario

TWO_PI = 2.0 * np.pi


@dataclass(frozen=True)
class DriftState:
    temperature_k: float  # true gas temperature at the sensors
    flow_factor: float  # true mass flow / nominal mass flow


@dataclass(frozen=True)
class PointResponse:
    """Steady response per peak volt at the amplifier input, at one frequency and drive level."""

    pressure_per_v: np.ndarray  # Pa/V at each sensor (complex)
    velocity_per_v: complex  # û_ref per volt (m/s/V), just upstream of the flame
    flame_response: complex  # F actually acting (linear × saturation), 0 without flame
    flame_linear: complex
    velocity_reference_m_s: float
    probe_velocity_per_v: complex | None = None  # û at the hot-wire per volt (sound + convected wave), m/s/V


@dataclass(frozen=True)
class Forced:
    """Analytic forced signals of one block (no noise)."""

    pressure_pa: np.ndarray  # (n_sensors, n) complex analytic pressure
    heat_release_ratio: np.ndarray  # (n,) Q'/Q̄, real, after the flame's clip
    amplitude_ratio: np.ndarray  # (n,) |û_ref|/ū_ref envelope (peak)
    # (n,) analytic velocity fluctuation at the hot-wire (m/s), the forcing's fundamental only; None:
    # no hot-wire, or a drive the probe is not modelled for (multi-sine)
    probe_velocity_m_s: np.ndarray | None = None

    def where(self, mask: np.ndarray, other: "Forced") -> "Forced":
        probe = None
        if self.probe_velocity_m_s is not None and other.probe_velocity_m_s is not None:
            probe = np.where(mask, self.probe_velocity_m_s, other.probe_velocity_m_s)
        return Forced(np.where(mask, self.pressure_pa, other.pressure_pa),
                      np.where(mask, self.heat_release_ratio, other.heat_release_ratio),
                      np.where(mask, self.amplitude_ratio, other.amplitude_ratio), probe)


@dataclass(frozen=True)
class Oscillation:
    """Signals of a self-excited oscillation over one block, added to the forced ones."""

    velocity_ratio: np.ndarray  # (n,) analytic û_ref/ū_ref
    heat_release_linear: np.ndarray  # (n,) Re{F û_ref/ū_ref}, before the flame's clip
    pressure_pa: np.ndarray  # (n_sensors, n) analytic pressure


def _clip_df(saturation: float | None, heat_release_amplitude: float) -> float:
    """Scalar clip describing function N(a_s / amplitude) (same formula as flame.py)."""
    if saturation is None or heat_release_amplitude <= saturation:
        return 1.0
    g = saturation / heat_release_amplitude
    return (2.0 / math.pi) * (math.asin(g) + g * math.sqrt(1.0 - g * g))


def _medium(state, gamma: float | None = None) -> Medium:
    g = state.gamma if gamma is None else gamma
    c = state.speed_of_sound_m_s if gamma is None else math.sqrt(g * state.pressure_pa / state.density_kg_m3)
    return Medium(state.density_kg_m3, c, g, state.kinematic_viscosity_m2_s, state.prandtl)


def build_flame(scenario: Scenario, rig: Rig) -> FlameModel:
    f = scenario.flame
    nozzle_radius = math.sqrt(rig.duct.area_m2 / rig.duct.area_ratio / math.pi)
    return FlameModel(kind=f.model, n=f.n, tau_s=f.tau,
                      terms=tuple(GaussianTerm(t.n, t.tau, t.sigma) for t in f.terms),
                      radius_m=f.radius if f.radius is not None else nozzle_radius,
                      flame_speed_m_s=f.flame_speed, half_angle_rad=f.half_angle, saturation=f.saturation)


def build_speaker(scenario: Scenario) -> Loudspeaker:
    s = scenario.loudspeaker
    return Loudspeaker(s.resonance, s.q, s.amplifier_gain, s.peak_velocity_per_volt,
                       math.pi * s.cone_diameter**2 / 4.0, s.compression_voltage,
                       s.second_harmonic_per_volt, s.third_harmonic_per_volt2)


def true_sensor_errors(scenario: Scenario, rig: Rig, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """True/nominal sensitivity ratio and phase error (rad) of each pressure sensor."""
    rng = np.random.default_rng([seed, 3])
    n = len(rig.pressure_sensors)
    spec = scenario.sensors
    gains = 1.0 + spec.sensitivity_spread * np.clip(rng.standard_normal(n), -2.5, 2.5)
    phases = spec.phase_spread * np.clip(rng.standard_normal(n), -2.5, 2.5)
    for i, s in enumerate(rig.pressure_sensors):
        if s.channel in spec.errors:
            gains[i], phases[i] = spec.errors[s.channel].gain, spec.errors[s.channel].phase
    return gains, phases


def true_flow_rig(scenario: Scenario, rig: Rig, seed: int) -> Rig:
    """The rig with its flow meters' readings replaced by the true flows (scenario's flow_meters)."""
    spec = scenario.flow_meters
    if not rig.gas.flows or (spec.reading_spread == 0.0 and not spec.errors):
        return rig
    rng = np.random.default_rng([seed, 6])
    draws = spec.reading_spread * np.clip(rng.standard_normal(len(rig.gas.flows)), -2.5, 2.5)
    flows = []
    for meter, draw in zip(rig.gas.flows, draws):
        err = spec.errors[meter.name].error if meter.name in spec.errors else float(draw)
        flows.append(meter.model_copy(update={"flow": meter.flow * (1.0 + err)}))
    return rig.model_copy(update={"gas": rig.gas.model_copy(update={"flows": tuple(flows)})})


class BurnerModel:
    """True physics of a rig + scenario; responses are cached per frequency and drift state."""

    def __init__(self, rig: Rig, scenario: Scenario, seed: int) -> None:
        self.rig, self.scenario = rig, scenario
        self.flame = build_flame(scenario, rig)
        self.speaker = build_speaker(scenario)
        self._mean = mean_flow(true_flow_rig(scenario, rig, seed))   # the true flows, not the meters' readings
        self._composition = self._mean.composition
        sc, duct = scenario, rig.duct
        self.geometry = BurnerGeometry(
            plenum_length_m=sc.plenum.length, plenum_radius_m=sc.plenum.diameter / 2.0,
            plenum_volume_m3=sc.plenum.volume, duct_radius_m=duct.radius_m, duct_start_m=duct.upstream_end,
            reference_plane_m=duct.reference_plane, reference_area_m2=duct.area_m2 / duct.area_ratio,
            chamber_length_m=sc.chamber.length, chamber_radius_m=sc.chamber.diameter / 2.0,
            end_reflection=sc.chamber.end_reflection, burner_loss_coefficient=sc.burner.loss_coefficient)
        self.sensor_positions_m = np.array([s.position for s in rig.pressure_sensors])
        self.probe_position_m = rig.hot_wire.position if rig.hot_wire is not None else None
        gains, phases = true_sensor_errors(scenario, rig, seed)
        self.true_sensitivity_v_pa = gains * np.array([s.sensitivity for s in rig.pressure_sensors])
        self.sensor_phase_rad = phases
        self.sensor_factor = self.true_sensitivity_v_pa * np.exp(1j * phases)
        self.input_range_v = sc.adc.input_range or rig.acquisition.input_range
        self.dark_offset_v = sc.light.dark_offset if sc.light.dark_offset is not None else rig.light.dark_offset
        rng = np.random.default_rng([seed, 2])
        self._drift_phase = rng.uniform(0.0, TWO_PI, 2)
        self._networks: dict[tuple, BurnerNetwork] = {}
        self._responses: dict[tuple, PointResponse] = {}
        self._factor_cap = 1.0

    @property
    def flame_factor_cap(self) -> float:
        """Largest describing-function factor of the forced response (1: the flame's own clip only)."""
        return self._factor_cap

    @flame_factor_cap.setter
    def flame_factor_cap(self, value: float) -> None:
        self._factor_cap = float(min(max(value, 0.0), 1.0))
        self._responses.clear()

    # ------------------------------------------------------------------ state
    def drift_state(self, time_s: float) -> DriftState:
        d = self.scenario.drift
        temp = (self.rig.gas.temperature + d.temperature_offset_k
                + d.temperature_swing_k * math.sin(TWO_PI * time_s / d.temperature_period + self._drift_phase[0]))
        flow = 1.0 + d.flow_swing * math.sin(TWO_PI * time_s / d.flow_period + self._drift_phase[1])
        return DriftState(round(temp, 2), round(flow, 5))  # rounded: cache keys, changes stay tiny

    def nominal_state(self) -> DriftState:
        return DriftState(round(self.rig.gas.temperature + self.scenario.drift.temperature_offset_k, 2), 1.0)

    def flow_state(self, state: DriftState, flame: bool) -> FlowState:
        p = self.rig.gas.pressure
        cold_gas = mixture_state(self._composition, state.temperature_k, p)
        nominal = self._mean.state
        u_s = self._mean.velocity_sensors_m_s * state.flow_factor * nominal.density_kg_m3 / cold_gas.density_kg_m3
        u_ref = u_s * self._mean.velocity_reference_m_s / self._mean.velocity_sensors_m_s
        cold = _medium(cold_gas)
        g = self.geometry
        a_duct = math.pi * g.duct_radius_m**2
        if flame:
            hot = _medium(mixture_state(self._composition, self.scenario.flame.temperature, p),
                          self.scenario.flame.burnt_gamma)
            theta = self.scenario.flame.temperature / state.temperature_k
        else:
            hot, theta = cold, 1.0
        u_ch = u_ref * g.reference_area_m2 / (math.pi * g.chamber_radius_m**2) * theta
        return FlowState(cold=cold, hot=hot, mach_plenum=u_s * a_duct / (math.pi * g.plenum_radius_m**2) / cold.speed_of_sound_m_s,
                         mach_duct=u_s / cold.speed_of_sound_m_s, mach_chamber=u_ch / hot.speed_of_sound_m_s,
                         velocity_reference_m_s=u_ref, temperature_ratio=theta)

    def network(self, freq_hz: float, state: DriftState, flame: bool) -> BurnerNetwork:
        key = (freq_hz, state, flame)
        net = self._networks.get(key)
        if net is None:
            if len(self._networks) > 512:
                self._networks.clear()
            net = BurnerNetwork(self.geometry, self.flow_state(state, flame), freq_hz, self.sensor_positions_m)
            self._networks[key] = net
        return net

    # ------------------------------------------------------------------ responses
    def response(self, freq_hz: float, drive_v: float, state: DriftState, flame: bool = True) -> PointResponse:
        """Steady response per volt at ``drive_v`` peak (saturation and compression included)."""
        key = (freq_hz, round(drive_v, 9), state, flame)
        hit = self._responses.get(key)
        if hit is None:
            if len(self._responses) > 4096:
                self._responses.clear()
            hit = self._solve(freq_hz, drive_v, state, flame)
            self._responses[key] = hit
        return hit

    def _solve(self, freq_hz: float, drive_v: float, state: DriftState, flame: bool) -> PointResponse:
        net = self.network(freq_hz, state, flame)
        u_bar = net.flow.velocity_reference_m_s
        source = complex(self.speaker.volume_velocity_per_volt(freq_hz) * self.speaker.compression(drive_v))
        f_lin = complex(self.flame.linear(freq_hz)) if flame else 0j

        gain, sat, cap = abs(f_lin), self.flame.saturation, self._factor_cap

        def n_of(factor: float) -> float:
            """Describing-function factor at the amplitude reached with F = f_lin · factor."""
            u = net.reference_velocity_scalar(f_lin * factor, source)
            return cap * _clip_df(sat, gain * abs(u) * drive_v / u_bar)

        factor = 1.0
        if flame and sat is not None and n_of(1.0) < 1.0 - 1e-12:  # saturated: bisection on N = N(a(N))
            lo, hi = 0.0, 1.0
            for _ in range(48):
                mid = 0.5 * (lo + hi)
                lo, hi = (lo, mid) if mid > n_of(mid) else (mid, hi)
            factor = 0.5 * (lo + hi)
        s0 = net.source_state(f_lin * factor, source)
        u = complex(net.reference_velocity(s0))
        return PointResponse(net.sensor_pressures(s0), u, f_lin * factor, f_lin, u_bar, self._probe_velocity(net, s0))

    def probe_mean_velocity_m_s(self, state: DriftState, flame: bool) -> float:
        """The true mean velocity at the hot-wire (the sensor duct's)."""
        flow = self.flow_state(state, flame)
        return flow.mach_duct * flow.cold.speed_of_sound_m_s

    def _probe_velocity(self, net: BurnerNetwork, s0: np.ndarray) -> complex | None:
        """û at the hot-wire from the network's own state (never the multi-microphone code), plus the
        scenario's convected wave: born at the duct's upstream end with ``convected_ratio`` of the
        acoustic velocity there, carried at the mean duct velocity, û_c(x) = r û(x₀) e^{-iω(x − x₀)/ū}."""
        x = self.probe_position_m
        if x is None:
            return None
        g, flow = self.geometry, net.flow
        to_wire = chain(net._plenum, duct_matrix(net.freq_hz, x - g.duct_start_m, flow.cold, flow.mach_duct,
                                                 g.duct_radius_m))
        u = complex(apply(to_wire, s0)[..., 1])
        ratio = self.scenario.hot_wire.convected_ratio
        if ratio > 0:
            u_in = complex(apply(net._plenum, s0)[..., 1])
            u_duct = flow.mach_duct * flow.cold.speed_of_sound_m_s
            omega = TWO_PI * float(np.real(net.freq_hz))
            u += ratio * u_in * complex(np.exp(-1j * omega * (x - g.duct_start_m) / u_duct))
        return u

    def pressure_per_volume_velocity(self, freq_hz: float, state: DriftState, flame: bool) -> np.ndarray:
        """Sensor pressures per unit source volume velocity with the linear flame (for harmonics)."""
        net = self.network(freq_hz, state, flame)
        f_lin = complex(self.flame.linear(freq_hz)) if flame else 0j
        return net.sensor_pressures(net.source_state(f_lin, 1.0))

    def noise_transfers(self, freq_hz: float, state: DriftState, flame: bool) -> tuple[np.ndarray, np.ndarray]:
        """Linear responses at ``freq_hz`` to the two sound sources of the noise, with the flame's
        feedback: rows (sensor pressures in Pa ..., light fluctuation q'/Q̄) per unit source.

        Row set 0, inflow sound: per unit source volume velocity at the plenum (m³/s) — the
        sensors' pressures and the flame's heat release F û_ref/ū it drives. Row set 1, flame
        noise: per unit independent heat-release fluctuation q_n/Q̄ at the flame, which adds
        (θ − 1) ū q_n to the velocity jump (Rankine–Hugoniot, compact low-Mach flame): the
        network answers with p̂₀ = −w₁ (θ − 1) ū q_n / D at the rigid source end; the light sees
        q_n + F û_ref/ū."""
        net = self.network(freq_hz, state, flame)
        f_lin = complex(self.flame.linear(freq_hz)) if flame else 0j
        u_bar = net.flow.velocity_reference_m_s
        s0 = net.source_state(f_lin, 1.0)
        inflow = np.append(net.sensor_pressures(s0), f_lin * complex(net.reference_velocity(s0)) / u_bar)
        theta = net.flow.temperature_ratio
        if not flame:
            return inflow, np.zeros_like(inflow)
        d = complex(net.characteristic(f_lin))
        jump = (theta - 1.0) * u_bar
        p0 = -complex(net._end_w[..., 1]) * jump / d if d != 0 else 0j
        rest = np.array([p0, 0.0], dtype=complex)
        flame_rows = np.append(net.sensor_pressures(rest), 1.0 + f_lin * complex(net.reference_velocity(rest)) / u_bar)
        return inflow, flame_rows

    # ------------------------------------------------------------------ time series
    def forced(self, z: np.ndarray, freq_hz: np.ndarray, state: DriftState, flame: bool,
               oscillation: Oscillation | None = None) -> Forced:
        """Forced signals for an analytic drive ``z`` (volts) with per-sample frequency.

        ``oscillation`` (a self-excited one, with the flame lit) is added before the flame's
        clip, so the light and the amplitude envelope carry the sum.
        """
        n_s, n = len(self.sensor_positions_m), z.size
        pressure = np.zeros((n_s, n), dtype=complex)
        heat = np.zeros(n)
        velocity = np.zeros(n, dtype=complex)
        probe = np.zeros(n, dtype=complex) if self.probe_position_m is not None else None
        for f in np.unique(freq_hz):
            idx = np.flatnonzero(freq_hz == f)
            if f <= 0.0:
                continue
            p, q, u, w = self._forced_at(z[idx], float(f), state, flame)
            pressure[:, idx], heat[idx], velocity[idx] = p, q, u
            if probe is not None and w is not None:
                probe[idx] = w
        if oscillation is not None and flame:
            pressure += oscillation.pressure_pa
            heat += oscillation.heat_release_linear
            velocity += oscillation.velocity_ratio
        if flame and self.flame.saturation is not None:
            np.clip(heat, -self.flame.saturation, self.flame.saturation, out=heat)
        return Forced(pressure, heat, np.abs(velocity), probe)

    def _forced_at(self, z: np.ndarray, freq_hz: float, state: DriftState, flame: bool):
        env = np.abs(z)
        lo, hi = float(env.min()), float(env.max())
        levels = np.array([hi]) if hi - lo <= 1e-9 * max(hi, 1e-12) else np.linspace(lo, hi, 9)
        resp = [self.response(freq_hz, float(v), state, flame) for v in levels]
        h_p = np.array([r.pressure_per_v for r in resp]).T  # (n_s, levels)
        h_u = np.array([r.velocity_per_v for r in resp])
        u_bar = resp[0].velocity_reference_m_s
        h_w = None if resp[0].probe_velocity_per_v is None else np.array([r.probe_velocity_per_v for r in resp])
        w = None
        if levels.size == 1:
            pressure = h_p[:, :1] * z[None, :]
            u = h_u[0] * z
            if h_w is not None:
                w = h_w[0] * z
        else:
            interp = lambda h: np.interp(env, levels, h.real) + 1j * np.interp(env, levels, h.imag)  # noqa: E731
            pressure = np.stack([interp(row) for row in h_p]) * z[None, :]
            u = interp(h_u) * z
            if h_w is not None:
                w = interp(h_w) * z
        pressure += self._harmonics(z, env, freq_hz, state, flame)
        q = np.real(resp[0].flame_linear * u) / u_bar  # before the clip (see forced)
        return pressure, q, u / u_bar, w

    def _harmonics(self, z, env, freq_hz: float, state: DriftState, flame: bool) -> np.ndarray:
        """Pressures of the loudspeaker's 2nd and 3rd harmonics (linear flame at k f)."""
        sp = self.speaker
        total = np.zeros((len(self.sensor_positions_m), z.size), dtype=complex)
        q1 = sp.volume_velocity_per_volt(freq_hz) * sp.compression(env) * z  # analytic volume velocity
        mag = np.abs(q1)
        inv = np.divide(1.0, mag, out=np.zeros_like(mag), where=mag > 0)
        qk = q1
        for k in (2, 3):
            qk = qk * q1 * inv  # |q1| e^{ik arg q1}
            if k * freq_hz >= 0.5 * self.rig.acquisition.sample_rate or not np.any(sp.harmonic_ratio(k, env)):
                continue
            total += np.multiply.outer(self.pressure_per_volume_velocity(k * freq_hz, state, flame),
                                       sp.harmonic_ratio(k, env) * qk)
        return total
