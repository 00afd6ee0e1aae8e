"""The simulated burner back-end: a rig to rehearse on and to run every test against.

``SimulatedBurner`` behaves like a real rig behind the driver protocols (SineDrive,
MultiSineDrive, Acquirer, Identified, Stoppable, EmergencyHalt, Paced). Each drive sample comes from the
ceiling guard; each block is synthesised from the guard's samples through the true
physics (loudspeaker → acoustic network with flame feedback → sensors, light chain,
ADC), with coloured noise, slow drift of temperature and flow, and the scenario's faults.
The true FTF is never handed out here; see ``drivers.simulated.truth``.

Rig-side behaviour that a real rig has whatever the scenario says: the flame blows off
when the true peak |û_ref|/ū_ref reaches 1 (flow reversal; ``faults``), and a rig that is
linearly unstable with its flame (``stability``) is self-excited (``selfexcited``). What
happened to the rig is listed in ``rig_events`` (and logged as a warning); what the
scenario's physics implies before any drive is in ``stability`` and ``warnings``.

How to get the blocks of a 2 s record at one frequency and drive voltage::

    from app.rig import load_rig
    from drivers.simulated import SimulatedBurner
    rig = load_rig("configs/demo-rig.toml")
    sim = SimulatedBurner(rig, seed=7)          # demo scenario, fast (not real-time)
    sim.start()
    sim.set_drive(400.0, 0.5)                   # Hz, peak volts at the amplifier input
    while sim.drive_status().ramping:           # let the guard's ramp finish
        sim.read_block()
    sim.read_block(); sim.read_block()          # a little acoustic settling (optional)
    n = round(2.0 / rig.acquisition.block_duration)
    blocks = [sim.read_block() for _ in range(n)]   # contiguous: start_index steps by n_samples
    data = np.concatenate([b.data for b in blocks], axis=1)  # (channels, samples) in volts

Calibration-holder mode (``SimulatedBurner(rig, holder=True)``, see ``holder``): every
pressure sensor at one plane, no flame, for the relative calibration of the sensors.
With ``lamp_position="LABEL"`` a small lamp lights the chain there (the scenario's
``[light] spatial_response``); ``thermal_power=P`` (W) burns the flame at P, and the light chain
answers with the scenario's ``[light] nonlinearity``. A rig with a ``[hot_wire]`` gets the wire's
bridge voltage: the network's acoustic velocity at its position, the mean duct velocity, the
scenario's convective disturbance and convected wave, through the true King's law.

The true answer for the same point: ``truth.true_ftf(sim, 400.0, a)`` with the peak
amplitude ratio a = |û_ref|/ū_ref, ``truth.true_velocity_per_volt(sim, 400.0, 0.5)``.

Imports: numpy, app.rig, app.core.gas (gas properties only), drivers.protocols,
drivers.errors, drivers.guard and this package. Never the core's estimators.
"""

from __future__ import annotations

import dataclasses

import logging
import time
from pathlib import Path

import numpy as np

from app.rig import Rig
from drivers.errors import BackendTimeout, DriverError
from drivers.guard import CeilingGuard
from drivers.protocols import Availability, Block, DriveStatus

from .faults import FaultClock, RigEvent, active_mask
from .holder import holder_plane_m, mount
from .model import BurnerModel, Forced, Oscillation
from .noise import ColouredNoise, SoundSources, adc, shot_noise
from .scenario import Scenario, load_scenario
from .selfexcited import self_excitation
from .stability import Stability, stability

LOG = logging.getLogger("drivers.simulated")

DEMO_SCENARIO = Path(__file__).resolve().parents[2] / "configs" / "demo-scenario.toml"
TWO_PI = 2.0 * np.pi


def resolve_scenario(rig: Rig, scenario: Scenario | str | Path | None) -> Scenario:
    """The scenario object for ``rig``: as given, loaded from a path, or the default."""
    if isinstance(scenario, Scenario):
        out = scenario
    elif scenario is not None:
        out = load_scenario(scenario)
    else:
        out = Scenario.default_for(rig)
        if DEMO_SCENARIO.exists():
            demo = load_scenario(DEMO_SCENARIO)
            same_file = rig.source_path and Path(rig.source_path).resolve() == demo.rig_path
            if same_file or (demo.rig_path.exists() and demo.load_rig().name == rig.name):
                out = demo
    out.check_against(rig)
    return out


