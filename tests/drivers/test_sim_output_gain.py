"""The output_gain scenario fault: the drive chain delivers a multiple of the command.

Example of the real fault (common practice): a function generator set for a 50 Ω load
drives a high-impedance amplifier input and delivers twice the commanded voltage. The
speaker and the drive reference channel carry factor × the guard's samples; the guard's
own status (and its drive log) do not change, so only an independent measurement (the
reference channel, the pressures) can show it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from app.errors import ConfigError
from app.rig import load_rig, read_toml
from drivers.simulated import SimulatedBurner
from drivers.simulated.scenario import load_scenario, scenario_from_dict

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
DEMO = CONFIGS / "demo-scenario.toml"


@pytest.fixture(scope="module")
def rig():
    return load_rig(CONFIGS / "demo-rig.toml")


def with_output_gain(**entry):
    data = read_toml(DEMO)
    data["faults"] = {**data["faults"], "output_gain": entry}
    return scenario_from_dict(data, str(DEMO))


def line(x, freq_hz, fs):
    """Peak amplitude of the line at freq_hz by least squares (Kay 1993, ch. 3)."""
    t = np.arange(x.size) / fs
    basis = np.column_stack([np.cos(2 * np.pi * freq_hz * t), np.sin(2 * np.pi * freq_hz * t), np.ones_like(t)])
    c, *_ = np.linalg.lstsq(basis, x, rcond=None)
    return float(np.hypot(c[0], c[1]))


@pytest.mark.parametrize("factor", [2.0, 0.5])
def test_reference_and_speaker_carry_factor_times_the_command(rig, factor):
    sim = SimulatedBurner(rig, with_output_gain(enabled=True, factor=factor, time="0.8 s"), seed=21)
    f, v = 300.0, 0.2  # speaker compression (1 + (V/V_c)²)^-1/2 changes by < 0.2 %; the flame is not clipped
    sim.start()
    sim.set_drive(f, v)
    data = np.concatenate([sim.read_block().data for _ in range(14)], axis=1)
    fs = sim.sample_rate_hz
    before, after = data[:, int(0.45 * fs):int(0.8 * fs)], data[:, int(0.95 * fs):]
    ref = sim.channels.index("drv_ref")
    assert line(before[ref], f, fs) == pytest.approx(v, rel=1e-3)
    assert line(after[ref], f, fs) == pytest.approx(factor * v, rel=1e-3)
    for i in range(len(rig.pressure_sensors)):  # the speaker moves factor × as much (linear regime)
        assert line(after[i], f, fs) / line(before[i], f, fs) == pytest.approx(factor, rel=0.02)
    # the guard knows nothing of it
    assert sim.drive_status().amplitude_v == pytest.approx(v)
    assert sim.guard.render(64).max() <= v + 1e-12


def test_disabled_or_later_fault_does_nothing(rig):
    sim = SimulatedBurner(rig, with_output_gain(enabled=False, factor=3.0, time="0 s"), seed=22)
    sim.start()
    sim.set_drive(300.0, 0.1)
    data = np.concatenate([sim.read_block().data for _ in range(6)], axis=1)
    ref = data[sim.channels.index("drv_ref"), int(0.4 * sim.sample_rate_hz):]
    assert line(ref, 300.0, sim.sample_rate_hz) == pytest.approx(0.1, rel=1e-3)


@pytest.mark.parametrize("entry, key", [
    ('{ enabled = true, factor = -2.0 }', "faults.output_gain.factor"),
    ('{ enabled = true, facter = 2.0 }', "faults.output_gain.facter"),
    ('{ enabled = true, time = "2 kg" }', "faults.output_gain.time"),
    ('"twice"', "faults.output_gain"),
])
def test_malformed_entry_names_the_key_and_the_file(tmp_path, entry, key):
    bad = tmp_path / "gain-scenario.toml"
    bad.write_text(f'rig = "{CONFIGS / "demo-rig.toml"}"\n[faults]\noutput_gain = {entry}\n')
    with pytest.raises(ConfigError) as exc:
        load_scenario(bad)
    msg = str(exc.value)
    assert "gain-scenario.toml" in msg and key in msg
