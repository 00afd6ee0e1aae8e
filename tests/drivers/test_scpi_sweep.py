"""Composite back-ends: a short headless sweep with the SCPI generator (loopback emulator,
pyvisa-py) driving and the simulated burner recording, by the engine and by the CLI; the
recorder follows the instrument's read-back settings; ``flamebode backends`` lists every
back-end with its availability; the generator + DAQ-card composite on the stand-in card.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

from app.cli import main
from app.engine.events import EventBus, PointSettled, SweepFinished
from app.engine.sweep import SweepEngine
from app.plan import plan_from_dict
from app.rig import load_rig
from drivers import protocols
from drivers.scpi_recorder import Composite, ScpiDaqmx, ScpiSimulated
from scpi_emulator import ScpiEmulator
from test_daqmx_backend import CHANNELS
from test_daqmx_standin import StandInCard

DEMO = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"
FREQS = [160.0, 240.0, 330.0]
PLAN = f"""
name = "scpi loopback check"
[frequencies]
values = {FREQS!r}
[amplitude]
values = [0.05]
basis = "peak"
[timing]
record = "0.5 s"
settle = "0.3 s"
tuning_window = "0.3 s"
tuning_discard = "0.05 s"
[tuning]
tolerance = 0.05
max_steps = 8
"""


def rig_file(tmp_path: Path, emu: ScpiEmulator, extra: str = "") -> Path:
    path = tmp_path / "rig.toml"
    path.write_text(DEMO.read_text(encoding="utf-8") + f"""
[hardware.scpi]
resource = "{emu.resource}"
timeout = "2 s"
ramp_step = "20 ms"
{extra}""", encoding="utf-8")
    return path


@pytest.fixture
def emu():
    with ScpiEmulator() as e:
        yield e


def test_engine_sweep_with_scpi_drive_and_simulated_recorder(tmp_path, emu):
    rig = load_rig(rig_file(tmp_path, emu))
    plan = plan_from_dict(tomllib_loads(PLAN), str(tmp_path / "plan.toml"))
    dev = ScpiSimulated(rig, seed=4)
    for proto in (protocols.SineDrive, protocols.Acquirer, protocols.Identified, protocols.Stoppable,
                  protocols.EmergencyHalt):
        assert isinstance(dev, proto)
    events = []
    bus = EventBus()
    bus.subscribe(events.append)
    engine = SweepEngine(plan, rig, dev, bus, backend_name="scpi+simulated")
    try:
        assert engine.run() == "complete"
    finally:
        dev.stop()
    settled = [e for e in events if isinstance(e, PointSettled)]
    assert [e.freq_hz for e in settled] == FREQS
    for e in settled:   # the recorder's reference channel carries the drive the instrument was set to
        ref = e.record[e.channels.index(rig.drive.reference_channel)]
        assert np.max(np.abs(ref)) == pytest.approx(e.drive_v, rel=0.05)
        assert abs(e.result.velocity.amplitude_ratio / 0.05 - 1.0) <= 0.1
        assert e.identity["drive.model"] == "SCPI test generator"
    assert [float(m.split()[1]) for m in emu.commands("SOUR:FREQ ")] == FREQS
    assert emu.state.output is False
    assert [e for e in events if isinstance(e, SweepFinished)][0].n_settled == 3


def tomllib_loads(text: str) -> dict:
    import tomllib

    return tomllib.loads(text)


def test_recorder_follows_what_the_instrument_really_outputs(tmp_path):
    with ScpiEmulator(resolution_vpp=0.01) as coarse:          # 10 mVpp steps
        rig = load_rig(rig_file(tmp_path, coarse))
        dev = ScpiSimulated(rig, seed=4)
        try:
            dev.start()
            dev.set_drive(210.0, 0.1234)
            while dev.drive_status().ramping:
                dev.read_block()
            sim = dev.acquirer.drive_status()
            assert sim.freq_hz == 210.0
            assert sim.target_amplitude_v == pytest.approx(0.125, abs=1e-12)   # 0.25 Vpp, not 0.2468
            assert dev.drive_status().amplitude_v == 0.1234                   # what was asked
        finally:
            dev.stop()


def test_cli_headless_sweep_through_the_emulator(tmp_path, emu, capsys):
    rig = rig_file(tmp_path, emu)
    plan = tmp_path / "plan.toml"
    plan.write_text(PLAN, encoding="utf-8")
    code = main(["sweep", str(plan), "--rig", str(rig), "--backend", "scpi+simulated", "--out",
                 str(tmp_path / "run")])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "complete" in out and "3 of 3 points" in out
    assert emu.state.output is False and emu.commands("OUTP ON")


def test_backends_lists_availability_and_reasons(capsys):
    assert main(["backends"]) == 0
    lines = {line.split()[0]: line for line in capsys.readouterr().out.splitlines()[1:] if line.strip()}
    assert "available" in lines["scpi+simulated"].split()
    assert "unavailable" in lines["daqmx"].split() or "available" in lines["daqmx"].split()
    if "unavailable" in lines["daqmx"].split():
        assert "NI-DAQmx runtime not installed (libnidaqmx not found)" in lines["daqmx"]
        assert "DAQ card: NI-DAQmx runtime not installed" in lines["scpi+daqmx"]


def test_generator_drives_and_daq_card_records(tmp_path, emu, monkeypatch):
    wiring = {f"Dev1/ai{i}": (0.0, 0, 0.01 * i) for i in range(6)}
    card = StandInCard(wiring)
    card.install(monkeypatch)
    table = "\n".join(f'{k} = "{v}"' for k, v in CHANNELS.items() if k != "spk")
    rig = load_rig(rig_file(tmp_path, emu, f"[hardware.daqmx]\nchannels = {{ {', '.join(table.splitlines())} }}\n"))
    dev = ScpiDaqmx(rig)
    assert isinstance(dev, Composite)
    try:
        dev.start()
        dev.set_drive(180.0, 0.3)
        block = dev.read_block(timeout_s=10.0)
        assert block.data.shape == (6, 2560) and dev.sample_rate_hz == 25600.0
        assert block.data[5] == pytest.approx(0.05, abs=0.01)
        assert emu.state.output is True and emu.state.peak_v == pytest.approx(0.3)
        assert dev.identity()["recorder.drive_output"] == "none (input only)"
    finally:
        dev.stop()
    assert emu.state.output is False
    assert [t.name for t in card.tasks] == ["flamebode-input"]
    card.assert_clean()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(pytest.main([__file__, "-q"]))