def analytic_drive(drive_v: np.ndarray, previous_v: float, freq_hz: np.ndarray) -> np.ndarray:
    """Analytic signal of a sine drive with slowly varying envelope, from consecutive samples.

    For d[n] = Re{A e^{iθn}}: A sin θn = (d[n-1] - d[n] cos θ)/sin θ, exact at constant A.
    """
    theta = TWO_PI * freq_hz
    before = np.concatenate(([previous_v], drive_v[:-1]))
    sin_t = np.sin(theta)
    safe = np.where(np.abs(sin_t) > 1e-12, sin_t, 1.0)
    quad = np.where(np.abs(sin_t) > 1e-12, (before - drive_v * np.cos(theta)) / safe, 0.0)
    return drive_v + 1j * quad


def _ringing(respond, ring: np.ndarray):
    """``respond`` with the transient correction ``ring`` (pressure rows, then the heat-release row) added."""
    def answer(flame: bool, oscillation=None):
        forced = respond(flame, oscillation)
        return dataclasses.replace(forced, pressure_pa=forced.pressure_pa + ring[:-1],
                                   heat_release_ratio=forced.heat_release_ratio + (ring[-1] if flame else 0.0))
    return answer


class SimulatedBurner:
    """A burner rig in software. Deterministic from the seed; faster than real time by default."""

    def __init__(self, rig: Rig, scenario: Scenario | str | Path | None = None,
                 real_time: bool = False, seed: int | None = None, holder: bool = False,
                 holder_plane: float | None = None, noise_seed: int | None = None,
                 thermal_power: float | None = None, lamp_position: str | None = None) -> None:
        """``thermal_power`` (W): the flame burns at this power (the light chain answers it with the
        scenario's ``[light] nonlinearity``; the acoustics keep the rig's flows); default the scenario's
        ``[light] nominal_power``. ``lamp_position``: with ``holder`` (no flame), a small lamp at this
        position label lights the chain with the scenario's ``[light] spatial_response`` there.
        ``holder``: calibration-holder mode (``holder``): every sensor at the axial plane
        ``holder_plane`` (m; default the most upstream sensor's), no flame. ``seed`` (default the
        scenario's) fixes the rig itself (sensor errors, drift phases) and, unless ``noise_seed``
        is given, the noise; a sweep repeated with another ``noise_seed`` meets the same rig with
        new noise, as a re-acquired point at a real rig does."""
        self.rig = rig
        self.scenario = resolve_scenario(rig, scenario)
        self.seed = int(self.scenario.seed if seed is None else seed)
        acq = rig.acquisition
        self._fs = float(acq.sample_rate)
        self._block_n = max(1, int(round(acq.block_duration * self._fs)))
        self.guard = CeilingGuard(rig.drive.ceiling, self._fs, rig.drive.ramp_time)
        self.model = BurnerModel(rig, self.scenario, self.seed)
        self.holder_plane_m = holder_plane_m(rig, holder_plane) if holder else None
        self._channels = tuple(rig.input_channels)
        self._faults = FaultClock(self.scenario.faults, self._fs)
        self.noise_seed = self.seed if noise_seed is None else int(noise_seed)
        rng = np.random.default_rng([self.noise_seed, 1])
        n_p = len(rig.pressure_sensors)
        ns = self.scenario.noise
        self._p_noise = ColouredNoise(n_p, self._fs, ns.pressure_corner, ns.pressure_correlation, rng)
        self._l_noise = ColouredNoise(1, self._fs, ns.light_corner, 0.0, rng)
        self._rng = rng
        self.stability: Stability = stability(self.scenario, rig)
        self.warnings: tuple[str, ...] = self.stability.warnings
        for text in self.warnings:
            LOG.warning("simulated burner: %s", text)
        phase = float(np.random.default_rng([self.seed, 4]).uniform(0.0, TWO_PI))
        self._excitation = self_excitation(self.model, self.stability, phase) if not holder else None
        if self._excitation is not None:
            self.model.flame_factor_cap = self._excitation.incremental_factor
        if self.holder_plane_m is not None:   # no flame in the holder: the burner's stability is moot
            self.warnings = ()
            mount(self.model, self.holder_plane_m)
        self.thermal_power_w = float(self.scenario.light.nominal_power if thermal_power is None else thermal_power)
        if not self.thermal_power_w > 0:
            raise DriverError(f"simulated burner: thermal_power {thermal_power!r} W must be positive")
        self.lamp_position = lamp_position
        self._hw_row = self._channels.index(rig.hot_wire.channel) if rig.hot_wire is not None else None
        self._hw_noise = (ColouredNoise(1, self._fs, self.scenario.hot_wire.convective_corner, 0.0,
                                        np.random.default_rng([self.noise_seed, 7])) if rig.hot_wire is not None else None)
        tr = self.scenario.transients
        self._transients = None
        if tr.enabled and self.holder_plane_m is None:
            from .transients import Transients
            self._transients = Transients(self.model, self.model.drift_state(0.0), self._fs, self._block_n,
                                          tr.length, tr.max_frequency)
            if self._transients.tail_fraction > 1e-2:
                LOG.warning("simulated burner: [transients] length %g s is short for this rig's slowest mode "
                            "(impulse response still at %.2g of its peak in its last tenth)", tr.length,
                            self._transients.tail_fraction)
        self._index = 0
        self._prev_drive_v = 0.0
        self._started = False
        self._stopped = False
        self._real_time = bool(real_time)
        self._wall_anchor = (time.monotonic(), 0)

    # ------------------------------------------------------------------ identity
    @classmethod
    def probe(cls) -> Availability:
        return Availability(True, "built-in simulator")

    def identity(self) -> dict[str, str]:
        model = "simulated burner" if self.holder_plane_m is None else "simulated burner, calibration holder"
        return {"maker": "flamebode", "model": model, "serial": f"seed-{self.seed}" + (f"-noise-{self.noise_seed}" if self.noise_seed != self.seed else ""),
                "rig": self.rig.name, "scenario": self.scenario.source_path or "<default>",
                "numpy": np.__version__}

    # ------------------------------------------------------------------ acquisition
    @property
    def channels(self) -> tuple[str, ...]:
        return self._channels

    @property
    def sample_rate_hz(self) -> float:
        return self._fs

    @property
    def time_s(self) -> float:
        """Simulated time since acquisition started (end of the last block)."""
        return self._index / self._fs

    @property
    def flame_on(self) -> bool:
        return self.holder_plane_m is None and self._index <= self._faults.flame_out_index

    @property
    def rig_events(self) -> tuple[RigEvent, ...]:
        """What happened to the simulated rig itself, in order ("blow-off", "flame-out")."""
        return tuple(self._faults.events)

    def set_real_time(self, real_time: bool) -> None:
        self._real_time = bool(real_time)
        self._wall_anchor = (time.monotonic(), self._index)

    def start(self) -> None:
        self._started, self._stopped = True, False
        self._wall_anchor = (time.monotonic(), self._index)

    def read_block(self, timeout_s: float = 2.0) -> Block:
        """The next block of ``rig.acquisition.block_duration``; raises BackendTimeout after a hang."""
        if not self._started or self._stopped:
            raise DriverError("simulated burner: acquisition is not running (call start() first)")
        if not self._faults.answers(self._index + self._block_n):
            self._hang(timeout_s, "read_block")
        data, status = self._synthesise()
        block = Block(data=data, channels=self._channels, sample_rate_hz=self._fs, start_index=self._index,
                      drive_freq_hz=status.freq_hz, drive_amplitude_v=status.amplitude_v)
        self._index += self._block_n
        self._pace()
        return block

    # ------------------------------------------------------------------ drive
    def set_drive(self, freq_hz: float, amplitude_v: float) -> None:
        if self._stopped:
            raise DriverError("simulated burner: stopped; call start() before driving again")
        if not self._faults.answers(self._index + 1):
            self._hang(2.0, "set_drive")
        self.guard.request(freq_hz, amplitude_v)

    def drive_status(self) -> DriveStatus:
        return self.guard.status()

    def arm(self, ceiling_v: float) -> None:
        """New sweep: clear a halt latch; this sweep's ceiling (never above the rig's)."""
        self.guard.arm(ceiling_v)

    def stop(self) -> None:
        """Ramp the drive down (the ramp is played out in simulated time) and stop. Idempotent."""
        if self._stopped:
            return
        self.guard.ramp_down()
        n_ramp = int(np.ceil(self.guard.time_to_settle_s() * self._fs))
        if n_ramp:
            self._prev_drive_v = float(self.guard.render(n_ramp)[-1])
            self._index += n_ramp
            if self._real_time:
                time.sleep(n_ramp / self._fs)
        self._stopped = True

    def halt(self) -> None:
        """Drive to zero from the next sample, no ramp (lock-free, any thread); latched until :meth:`arm`."""
        self.guard.halt()

    # ------------------------------------------------------------------ internals
    def _hang(self, timeout_s: float, what: str) -> None:
        if self._real_time:
            time.sleep(max(0.0, float(timeout_s)))
        raise BackendTimeout(f"simulated burner: no answer to {what} within {timeout_s:g} s")

    def _pace(self) -> None:
        if not self._real_time:
            return
        wall0, index0 = self._wall_anchor
        due = wall0 + (self._index - index0) / self._fs
        delay = due - time.monotonic()
        if delay > 0:
            time.sleep(delay)

    def _render(self) -> tuple[np.ndarray, np.ndarray, DriveStatus]:
        """Drive samples from the guard and the per-sample frequency in cycles per sample."""
        f_before = self.guard.status().freq_hz
        drive_v = self.guard.render(self._block_n)
        status = self.guard.status()
        cps = np.full(self._block_n, status.freq_hz / self._fs)
        if status.freq_hz != f_before:
            cut = self.guard.last_switch_samples     # samples at the old frequency (at a zero or a peak)
            if cut is None:
                zeros = np.flatnonzero(drive_v == 0.0)  # the guard switches frequency at an exact zero
                cut = int(zeros[0]) + 1 if zeros.size else 0
            cps[:cut] = f_before / self._fs
        return drive_v, cps, status

    def _synthesise(self) -> tuple[np.ndarray, DriveStatus]:
        n, i0, fs = self._block_n, self._index, self._fs
        drive_v, cps, status = self._render()
        lines = self.guard.last_lines       # a multi-sine is involved: its analytic parts, line by line
        factor = self._faults.drive_factor(i0, n)  # output_gain: the chain delivers factor × the guard's samples
        delivered_v = drive_v if factor is None else drive_v * factor
        disconnected = active_mask(self._faults.disconnect, i0, n)
        state = self.model.drift_state(i0 / fs + 0.5 * n / fs)
        if lines is None:
            z = analytic_drive(delivered_v, self._prev_drive_v, cps)
            if disconnected is not None:
                z = np.where(disconnected, 0.0, z)  # the speaker no longer moves; the reference goes on

            def respond(flame: bool, oscillation: Oscillation | None = None) -> Forced:
                return self.model.forced(z, cps * fs, state, flame=flame, oscillation=oscillation)
        else:
            parts = [(f, (zk if factor is None else zk * factor)) for f, zk in lines]
            if disconnected is not None:
                parts = [(f, np.where(disconnected, 0.0, zk)) for f, zk in parts]

            def respond(flame: bool, oscillation: Oscillation | None = None) -> Forced:
                return self._superposed(parts, state, flame, oscillation)
        self._prev_drive_v = float(delivered_v[-1])
        if self._transients is not None:     # the modes' free decay the quasi-steady answer leaves out
            drive_parts = [(cps * fs, z)] if lines is None else [(np.full(n, f), zk) for f, zk in parts]
            ring = self._transients.correction(drive_parts)
            respond = _ringing(respond, ring)
        if self._faults.flame_out_index <= i0 or self.holder_plane_m is not None:  # out, or in the holder
            flame_mask = np.zeros(n, dtype=bool)
            forced = respond(False)
        else:
            hot = respond(True, self._oscillation(i0, n))
            known = len(self._faults.events)
            out_at = self._faults.flame_out_in_block(i0, n, hot.amplitude_ratio)
            for event in self._faults.events[known:]:
                LOG.warning("simulated burner: %s at t = %.3f s (true peak |u'|/u_mean = %.3g): %s",
                            event.name, event.time_s, event.amplitude_ratio, event.detail)
            flame_mask = np.arange(i0, i0 + n) < out_at
            if flame_mask.all():
                forced = hot
            else:
                forced = hot.where(flame_mask, respond(False))
        return self._channels_volts(delivered_v, forced, flame_mask, state), status

    def _superposed(self, parts: list[tuple[float, np.ndarray]], state, flame: bool,
                    oscillation: Oscillation | None) -> Forced:
        """The forced response to a multi-sine: the sum of each line's own forced response.

        Linear superposition, line by line through the true physics (``model.forced``), is
        right for the linear flame; the flame's clip acts on the summed heat release, so a
        saturating flame is limited in total (its intermodulation is not modelled). The
        amplitude envelope is bounded by the sum of the lines' envelopes (the blow-off check
        errs on the safe side)."""
        n = self._block_n
        n_s = len(self.model.sensor_positions_m)
        pressure = np.zeros((n_s, n), dtype=complex)
        heat = np.zeros(n)
        envelope = np.zeros(n)
        first = True
        for f_hz, zk in parts:
            if not np.any(zk):
                continue
            one = self.model.forced(zk, np.full(n, f_hz), state, flame=flame,
                                    oscillation=oscillation if first else None)
            first = False
            pressure += one.pressure_pa
            heat += one.heat_release_ratio
            envelope += one.amplitude_ratio
        if first and oscillation is not None and flame:
            one = self.model.forced(np.zeros(n, dtype=complex), np.zeros(n), state, flame=True,
                                    oscillation=oscillation)
            pressure, heat, envelope = one.pressure_pa, one.heat_release_ratio, one.amplitude_ratio
        sat = self.model.flame.saturation
        if flame and sat is not None:
            np.clip(heat, -sat, sat, out=heat)
        return Forced(pressure, heat, envelope)

    # ------------------------------------------------------------------ multi-sine drive
    def set_multisine(self, period_samples: int, harmonics, amplitudes_v, phases_rad) -> float:
        """Multi-sine drive through the ceiling guard (peak of the sum within the ceiling); returns the peak."""
        if self._stopped:
            raise DriverError("simulated burner: stopped; call start() before driving again")
        if not self._faults.answers(self._index + 1):
            self._hang(2.0, "set_multisine")
        return self.guard.request_multisine(period_samples, harmonics, amplitudes_v, phases_rad)

    def _oscillation(self, start_index: int, n_samples: int) -> Oscillation | None:
        """The self-excited oscillation over this block (None on a linearly stable rig)."""
        ex = self._excitation
        if ex is None:
            return None
        t = np.arange(start_index, start_index + n_samples) / self._fs
        u = ex.velocity_ratio(t)
        return Oscillation(u, np.real(ex.flame_linear * u), np.multiply.outer(ex.pressure_per_ratio, u))

    def _channels_volts(self, drive_v, forced, flame_mask, state) -> np.ndarray:
        """Every channel in volts; ``drive_v`` is what the drive chain delivers (the reference sees it).

        Pressure noise: the sensors' own (local turbulence, partly correlated) plus noise that
        travels as sound (``noise.SoundNoise``): inflow sound from the plenum and the flame's
        radiated noise, each heard through the network at the drive frequency with the right
        inter-sensor phase; the flame's share also reaches the light, and the flame answers the
        noise's velocity with its F, as it answers the forcing."""
        n, i0 = self._block_n, self._index
        rig, sc, m = self.rig, self.scenario, self.model
        ns = sc.noise
        level = np.where(flame_mask, 1.0, ns.flame_out_fraction)
        noise_level = level * ns.pressure_rms
        p_noise = self._p_noise.block(n) * noise_level * np.sqrt(1.0 - ns.acoustic_fraction)
        n_p = len(rig.pressure_sensors)
        data = self._rng.standard_normal((len(self._channels), n))  # electronic noise of every channel
        data *= ns.electronic_rms
        factor = m.sensor_factor[:, None]
        p = forced.pressure_pa
        data[:n_p] += factor.real * p.real - factor.imag * p.imag  # Re{S e^{iφ} p̂}
        data[:n_p] += m.true_sensitivity_v_pa[:, None] * p_noise
        if getattr(self, "_sound", None) is None:         # made on first use, with its own noise streams
            self._sound = SoundSources(n_p + 1, self._fs, ns.pressure_corner, ns.light_corner,
                                       np.random.default_rng([self.noise_seed, 5]))
        freq, lit = float(self.guard.status().freq_hz), bool(flame_mask.any())
        transfers = m.noise_transfers(freq, state, lit) if freq > 0 else None
        sound = self._sound.block(n, freq, transfers, ns.acoustic_fraction * ns.pressure_rms**2,
                                  ns.flame_noise_radiated * ns.light_flame_noise**2 if lit else 0.0)
        data[:n_p] += m.true_sensitivity_v_pa[:, None] * sound[:n_p] * level
        data[n_p] += self._light_volts(forced.heat_release_ratio, flame_mask, state, sound[n_p])
        if rig.drive.reference_channel:
            data[n_p + 1] += drive_v
        if self._hw_row is not None:
            data[self._hw_row] += self._hot_wire_volts(forced, lit, state)
        if self._faults.dropout_channel is not None:
            dead = active_mask(self._faults.dropout, i0, n)
            if dead is not None:
                row = self._channels.index(self._faults.dropout_channel)
                data[row, dead] = sc.faults.sensor_dropout.level
        return adc(data, m.input_range_v, sc.adc.bits)

    def _light_chain_factor(self) -> float:
        """Mean light at the burner's thermal power relative to that at the nominal power: the chain's
        L ∝ P (1 − β P/P_nom), scaled so that P_nom gives the scenario's mean_signal."""
        beta, ratio = self.scenario.light.nonlinearity, self.thermal_power_w / self.scenario.light.nominal_power
        return ratio * (1.0 - beta * ratio) / (1.0 - beta)

    def _hot_wire_volts(self, forced, lit: bool, state) -> np.ndarray:
        """The anemometer's bridge voltage E = √(A + B Uⁿ) with the scenario's true King's law, U the
        mean duct velocity + the acoustic velocity at the wire (and the convected wave) + the
        convective disturbance; a flow reversal reads as forward flow (|U|), as a single wire does."""
        hw, spec, n = self.rig.hot_wire, self.scenario.hot_wire, self._block_n
        a = hw.kings_a if spec.kings_a is None else spec.kings_a
        b = hw.kings_b if spec.kings_b is None else spec.kings_b
        k = hw.kings_n if spec.kings_n is None else spec.kings_n
        u = np.full(n, self.model.probe_mean_velocity_m_s(state, lit))
        if forced.probe_velocity_m_s is not None:
            u += forced.probe_velocity_m_s.real
        u += spec.convective_rms * self._hw_noise.block(n)[0]
        volts = np.sqrt(a + b * np.power(np.abs(u), k))
        return volts + spec.noise_rms * self._rng.standard_normal(n)

    def _light_volts(self, heat_release_ratio: np.ndarray, flame_mask: np.ndarray, state,
                     sound_q: np.ndarray | float = 0.0) -> np.ndarray:
        """The light channel; ``sound_q`` is the heat release the noise that travels as sound
        brings (the flame's radiated noise and its answer to the noise's velocity)."""
        sc, n = self.scenario, self._block_n
        optical = np.sqrt(1.0 - sc.noise.flame_noise_radiated)   # the rest of the flame noise is radiated
        flicker = sc.noise.light_flame_noise * optical * self._l_noise.block(n)[0] + sound_q
        mean_v = sc.light.mean_signal * state.flow_factor * self._light_chain_factor()
        signal_v = np.where(flame_mask, mean_v * (1.0 + heat_release_ratio + flicker), 0.0)
        if self.holder_plane_m is not None and self.lamp_position is not None:
            signal_v = signal_v + sc.light.lamp_signal * sc.light.spatial_response.get(self.lamp_position, 1.0)
        sat = active_mask(self._faults.light_saturation, self._index, n)
        if sat is not None:
            signal_v = np.where(sat, signal_v * sc.faults.light_saturation.gain_factor, signal_v)
        light = self.model.dark_offset_v + signal_v
        light += shot_noise(light, sc.noise.light_shot_coefficient, self._rng)
        return np.minimum(light, sc.light.rail)
