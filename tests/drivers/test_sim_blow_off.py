"""Rig-side blow-off of the simulated flame: flow reversal and self-excitation.

A premixed flame cannot stay anchored when the flow at the burner exit reverses during
part of each cycle (common practice), i.e. when the true peak |û_ref|/ū_ref reaches 1.
The simulator blows its flame off there whatever the scenario's optional flame_out fault
says, records a "blow-off" rig event and logs a warning. Amplitudes here are PEAK values;
phases use x(t) = Re{x̂ e^{+iωt}}.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pytest

from app.rig import load_rig, read_toml
from drivers.simulated import SimulatedBurner, truth
from drivers.simulated.scenario import scenario_from_dict

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
DEMO = CONFIGS / "demo-scenario.toml"


@pytest.fixture(scope="module")
def rig():
    return load_rig(CONFIGS / "demo-rig.toml")


def demo_with(**sections):
    data = read_toml(DEMO)
    for name, values in sections.items():
        data[name] = {**data.get(name, {}), **values}
    return scenario_from_dict(data, str(DEMO))


def no_flame_out():
    return demo_with(faults={"flame_out": {"enabled": False}})


def runaway_point(rig, scenario):
    """The reproduction: drive 400–600 Hz at up to the ceiling; the true forced amplitude
    ratio (the model's saturated fixed point) passes flow reversal somewhere."""
    freqs = np.arange(400.0, 601.0, 20.0)
    volts = (0.5, 1.0, rig.drive.ceiling)
    table = np.array([[truth.true_amplitude_ratio(scenario, f, v) for v in volts] for f in freqs])
    i, j = np.unravel_index(np.argmax(table), table.shape)
    return float(freqs[i]), float(volts[j]), float(table[i, j])


def light_and_blocks(sim, seconds, freq_hz, drive_v):
    sim.start()
    if drive_v:
        sim.set_drive(freq_hz, drive_v)
    n = int(round(seconds / sim.rig.acquisition.block_duration))
    blocks = [sim.read_block() for _ in range(n)]
    return np.concatenate([b.data for b in blocks], axis=1)


def test_forced_flow_reversal_blows_the_flame_off_without_the_scenario_fault(rig, caplog):
    scenario = no_flame_out()
    freq, volts, peak = runaway_point(rig, scenario)
    assert peak >= 1.0  # the runaway: a steady forced response with the flow reversing
    sim = SimulatedBurner(rig, scenario, seed=3)
    with caplog.at_level(logging.WARNING, logger="drivers.simulated"):
        data = light_and_blocks(sim, 1.0, freq, volts)
    assert not sim.flame_on
    (event,) = sim.rig_events
    assert event.name == "blow-off"
    assert 1.0 <= event.amplitude_ratio < 1.02  # at the first sample past reversal (slow ramp)
    assert event.time_s == pytest.approx(event.sample_index / sim.sample_rate_hz)
    assert event.time_s < rig.drive.ramp_time + 0.05  # during the guard's ramp up
    assert any("blow-off" in r.getMessage() for r in caplog.records)
    fs = sim.sample_rate_hz
    light = data[sim.channels.index("pmt")]
    k = event.sample_index
    assert light[: int(0.5 * k)].mean() > 1.0
    assert light[k + int(0.01 * fs):].mean() == pytest.approx(sim.model.dark_offset_v, abs=2e-3)
    # it stays out, and the acoustics have lost the flame: at a drive low enough for the ADC
    # the sensors see the flameless network
    low_v = 0.05
    sim.set_drive(freq, low_v)
    while sim.drive_status().ramping:
        sim.read_block()
    sim.read_block()
    tail = np.concatenate([sim.read_block().data for _ in range(5)], axis=1)
    assert not sim.flame_on and len(sim.rig_events) == 1
    cold = sim.model.response(freq, low_v, sim.model.drift_state(sim.time_s), flame=False)
    hot = sim.model.response(freq, low_v, sim.model.drift_state(sim.time_s), flame=True)
    t = np.arange(tail.shape[1]) / fs
    basis = np.column_stack([np.cos(2 * np.pi * freq * t), np.sin(2 * np.pi * freq * t), np.ones_like(t)])
    for i, factor in enumerate(sim.model.sensor_factor):
        c, *_ = np.linalg.lstsq(basis, tail[i], rcond=None)
        measured = np.hypot(c[0], c[1])
        assert measured == pytest.approx(abs(factor * cold.pressure_per_v[i]) * low_v, rel=0.03)
        assert measured != pytest.approx(abs(factor * hot.pressure_per_v[i]) * low_v, rel=0.1)


def test_the_scenario_flame_out_below_reversal_comes_first(rig):
    # The demo's own flame_out fault (amplitude 0.9) acts before the flow reverses.
    sim = SimulatedBurner(rig, seed=4)
    freq, volts, _ = runaway_point(rig, sim.scenario)
    light_and_blocks(sim, 1.0, freq, volts)
    (event,) = sim.rig_events
    assert event.name == "flame-out" and 0.9 < event.amplitude_ratio < 1.0


def test_no_event_below_reversal(rig):
    scenario = no_flame_out()
    sim = SimulatedBurner(rig, scenario, seed=5)
    freq, _, _ = runaway_point(rig, scenario)
    assert truth.true_amplitude_ratio(sim, freq, 0.1) < 0.5
    light_and_blocks(sim, 0.6, freq, 0.1)
    assert sim.flame_on and sim.rig_events == ()


def test_self_excited_rig_blows_off_after_its_oscillation_grows(rig, caplog):
    # Without its burner loss the demo is linearly unstable (test_sim_stability); its limit
    # cycle lies beyond flow reversal, so the flame blows off with no drive at all.
    scenario = demo_with(burner={"loss_coefficient": 0.0}, faults={"flame_out": {"enabled": False}})
    with caplog.at_level(logging.WARNING, logger="drivers.simulated"):
        sim = SimulatedBurner(rig, scenario, seed=6)
        data = light_and_blocks(sim, 0.5, 0.0, 0.0)
    assert sim.warnings and "linearly unstable" in sim.warnings[0]
    assert any("linearly unstable" in r.getMessage() for r in caplog.records)
    lc = sim.stability.limit_cycle
    worst = max(sim.stability.unstable_modes, key=lambda m: m.growth_rate_per_s)
    (event,) = sim.rig_events
    assert event.name == "blow-off" and not sim.flame_on
    # Stuart–Landau growth from the lighting amplitude (selfexcited; derived)
    assert event.time_s == pytest.approx(lc.time_to_reversal_s(worst.growth_rate_per_s), abs=2.0 / sim.sample_rate_hz)
    # before the blow-off the pressures carry the growing mode, at its frequency
    fs, k = sim.sample_rate_hz, event.sample_index
    p1 = data[0, k - int(0.02 * fs):k]
    spec = np.abs(np.fft.rfft(p1 * np.hanning(p1.size), 64 * p1.size))
    peak_hz = np.fft.rfftfreq(64 * p1.size, 1 / fs)[np.argmax(spec)]
    assert peak_hz == pytest.approx(lc.freq_hz, rel=0.05)


def test_self_excited_rig_below_reversal_keeps_burning_with_its_limit_cycle(rig):
    # Same unstable rig, but a flame that saturates early: the limit cycle stays below
    # reversal and shows in the signals with no drive (the engine sees a loud rig).
    scenario = demo_with(burner={"loss_coefficient": 0.0}, flame={"saturation": 0.05},
                         faults={"flame_out": {"enabled": False}})
    sim = SimulatedBurner(rig, scenario, seed=7)
    lc = sim.stability.limit_cycle
    assert not lc.flow_reversal
    data = light_and_blocks(sim, 1.5, 0.0, 0.0)
    assert sim.flame_on and sim.rig_events == ()
    fs, ex = sim.sample_rate_hz, sim._excitation
    tail = data[:, int(1.0 * fs):]
    t = np.arange(tail.shape[1]) / fs
    basis = np.column_stack([np.cos(2 * np.pi * lc.freq_hz * t), np.sin(2 * np.pi * lc.freq_hz * t), np.ones_like(t)])
    for i, factor in enumerate(sim.model.sensor_factor):
        c, *_ = np.linalg.lstsq(basis, tail[i], rcond=None)
        expected = abs(factor * ex.pressure_per_ratio[i]) * lc.amplitude_ratio
        assert np.hypot(c[0], c[1]) == pytest.approx(expected, rel=0.05)
    light = tail[sim.channels.index("pmt")]
    c, *_ = np.linalg.lstsq(basis, light, rcond=None)
    assert np.hypot(c[0], c[1]) > 0.02 * (light.mean() - sim.model.dark_offset_v)  # the flame oscillates
