"""Operator commands on a running sweep (simulated burner, fast): pause/resume, stop, abort, halt.

Common practice for rig control: a pause holds the drive at zero and re-tunes on resume;
stop finishes the point in progress; abort ramps the drive down at once and keeps what was
stored; an emergency halt zeroes the outputs without a ramp.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest

from app.engine import states as S
from app.engine.events import (BlockAcquired, DriveChanged, FaultRaised, PointSettled, StateChanged,
                               SweepFinished, TuningStep)
from drivers.errors import CeilingExceeded, DriveHalted
from drivers.simulated.burner import SimulatedBurner

from engine_helpers import make_engine, short_plan

FREQS = [200.0, 300.0, 400.0, 500.0]


def _when(rec, test, action):
    """Run ``action`` once, the first time ``test(event)`` is true (on the engine thread)."""
    done = []

    def hook(event):
        if not done and test(event):
            done.append(event)
            action()
    rec.hooks.append(hook)
    return done


def _entered(state: str, point: int):
    return lambda e: isinstance(e, StateChanged) and e.new == state and e.point_index == point


def _drive_ref(rig, events, stage):
    row = list(events[0].channels).index(rig.drive.reference_channel)
    return [np.abs(e.data[row]).max() for e in events if e.stage == stage]


def test_pause_holds_zero_and_resume_retunes(rig) -> None:
    sim = SimulatedBurner(rig, seed=5)
    engine, rec = make_engine(rig, short_plan(FREQS, [0.05], record_s=0.5), sim)
    paused = threading.Event()
    _when(rec, lambda e: isinstance(e, TuningStep) and e.point_index == 1 and e.step == 1, engine.pause)
    seen_status = []

    def on_pause(e):
        if isinstance(e, StateChanged) and e.new == S.PAUSED:
            seen_status.append(sim.drive_status())
            paused.set()
    rec.hooks.append(on_pause)
    engine.start()
    assert paused.wait(60)
    assert engine.state == S.PAUSED
    assert seen_status[0].amplitude_v == 0.0 and not seen_status[0].ramping   # drive held at zero
    engine.resume()
    assert engine.join(60) and engine.error is None
    assert engine.finish_reason == "complete"
    changes = [(e.old, e.new) for e in rec.of(StateChanged)]
    assert (S.PAUSED, S.TUNING) in changes
    steps = [e.step for e in rec.of(TuningStep) if e.point_index == 1]
    assert steps.count(1) == 2            # tuning of point 1 started again after the resume
    assert len(rec.of(PointSettled)) == len(FREQS)


def test_stop_finishes_the_current_point(rig) -> None:
    sim = SimulatedBurner(rig, seed=6)
    engine, rec = make_engine(rig, short_plan(FREQS, [0.05], record_s=0.5), sim)
    _when(rec, _entered(S.TUNING, 1), engine.stop)
    assert engine.run() == "stopped"
    assert [p.point_index for p in rec.of(PointSettled)] == [0, 1]
    assert engine.state == S.FINISHED
    assert sim.drive_status().amplitude_v == 0.0
    assert rec.of(SweepFinished)[-1].n_settled == 2


def test_abort_ramps_down_and_keeps_stored_points(rig) -> None:
    sim = SimulatedBurner(rig, seed=7)
    engine, rec = make_engine(rig, short_plan(FREQS, [0.05], record_s=1.0), sim)
    _when(rec, lambda e: isinstance(e, BlockAcquired) and e.stage == S.RECORDING and e.point_index == 2,
          engine.abort)
    assert engine.run() == "aborted"
    settled = rec.of(PointSettled)
    assert [p.point_index for p in settled] == [0, 1, 2]
    # the record cut short is kept as evidence, flagged so that it is never accepted
    assert "interrupted" not in settled[1].flags
    assert settled[2].flags[:2] == ("interrupted", "aborted")
    assert settled[2].record.shape[1] < rig.acquisition.sample_rate * 1.0
    assert engine.state == S.ABORTED
    assert rec.of(SweepFinished)[-1].n_settled == 2
    # the record in progress was cut at the next block, not finished
    rec_blocks = [e for e in rec.of(BlockAcquired) if e.point_index == 2 and e.stage == S.RECORDING]
    assert len(rec_blocks) == 1
    # ramped: blocks were read during winding-down while the drive reference fell to zero
    wind = _drive_ref(rig, rec.of(BlockAcquired), S.WINDING_DOWN)
    assert len(wind) >= 1 and wind[0] > 0.0
    assert sim.drive_status().amplitude_v == 0.0
    after = sim.read_block()
    assert np.abs(after.channel(rig.drive.reference_channel)).max() < 1e-3   # noise only


def test_halt_zeroes_at_once(rig) -> None:
    sim = SimulatedBurner(rig, seed=8)
    engine, rec = make_engine(rig, short_plan(FREQS, [0.05], record_s=1.0), sim)
    at_halt = []

    def do_halt():
        engine.halt()
        at_halt.append(sim.drive_status())
    _when(rec, lambda e: isinstance(e, BlockAcquired) and e.stage == S.RECORDING and e.point_index == 1, do_halt)
    assert engine.run() == "halted"
    assert at_halt[0].amplitude_v == 0.0 and at_halt[0].target_amplitude_v == 0.0   # no ramp
    assert engine.state == S.HALTED
    assert S.WINDING_DOWN not in [e.new for e in rec.of(StateChanged)]
    assert not any(e.stage == S.WINDING_DOWN for e in rec.of(BlockAcquired))
    settled = rec.of(PointSettled)
    assert [p.point_index for p in settled] == [0, 1]
    assert settled[1].flags[:2] == ("interrupted", "halted")
    assert not any(e.name for e in rec.of(FaultRaised))      # a halt is not a fault
    assert rec.of(SweepFinished)[-1].detail == "emergency halt"
    after = sim.read_block()
    assert np.abs(after.channel(rig.drive.reference_channel)).max() < 1e-3
    # no drive request after the halt
    drives = rec.of(DriveChanged)
    assert all(d.amplitude_v == 0.0 for d in drives[drives.index(next(d for d in drives[::-1] if d.amplitude_v > 0)) + 1:])


def test_drive_never_above_the_plan_ceiling(rig) -> None:
    sim = SimulatedBurner(rig, seed=9)
    plan = short_plan([600.0, 700.0], [0.05], record_s=0.3, tuning={"ceiling": 0.5})
    engine, rec = make_engine(rig, plan, sim)
    engine.run()
    assert max(d.amplitude_v for d in rec.of(DriveChanged)) <= 0.5
    assert max(sim.guard.clip_events, 0) == 0
    # the hardware layer itself holds the plan's lower ceiling, not only the controller
    assert sim.guard.ceiling_v == 0.5 and rig.drive.ceiling == 2.0
    with pytest.raises(CeilingExceeded, match="0.5 V"):
        sim.set_drive(600.0, 0.6)


def test_a_halted_back_end_refuses_drive_until_the_next_sweep_arms_it(rig) -> None:
    # before: the simulated burner and the sound card took new drive requests after a halt, so an
    # engine thread still running could bring the drive back
    sim = SimulatedBurner(rig, seed=10)
    engine, rec = make_engine(rig, short_plan(FREQS, [0.05], record_s=0.5), sim)
    _when(rec, _entered(S.TUNING, 1), engine.halt)
    assert engine.run() == "halted"
    with pytest.raises(DriveHalted):
        sim.set_drive(300.0, 0.1)
    engine2, rec2 = make_engine(rig, short_plan([300.0], [0.05], record_s=0.3), sim)
    assert engine2.run() == "complete"          # a new sweep re-arms it
    assert len(rec2.of(PointSettled)) == 1
