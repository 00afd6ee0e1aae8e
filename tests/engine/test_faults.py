"""Faults found in the signals: each injected fault raises its named fault with its reaction.

Faults are injected in the simulated burner through its scenario [faults] table (timed in
simulated seconds). Fatal faults must leave the drive at zero (guard status and the drive
reference samples) and keep every point settled before them (common practice: a fault
ends the run safely without losing what was measured).
"""

from __future__ import annotations

import numpy as np
import pytest

from app.engine.events import FaultRaised, PointSettled, SweepFinished
from drivers.simulated.burner import SimulatedBurner
from drivers.simulated.scenario import load_scenario

from engine_helpers import CONFIGS, make_engine, short_plan

FREQS = [200.0, 300.0, 400.0, 500.0, 600.0]
ONSET_S = 3.0


def _with_fault(key: str, **values) -> object:
    demo = load_scenario(CONFIGS / "demo-scenario.toml")
    fault = getattr(demo.faults, key).model_copy(update={"enabled": True, **values})
    return demo.model_copy(update={"faults": demo.faults.model_copy(update={key: fault})})


FATAL_CASES = [
    ("flame_out", {"time": ONSET_S}, "flame-out"),
    ("sensor_dropout", {"time": ONSET_S, "channel": "p3"}, "sensor-dead"),
    ("light_saturation", {"time": ONSET_S}, "light-over-range"),
    ("drive_disconnect", {"time": ONSET_S}, "drive-not-answering"),
    ("stops_answering", {"time": ONSET_S}, "backend-timeout"),
]


@pytest.mark.parametrize(("key", "values", "expected"), FATAL_CASES, ids=[c[2] for c in FATAL_CASES])
def test_fatal_fault_ends_safely_and_keeps_settled_points(rig, key, values, expected) -> None:
    sim = SimulatedBurner(rig, scenario=_with_fault(key, **values), seed=21)
    engine, rec = make_engine(rig, short_plan(FREQS, [0.05], record_s=0.5), sim)
    reason = engine.run()
    faults = rec.of(FaultRaised)
    fatal = [f for f in faults if f.fatal]
    assert reason == "fault", [f.message for f in faults]
    assert [f.name for f in fatal] == [expected], [f.message for f in faults]
    assert fatal[0].action and fatal[0].advice and fatal[0].message
    settled = rec.of(PointSettled)
    assert 1 <= len(settled) < len(FREQS)                      # points before the fault are kept
    assert rec.of(SweepFinished)[-1].n_settled == len(settled)
    assert engine.state == "faulted"
    status = sim.drive_status()
    assert status.amplitude_v == 0.0 and status.target_amplitude_v == 0.0
    if expected != "backend-timeout":                           # a silent back-end delivers no block
        ref = sim.read_block().channel(rig.drive.reference_channel)
        assert np.abs(ref).max() < 1e-3


def test_target_unreachable_recorded_at_ceiling_and_flagged(rig) -> None:
    sim = SimulatedBurner(rig, seed=22)
    plan = short_plan([300.0, 400.0], [0.05], record_s=0.3, tuning={"ceiling": 0.02})
    engine, rec = make_engine(rig, plan, sim)
    assert engine.run() == "complete"
    names = [f.name for f in rec.of(FaultRaised)]
    assert names.count("target-unreachable") == 2
    for p in rec.of(PointSettled):
        assert "target-unreachable" in p.flags and p.drive_v == pytest.approx(0.02)
        assert len(p.tuning) <= 3     # found early, not after max_steps (8)


def test_target_unreachable_skip_policy(rig) -> None:
    sim = SimulatedBurner(rig, seed=23)
    plan = short_plan([300.0, 400.0], [0.05], record_s=0.3,
                      tuning={"ceiling": 0.02, "when_unreachable": "skip"})
    engine, rec = make_engine(rig, plan, sim)
    assert engine.run() == "complete"
    assert rec.of(PointSettled) == []
    assert [f.name for f in rec.of(FaultRaised)] == ["target-unreachable"] * 2


def test_pressure_limit_skips_the_point_and_continues(rig) -> None:
    sim = SimulatedBurner(rig, seed=24)
    plan = short_plan([300.0, 400.0], [0.05], record_s=0.3, faults={"pressure_max": "5 Pa"})
    engine, rec = make_engine(rig, plan, sim)
    assert engine.run() == "complete"
    faults = rec.of(FaultRaised)
    assert {f.name for f in faults} == {"pressure-too-high"} and not any(f.fatal for f in faults)
    assert rec.of(PointSettled) == []


def test_not_converged_and_noisy_and_drift_are_flags(rig) -> None:
    sim = SimulatedBurner(rig, seed=25)
    plan = short_plan([300.0], [0.05], record_s=0.3, tuning={"max_steps": 1, "tolerance": 0.001},
                      faults={"noisy_snr_db_min": 200.0, "light_drift_max": 1e-6})
    engine, rec = make_engine(rig, plan, sim)
    assert engine.run() == "complete"
    (point,) = rec.of(PointSettled)
    for name in ("tuning-not-converged", "sensor-noisy", "operating-point-drift"):
        assert name in point.flags
    assert not any(f.fatal for f in rec.of(FaultRaised))


def test_clipping_is_flagged(rig) -> None:
    sim = SimulatedBurner(rig, seed=26)
    plan = short_plan([300.0], [0.05], record_s=0.3, faults={"clip_fraction": 0.51})
    # a rig whose input range is tiny makes the pressures clip at 5 % forcing
    small = rig.model_copy(update={"acquisition": rig.acquisition.model_copy(update={"input_range": 0.2})})
    engine, rec = make_engine(small, plan, sim)
    engine.run()
    assert "input-clipping" in [f.name for f in rec.of(FaultRaised)]


def test_a_record_that_cannot_be_evaluated_flags_its_point_and_the_sweep_goes_on(rig) -> None:
    # Regression: a failed evaluation used to leave the engine in 'evaluating', from which the
    # next point's 'preparing' was refused and the whole sweep ended with an internal error.
    from app.core.response import evaluate_point
    from app.errors import RecordError

    calls = {"n": 0}

    def evaluate(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 1:
            raise RecordError("mean light is not above the dark offset")
        return evaluate_point(*args, **kwargs)

    sim = SimulatedBurner(rig, CONFIGS / "demo-scenario.toml", seed=4)
    engine, rec = make_engine(rig, short_plan([300.0, 400.0], [0.05], record_s=0.5), sim)
    engine._evaluate = evaluate
    assert engine.run() == "complete"
    assert [e.name for e in rec.of(FaultRaised)] == ["evaluation-failed"]
    assert [e.point_index for e in rec.of(PointSettled)] == [1]
    assert engine.error is None
    assert sim.drive_status().amplitude_v == 0.0
