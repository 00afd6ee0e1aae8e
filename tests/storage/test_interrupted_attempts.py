"""A record cut short is kept as evidence and never accepted, by the writer, the user or resume.

Common practice: a measurement interrupted by an emergency stop is not a measurement; it
is kept for the log but never enters a result. Here a sweep on the simulated burner is
halted in the middle of a record (in process, through the real run writer), then the run
is read back, an accept is attempted through the command line, and resume measures the
point again.
"""

from __future__ import annotations

import json
from pathlib import Path

from app.cli import main
from app.engine import states as S
from app.engine.events import BlockAcquired, EventBus
from app.engine.sweep import SweepEngine
from app.plan import plan_from_dict
from app.rig import load_rig
from app.storage.reader import open_run
from app.storage.writer import RunWriter
from drivers.simulated.burner import SimulatedBurner
from run_watch import short_plan_text

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "demo-rig.toml"


def _halted_run(tmp_path: Path) -> Path:
    plan_path = tmp_path / "plan.toml"
    plan_path.write_text(short_plan_text("interrupt", 200, 500, 100, 1.0))
    rig = load_rig(RIG)
    from app.rig import read_toml
    plan = plan_from_dict(read_toml(plan_path), str(plan_path))
    run_dir = tmp_path / "run"
    bus = EventBus()
    writer = RunWriter(run_dir, RIG, plan_path, bus, options={"backend": "simulated", "fast": "1"}).start()
    bus.subscribe(writer)
    engine = SweepEngine(plan, rig, SimulatedBurner(rig, seed=3), bus, wait_for_store=True)
    blocks = []

    def halt_mid_record(event):
        if isinstance(event, BlockAcquired) and event.stage == S.RECORDING and event.point_index == 1:
            blocks.append(event)
            if len(blocks) == 4:
                engine.halt("test halt")
    bus.subscribe(halt_mid_record)
    assert engine.run() == "halted"
    writer.close()
    return run_dir


def test_interrupted_record_is_stored_rejected_and_cannot_be_accepted(tmp_path: Path, capsys):
    run_dir = _halted_run(tmp_path)
    run = open_run(run_dir)
    assert not run.problems
    attempts = {a["point_index"]: a for a in run.attempts}
    cut = attempts[1]
    assert list(cut["flags"])[:2] == ["interrupted", "halted"]
    assert cut["decision"] == "rejected"
    assert cut["n_samples"] < 1.0 * 25600            # 4 blocks of 0.1 s, not the 1 s record
    assert 1 not in run.accepted() and 0 in run.accepted()
    # the user cannot accept it either: a clear message, exit 2, nothing changed
    code = main(["accept", str(run_dir), "--attempt", cut["attempt_id"]])
    err = capsys.readouterr().err
    assert code == 2 and "interrupted" in err and "cannot be accepted" in err and "Traceback" not in err
    assert open_run(run_dir).attempts[1]["decision"] == "rejected"
    # resume measures the interrupted point again
    assert 1 in open_run(run_dir).pending_points()
    assert main(["resume", str(run_dir), "--fast"]) == 0
    run = open_run(run_dir)
    assert set(run.accepted()) == {0, 1, 2, 3}
    assert json.loads(json.dumps(list(run.attempts[1]["flags"]))) == ["interrupted", "halted"]
