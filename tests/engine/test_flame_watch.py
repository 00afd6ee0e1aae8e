"""The flame watch: no flame at the start is never missed; a flame-out in a record ends the sweep at once.

Common practice at a burner rig: forcing an unlit burner is pointless and forcing a burner
that has just blown off (with fuel still flowing) is dangerous, so the light signal is
watched all the time. Checks here run the sweep engine on the simulated burner, whose
true dark offset is 21 mV (configs/demo-scenario.toml) while the rig file states 18 mV.
"""

from __future__ import annotations

import pytest

from app.engine import states as S
from app.engine.events import BlockAcquired, DriveChanged, FaultRaised, PointSettled, TuningStep
from drivers.simulated.burner import SimulatedBurner
from drivers.simulated.scenario import load_scenario

from engine_helpers import CONFIGS, make_engine, short_plan

TRUE_DARK_V = 0.021


def _scenario(**flame_out):
    demo = load_scenario(CONFIGS / "demo-scenario.toml")
    assert demo.light.dark_offset == pytest.approx(TRUE_DARK_V)
    fault = demo.faults.flame_out.model_copy(update={"amplitude": None, **flame_out})
    return demo.model_copy(update={"faults": demo.faults.model_copy(update={"flame_out": fault})})


def _rig_with_dark(rig, dark_v: float):
    return rig.model_copy(update={"light": rig.light.model_copy(update={"dark_offset": dark_v})})


@pytest.mark.parametrize("error_v", [-0.003, 0.003])
def test_no_flame_at_the_start_is_found_with_the_dark_offset_mis_stated(rig, error_v) -> None:
    # before: a dark offset stated 3 mV low made an unlit burner look lit (3 mV above "dark",
    # against a margin of 0.2 mV) and the whole sweep ran on it
    stated = _rig_with_dark(rig, TRUE_DARK_V + error_v)
    sim = SimulatedBurner(stated, scenario=_scenario(enabled=True, time=0.0), seed=31)
    engine, rec = make_engine(stated, short_plan([200.0, 300.0], [0.05], record_s=0.3), sim)
    assert engine.run() == "fault"
    [fault] = [f for f in rec.of(FaultRaised) if f.fatal]
    assert fault.name == "flame-out" and "no flame at the start" in fault.message
    assert not rec.of(TuningStep) and not rec.of(PointSettled)
    assert all(d.amplitude_v == 0.0 for d in rec.of(DriveChanged))     # never forced


@pytest.mark.parametrize("error_v", [-0.003, 0.003])
def test_a_lit_flame_is_accepted_with_the_dark_offset_mis_stated(rig, error_v) -> None:
    stated = _rig_with_dark(rig, TRUE_DARK_V + error_v)
    sim = SimulatedBurner(stated, scenario=_scenario(enabled=False), seed=32)
    engine, rec = make_engine(stated, short_plan([200.0, 300.0], [0.05], record_s=0.3), sim)
    assert engine.run() == "complete", [f.message for f in rec.of(FaultRaised)]
    assert len(rec.of(PointSettled)) == 2


def _record_start_s(rig, plan, seed: int) -> float:
    """Simulated time at which point 2's record starts (the same seed gives the same sweep)."""
    sim = SimulatedBurner(rig, scenario=_scenario(enabled=False), seed=seed)
    engine, rec = make_engine(rig, plan, sim)
    starts = []
    rec.hooks.append(lambda e: starts.append(sim.time_s) if isinstance(e, BlockAcquired)
                     and e.stage == S.RECORDING and e.point_index == 1 and not starts else None)
    engine.run()
    return starts[0] - rig.acquisition.block_duration


def test_flame_out_during_a_record_ends_the_sweep_within_a_block_and_keeps_the_evidence(rig) -> None:
    plan = short_plan([200.0, 300.0, 400.0], [0.05], record_s=2.0)
    onset_s = _record_start_s(rig, plan, seed=33) + 0.75          # mid-record of point 2
    sim = SimulatedBurner(rig, scenario=_scenario(enabled=True, time=onset_s), seed=33)
    engine, rec = make_engine(rig, plan, sim)
    assert engine.run() == "fault"
    fatal = [f for f in rec.of(FaultRaised) if f.fatal]
    assert [f.name for f in fatal] == ["flame-out"]
    # caught within a block of the flame going out, not at the end of the 2 s record
    blocks = [e for e in rec.of(BlockAcquired) if e.stage == S.RECORDING and e.point_index == 1]
    onset_block = round(onset_s / rig.acquisition.block_duration)
    assert blocks[-1].start_index / rig.acquisition.sample_rate <= (onset_block + 1) * rig.acquisition.block_duration
    # the record is kept as evidence, flagged so that it is never accepted
    settled = rec.of(PointSettled)
    assert [p.point_index for p in settled] == [0, 1]
    assert settled[1].flags[:2] == ("interrupted", "flame-out")
    # no further drive: the next point never started, the output is at zero
    assert not [t for t in rec.of(TuningStep) if t.point_index == 2]
    drives = rec.of(DriveChanged)
    last_on = max(i for i, d in enumerate(drives) if d.amplitude_v > 0)
    assert drives[last_on].wall_time_s <= fatal[0].wall_time_s
    assert sim.drive_status().amplitude_v == 0.0
    assert "drive brought to zero" in fatal[0].action


def test_a_counted_gap_is_not_taken_for_a_flame_out_but_the_next_dark_block_is(rig) -> None:
    # a sound card's overflow is zero-filled: the light reads 0 V for that block; the flame watch
    # must wait for a whole block (common practice: a counted drop-out is "re-measure", not a fault)
    import numpy as np

    from app.engine.faults import SignalChecks

    checks = SignalChecks(rig, short_plan([200.0], [0.05]))
    checks.baseline_light_v = 1.0
    channels = tuple(s.channel for s in rig.pressure_sensors) + (rig.light.channel,)
    zeros = np.zeros((len(channels), 256))
    zeros[:-1] = 0.01 * np.random.default_rng(1).standard_normal((len(channels) - 1, 256))
    assert not [f for f in checks.check_block(zeros, channels, "test", gap=True) if f.name == "flame-out"]
    assert [f for f in checks.check_block(zeros, channels, "test", gap=False) if f.name == "flame-out"]
