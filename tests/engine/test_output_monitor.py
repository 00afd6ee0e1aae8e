"""The output monitor: a drive chain that delivers more than the guard commands ends the sweep.

The ceiling guard limits what flamebode COMMANDS. What reaches the amplifier can be more: a
function generator set for a 50 ohm load drives a high-impedance input at twice the set
voltage (common practice: the generator halves its set amplitude into its own 50 ohm source
resistance only when the load is 50 ohm). The engine therefore compares the drive reference
channel, measured by the acquisition independently of the guard, with the command and with
the ceiling on every block. The simulated burner's ``output_gain`` fault makes the chain
deliver ``factor`` times the guard's samples while the guard's own status is unchanged.

Checked from outside too: the real CLI as a subprocess, the drive log of every block the
guard put out (FLAMEBODE_DRIVE_LOG) and the records the run stored.
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from app.engine.events import DriveChanged, FaultRaised, PointSettled
from app.storage.record import read_record
from drivers.drive_log import read_log
from drivers.simulated.burner import SimulatedBurner
from drivers.simulated.scenario import load_scenario

from engine_helpers import CONFIGS, make_engine, short_plan
from run_watch import short_plan_text

ROOT = Path(__file__).resolve().parents[2]
OUTPUT_FAULTS = {"output-above-command", "output-over-ceiling"}


def _scenario(factor: float, time_s: float, **speaker):
    demo = load_scenario(CONFIGS / "demo-scenario.toml")
    fault = demo.faults.output_gain.model_copy(update={"enabled": True, "time": time_s, "factor": factor})
    update = {"faults": demo.faults.model_copy(update={"output_gain": fault})}
    if speaker:
        update["loudspeaker"] = demo.loudspeaker.model_copy(update=speaker)
    return demo.model_copy(update=update)


def _reference_amplitude_v(volts: np.ndarray) -> float:
    return float(np.sqrt(2.0) * (volts - volts.mean()).std())


@pytest.mark.parametrize("time_s", [0.0, 2.5])
def test_twice_the_command_at_the_amplifier_ends_the_sweep_with_the_drive_at_zero(rig, time_s) -> None:
    sim = SimulatedBurner(rig, scenario=_scenario(2.0, time_s), seed=5)
    engine, rec = make_engine(rig, short_plan([200.0, 300.0, 450.0, 700.0], [0.05], record_s=1.0), sim)
    assert engine.run() == "fault"
    fatal = [f for f in rec.of(FaultRaised) if f.fatal]
    assert [f.name for f in fatal] == ["output-above-command"], [f.message for f in rec.of(FaultRaised)]
    assert "drv_ref" in fatal[0].message and "commanded" in fatal[0].message
    assert rec.of(DriveChanged)[-1].amplitude_v == 0.0
    # nothing forced at twice the command is kept as a good point
    for p in rec.of(PointSettled):
        assert "interrupted" in p.flags or p.wall_time_s < fatal[0].wall_time_s


def test_no_false_call_on_a_healthy_chain(rig) -> None:
    # the same sweep with the chain delivering what was commanded (factor 1) runs to the end
    sim = SimulatedBurner(rig, scenario=_scenario(1.0, 0.0), seed=5)
    engine, rec = make_engine(rig, short_plan([200.0, 300.0, 450.0, 700.0], [0.05], record_s=1.0), sim)
    assert engine.run() == "complete", [f.message for f in rec.of(FaultRaised)]
    assert not OUTPUT_FAULTS & {f.name for f in rec.of(FaultRaised)}


def test_a_weak_low_drive_doubling_is_still_seen(rig) -> None:
    # at 450 Hz the demo rig needs only ~20 mV for 5 %: twice that must not hide under a
    # fixed allowance of 2 % of the 2 V ceiling (40 mV); the allowance is the reference's noise
    sim = SimulatedBurner(rig, scenario=_scenario(2.0, 0.0), seed=6)
    engine, rec = make_engine(rig, short_plan([450.0], [0.05], record_s=1.0), sim)
    assert engine.run() == "fault"
    assert {f.name for f in rec.of(FaultRaised) if f.fatal} == {"output-above-command"}


def test_over_the_ceiling_at_the_amplifier_is_caught_from_the_reference(rig) -> None:
    # a weak speaker needs ~1.3 V of the 2 V ceiling; doubled mid-sweep the amplifier sees
    # ~2.6 V, above the ceiling the guard never let flamebode command
    sim = SimulatedBurner(rig, scenario=_scenario(2.0, 4.0, peak_velocity_per_volt=0.08), seed=7)
    engine, rec = make_engine(rig, short_plan([200.0, 250.0, 300.0, 350.0], [0.05], record_s=1.0), sim)
    assert engine.run() == "fault"
    fatal = [f for f in rec.of(FaultRaised) if f.fatal]
    assert len(fatal) == 1 and fatal[0].name in OUTPUT_FAULTS, [f.message for f in rec.of(FaultRaised)]
    assert rec.of(DriveChanged)[-1].amplitude_v == 0.0


@pytest.mark.slow
@pytest.mark.timeout(180)
def test_from_outside_the_process_the_log_and_the_records_agree(tmp_path: Path) -> None:
    scenario_text = (CONFIGS / "demo-scenario.toml").read_text()
    scenario_text = scenario_text.replace('rig = "demo-rig.toml"', f'rig = "{CONFIGS / "demo-rig.toml"}"')
    scenario_text += 'output_gain = { enabled = true, factor = 2.0, time = "4 s" }\n'
    scenario = tmp_path / "doubling.toml"
    scenario.write_text(scenario_text)
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("output monitor", 200, 600, 50, 1.0))
    log, run = tmp_path / "drive.csv", tmp_path / "run"
    env = {**os.environ, "FLAMEBODE_DRIVE_LOG": str(log)}
    proc = subprocess.run([sys.executable, "-m", "app.cli", "sweep", str(plan), "--rig", str(CONFIGS / "demo-rig.toml"),
                           "--scenario", str(scenario), "--out", str(run), "--fast", "--seed", "3"],
                          cwd=ROOT, env=env, capture_output=True, text=True, timeout=170)
    assert "Traceback" not in proc.stderr, proc.stderr
    assert proc.returncode != 0
    assert "output-above-command" in proc.stdout + proc.stderr
    # the guard's own log: never above the ceiling, and zero at the end (the ramp down ends
    # inside the last block); the doubling itself is invisible to the guard
    drive = read_log(log)
    assert drive["peak_v"].max() <= 2.0 + 1e-9 and drive["end_v"][-1] == 0.0
    # the stored records: every point kept as good was recorded before the doubling (its drive
    # reference agrees with its command); a record that saw the doubling is not accepted
    con = sqlite3.connect(run / "index.sqlite")
    rows = con.execute("SELECT record_file, decision, flags FROM attempts").fetchall()
    info = dict(con.execute("SELECT key, value FROM run_info").fetchall())
    con.close()
    assert info["last_finish_reason"] == "fault"
    assert rows, "no attempt stored before the doubling at 4 s"
    for record_file, decision, flags in rows:
        rec = read_record(run / record_file)
        ref = rec.data[list(rec.channels).index("drv_ref")]
        ratio = _reference_amplitude_v(ref) / rec.attrs["drive_v"]
        if decision == "accepted":
            assert ratio < 1.1, (record_file, ratio)
        else:
            assert "interrupted" in flags or ratio < 1.1, (record_file, flags, ratio)


def test_a_millivolt_ceiling_is_not_a_false_call_on_the_reference_noise(rig) -> None:
    # seen: with tuning.ceiling = "1 mV" the monitor aborted before the first point on the drive
    # reference's ~30 uV of noise at 0 V commanded (an allowance of 2 % of the ceiling = 20 uV)
    sim = SimulatedBurner(rig, scenario=_scenario(1.0, 0.0), seed=5)
    plan = short_plan([200.0], [0.05], record_s=0.3)
    plan = plan.model_copy(update={"tuning": plan.tuning.model_copy(update={"ceiling": 1e-3})})
    engine, rec = make_engine(rig, plan, sim)
    engine.run()
    assert not OUTPUT_FAULTS & {f.name for f in rec.of(FaultRaised)}, [f.message for f in rec.of(FaultRaised)]
