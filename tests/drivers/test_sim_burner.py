"""The simulated burner behaves like a rig: faults in the signals, determinism, ramps,
clipping, true sensor deviations, the voltage ceiling and named errors.

Phases (where checked) use x(t) = Re{x̂ e^{+iωt}}.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from app.errors import ConfigError
from app.rig import load_rig, read_toml
from drivers import protocols
from drivers.errors import BackendTimeout, CeilingExceeded
from drivers.simulated import SimulatedBurner, truth
from drivers.simulated.scenario import load_scenario, scenario_from_dict

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
DEMO = CONFIGS / "demo-scenario.toml"


@pytest.fixture(scope="module")
def rig():
    return load_rig(CONFIGS / "demo-rig.toml")


def scenario_with(**faults):
    data = read_toml(DEMO)
    data["faults"] = {**data.get("faults", {}), **faults}
    return scenario_from_dict(data, str(DEMO))


def run(sim, seconds, freq_hz=300.0, drive_v=0.4):
    sim.start()
    sim.set_drive(freq_hz, drive_v)
    n = int(round(seconds / sim.rig.acquisition.block_duration))
    blocks = [sim.read_block() for _ in range(n)]
    return np.concatenate([b.data for b in blocks], axis=1), blocks


def line_amplitude(x, freq_hz, fs):
    """Complex amplitude at freq_hz by least squares on cos/sin (Kay 1993, ch. 3)."""
    t = np.arange(x.size) / fs
    basis = np.column_stack([np.cos(2 * np.pi * freq_hz * t), -np.sin(2 * np.pi * freq_hz * t), np.ones_like(t)])
    c, *_ = np.linalg.lstsq(basis, x, rcond=None)
    return c[0] + 1j * c[1]  # x ≈ Re{X e^{+iωt}}


def test_protocols_and_identity(rig):
    sim = SimulatedBurner(rig, seed=3)
    for proto in (protocols.SineDrive, protocols.Acquirer, protocols.Identified, protocols.Stoppable,
                  protocols.EmergencyHalt, protocols.Paced):
        assert isinstance(sim, proto)
    assert SimulatedBurner.probe().available
    assert sim.channels == rig.input_channels
    assert sim.identity()["model"] == "simulated burner"
    assert sim.scenario.source_path == str(DEMO)


def test_deterministic_from_seed(rig):
    a, _ = run(SimulatedBurner(rig, seed=11), 0.5)
    b, _ = run(SimulatedBurner(rig, seed=11), 0.5)
    c, _ = run(SimulatedBurner(rig, seed=12), 0.5)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


def test_blocks_are_contiguous_and_ramp_shows_in_pressure_envelope(rig):
    sim = SimulatedBurner(rig, scenario_with(flame_out={"enabled": False}), seed=1)
    data, blocks = run(sim, 0.6, freq_hz=750.0, drive_v=2.0)  # ceiling: the ramp takes 0.3 s
    assert [b.start_index for b in blocks] == [i * blocks[0].n_samples for i in range(len(blocks))]
    fs, per = sim.sample_rate_hz, int(0.025 * sim.sample_rate_hz)  # 25 ms windows
    env = [np.ptp(data[0, k:k + per]) for k in range(0, int(0.25 * fs), per)]
    assert np.all(np.diff(env) > 0)  # rises window by window during the ramp (common practice)
    late = np.ptp(data[0, int(0.45 * fs):int(0.45 * fs) + per])
    assert late > env[-1]
    ref = data[sim.channels.index("drv_ref")]
    assert np.max(np.abs(ref)) <= rig.drive.ceiling + 2e-4  # the guard's ceiling holds (+ channel noise)


def test_drive_never_exceeds_ceiling(rig):
    sim = SimulatedBurner(rig, seed=2)
    sim.start()
    with pytest.raises(CeilingExceeded):
        sim.set_drive(300.0, rig.drive.ceiling * 1.01)
    sim.set_drive(300.0, rig.drive.ceiling)
    peak = 0.0
    for f in (300.0, 1200.0):
        sim.set_drive(f, rig.drive.ceiling)
        for _ in range(8):
            peak = max(peak, np.max(np.abs(sim.read_block().channel("drv_ref"))))
    assert peak <= rig.drive.ceiling + 2e-4  # plus the reference channel's own electronic noise
    assert sim.guard.clip_events == 0


def test_input_clipping_at_adc_range(rig):
    sim = SimulatedBurner(rig, seed=4)
    data, _ = run(sim, 0.6, freq_hz=100.0, drive_v=2.0)  # 100 Hz: far above 10 V at the sensors
    rng_v = rig.acquisition.input_range
    p = data[:4]
    assert p.max() == pytest.approx(rng_v) and p.min() == pytest.approx(-rng_v)
    assert np.mean(np.abs(p) >= rng_v - 1e-9) > 0.05  # flat tops, as an ADC clips


def test_true_sensitivities_deviate_from_nominal(rig):
    sim = SimulatedBurner(rig, seed=5)
    factors = truth.true_sensor_factors(sim)
    nominal = np.array([s.sensitivity for s in rig.pressure_sensors])
    true = np.abs(np.array(list(factors.values())))
    dev = true / nominal - 1.0
    assert np.all(np.abs(dev) < 0.15) and np.any(np.abs(dev) > 0.005)
    assert factors["p2"] == pytest.approx(14.2e-3 * 1.045 * np.exp(-1j * np.radians(0.6)))
    # And the signals carry them: sensor volts / true pressure = true factor (e^{+iωt}).
    data, _ = run(sim, 1.2, freq_hz=500.0, drive_v=0.2)
    fs, tail = sim.sample_rate_hz, data[:, int(0.7 * sim.sample_rate_hz):]
    drive = line_amplitude(tail[sim.channels.index("drv_ref")], 500.0, fs)  # the drive's own phase
    p_true = truth.true_pressure_per_volt(sim, 500.0, 0.2)
    for i, ch in enumerate(factors):
        meas = line_amplitude(tail[i], 500.0, fs)
        ratio = meas / (p_true[i] * drive) / factors[ch]
        assert abs(ratio - 1.0) < 0.02


def test_light_line_matches_true_ftf_at_small_amplitude(rig):
    # Consistency of the synthesis with the truth: I'/Ī at f = FTF · û_ref/ū_ref (e^{+iωt}).
    sim = SimulatedBurner(rig, seed=6)
    f, v = 400.0, 0.3
    data, _ = run(sim, 1.5, freq_hz=f, drive_v=v)
    tail = data[:, int(0.5 * sim.sample_rate_hz):]
    light = tail[sim.channels.index("pmt")]
    mean = light.mean() - sim.model.dark_offset_v
    q = line_amplitude(light, f, sim.sample_rate_hz) / mean
    drive = line_amplitude(tail[sim.channels.index("drv_ref")], f, sim.sample_rate_hz)
    u_ratio = truth.true_velocity_per_volt(sim, f, v) * drive / truth.true_mean_velocity_reference(sim)
    expected = truth.true_ftf(sim, f, abs(u_ratio)) * u_ratio
    assert abs(q / expected - 1.0) < 0.05


def test_flame_out_drops_light_to_dark_level(rig):
    sim = SimulatedBurner(rig, scenario_with(flame_out={"enabled": True, "time": "0.5 s"}), seed=7)
    data, _ = run(sim, 1.0)
    light = data[sim.channels.index("pmt")]
    fs = sim.sample_rate_hz
    assert light[: int(0.45 * fs)].mean() > 1.0
    dark = light[int(0.55 * fs):]
    assert dark.mean() == pytest.approx(sim.model.dark_offset_v, abs=2e-3)
    assert not sim.flame_on


def test_flame_blows_off_above_amplitude(rig):
    sim = SimulatedBurner(rig, seed=8)  # demo scenario: blow-off above |û|/ū = 0.9
    f = 100.0
    assert truth.true_amplitude_ratio(sim, f, rig.drive.ceiling) > 0.9
    run(sim, 0.6, freq_hz=f, drive_v=rig.drive.ceiling)
    assert not sim.flame_on


def test_sensor_dropout_reads_constant(rig):
    sim = SimulatedBurner(rig, scenario_with(sensor_dropout={"enabled": True, "channel": "p3", "time": "0.3 s"}),
                          seed=9)
    data, _ = run(sim, 0.6)
    p3 = data[sim.channels.index("p3")]
    fs = sim.sample_rate_hz
    assert np.std(p3[: int(0.3 * fs)]) > 0.05
    assert np.ptp(p3[int(0.3 * fs) + 1:]) == 0.0 and abs(p3[-1]) < 0.01


def test_light_saturation_sits_at_rail(rig):
    sim = SimulatedBurner(rig, scenario_with(light_saturation={"enabled": True, "time": "0.3 s"}), seed=10)
    data, _ = run(sim, 0.6)
    light = data[sim.channels.index("pmt"), int(0.35 * sim.sample_rate_hz):]
    assert np.median(light) == pytest.approx(sim.scenario.light.rail, abs=1e-3)
    assert light.max() <= sim.scenario.light.rail + 1e-3


def test_drive_disconnect_loses_forcing_line_but_reference_continues(rig):
    sim = SimulatedBurner(rig, scenario_with(drive_disconnect={"enabled": True, "time": "0.6 s"}), seed=11)
    f = 500.0
    data, _ = run(sim, 1.2, freq_hz=f, drive_v=0.3)
    fs = sim.sample_rate_hz
    before, after = data[:, int(0.35 * fs):int(0.6 * fs)], data[:, int(0.65 * fs):int(0.9 * fs)]
    ref = sim.channels.index("drv_ref")
    assert abs(line_amplitude(after[ref], f, fs)) == pytest.approx(0.3, rel=1e-3)
    for i in range(4):
        assert abs(line_amplitude(after[i], f, fs)) < 0.02 * abs(line_amplitude(before[i], f, fs))


def test_stops_answering_raises_backend_timeout(rig):
    sim = SimulatedBurner(rig, scenario_with(stops_answering={"enabled": True, "time": "0.3 s"}), seed=12)
    sim.start()
    sim.set_drive(300.0, 0.2)
    for _ in range(3):
        sim.read_block()
    with pytest.raises(BackendTimeout):
        sim.read_block(timeout_s=0.5)
    with pytest.raises(BackendTimeout):
        sim.set_drive(300.0, 0.1)


def test_stop_ramps_down_and_halt_zeroes(rig):
    sim = SimulatedBurner(rig, seed=13)
    run(sim, 0.5)
    sim.halt()
    assert np.all(sim.read_block().channel("drv_ref") == pytest.approx(0.0, abs=1e-3))
    sim.arm(rig.drive.ceiling)  # a halt latches until the next sweep arms the guard
    sim.set_drive(300.0, 0.4)
    sim.read_block()
    sim.stop()
    assert sim.drive_status().amplitude_v == 0.0
    sim.stop()  # idempotent


def test_drift_changes_the_true_response_slightly(rig):
    sim = SimulatedBurner(rig, seed=14)
    s0, s1 = sim.model.drift_state(0.0), sim.model.drift_state(200.0)
    assert s0 != s1
    r0 = sim.model.response(800.0, 0.1, s0).velocity_per_v
    r1 = sim.model.response(800.0, 0.1, s1).velocity_per_v
    assert 0.0 < abs(r1 / r0 - 1.0) < 0.1


def test_resonant_scenario_drive_needed_varies_over_twenty_fold():
    # Required drive for a fixed velocity amplitude across 100-2000 Hz (controller test rig).
    sc = CONFIGS / "resonant-scenario.toml"
    f = np.arange(100.0, 2001.0, 50.0)
    gain = np.array([abs(truth.true_velocity_per_volt(sc, x)) for x in f])
    assert gain.max() / gain.min() > 20.0


def test_scenario_errors_name_file_and_key(tmp_path, rig):
    bad = tmp_path / "bad.toml"
    bad.write_text('rig = "x.toml"\n[chamber]\nlenght = "1 m"\n[flame]\ntau = "3 kg"\n')
    with pytest.raises(ConfigError) as exc:
        load_scenario(bad)
    msg = str(exc.value)
    assert "bad.toml" in msg and "chamber.lenght" in msg and "flame.tau" in msg
    with pytest.raises(ConfigError, match="sensor_dropout.channel"):
        SimulatedBurner(rig, scenario_with(sensor_dropout={"enabled": True, "channel": "p9"}))


def test_real_time_pacing_and_hang(rig):
    # Paced: real time follows the wall clock; a hung back-end makes the caller wait its timeout.
    import time
    sim = SimulatedBurner(rig, scenario_with(stops_answering={"enabled": True, "time": "0.2 s"}), real_time=True)
    sim.start()
    t0 = time.monotonic()
    sim.read_block()
    sim.read_block()
    assert time.monotonic() - t0 >= 0.19
    t1 = time.monotonic()
    with pytest.raises(BackendTimeout):
        sim.read_block(timeout_s=0.2)
    assert time.monotonic() - t1 >= 0.19


def test_other_rig_gets_default_scenario(rig):
    from app.rig import rig_from_dict
    data = read_toml(CONFIGS / "demo-rig.toml")
    data["name"] = "another rig"
    other = rig_from_dict(data, "/tmp/another-rig.toml")
    sim = SimulatedBurner(other, seed=1)
    assert sim.scenario.source_path == ""
    sim.start()
    sim.set_drive(300.0, 0.1)
    assert sim.read_block().data.shape == (len(other.input_channels), sim.rig.acquisition.block_duration * sim.sample_rate_hz)
