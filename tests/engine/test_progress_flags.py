"""The progress display's finish line counts flagged points as the run's index and export do.

One rule (``app.core.flagging``): the attempt the acceptance rule takes for a point is flagged
when it has attempt flags or analysis warnings; a point with an unflagged attempt among its
acceptable ones is not flagged. Checked against storage's own functions, and end to end as a
user runs it (``flamebode sweep --out`` then ``flamebode review``).
"""

from __future__ import annotations

import io
import re
from types import SimpleNamespace

import pytest

from app.core.flagging import attempt_flagged, point_flagged
from app.engine.events import PointSettled, SweepFinished, SweepStarted
from app.engine.progress import ProgressDisplay
from app.storage.index import is_flagged, rule_choice
from run_watch import run_cli, short_plan_text

CASES = [((), ()), (("refined",), ()), ((), ("cond high",)), (("interrupted", "flame-out"), ()),
         (("tuning-not-converged",), ("distortion",)), (("multisine",), ()), (("multisine", "amplitude-off-target"), ())]


def test_marks_of_how_a_point_was_made_flag_nothing() -> None:
    # a point inserted by refinement or measured in a survey is not a fault (app.core.flagging.MARKS);
    # a real flag beside the mark still flags it
    assert not attempt_flagged(("refined",)) and not attempt_flagged(("multisine",))
    assert attempt_flagged(("multisine", "amplitude-off-target"))


@pytest.mark.parametrize("flags,warnings", CASES)
def test_one_attempt_is_flagged_by_the_same_rule_as_the_index(flags, warnings) -> None:
    assert attempt_flagged(flags, warnings) == is_flagged({"flags": list(flags), "warnings": list(warnings)})


@pytest.mark.parametrize("history", [[0], [1], [1, 0], [0, 1], [1, 2], [3], [3, 0], [2, 3]])
def test_a_point_is_flagged_as_the_acceptance_rule_takes_it(history) -> None:
    attempts = [{"flags": list(CASES[k][0]), "warnings": list(CASES[k][1]), "seq": i + 1}
                for i, k in enumerate(history)]
    chosen = rule_choice(attempts)
    expected = None if chosen is None else is_flagged(chosen)
    assert point_flagged([(a["flags"], a["warnings"]) for a in attempts]) == expected


def _settled(index: int, flags=(), warnings=()) -> PointSettled:
    velocity = SimpleNamespace(amplitude_ratio=0.05)
    result = SimpleNamespace(velocity=velocity, gain=1.0, gain_ci95=0.05, phase_rad=-1.0, phase_ci95_rad=0.05,
                             warnings=tuple(warnings))
    return PointSettled(attempt_id=f"a{index}-{len(flags)}", point_index=index, freq_hz=100.0 + 50 * index,
                        target_ratio=0.05, drive_v=0.1, record=None, channels=(), sample_rate_hz=1.0,
                        result=result, tuning=(), flags=tuple(flags), overflows=0, identity={},
                        started_wall_s=0.0, recorded_wall_s=0.0)


def test_the_finish_line_counts_a_reacquired_clean_point_as_not_flagged() -> None:
    out = io.StringIO()
    display = ProgressDisplay(file=out).start()
    for ev in (SweepStarted(run_label="r", n_points=3, backend="simulated", identity={}, plan=None, rig=None),
               _settled(0, ("amplitude-off-target",)), _settled(0),          # flagged, then re-taken clean
               _settled(1, (), ("a result warning",)), _settled(2),
               SweepFinished(reason="complete", n_settled=3, n_points=3, detail="")):
        display(ev)
    display.close()
    assert "(1 flagged: point 2)" in out.getvalue(), out.getvalue()


def test_the_finish_line_names_a_point_whose_record_could_not_be_evaluated() -> None:
    # found by a new user: a point driven, recorded, failing its evaluation and not stored ended in
    # "sweep complete ... (none flagged)"
    from app.engine.faults import fault_event

    out = io.StringIO()
    display = ProgressDisplay(file=out).start()
    for ev in (SweepStarted(run_label="r", n_points=3, backend="simulated", identity={}, plan=None, rig=None),
               _settled(0), fault_event("evaluation-failed", "point 2 at 150 Hz: no usable light", 1), _settled(2),
               SweepFinished(reason="complete", n_settled=2, n_points=3, detail="")):
        display(ev)
    display.close()
    assert ("2 of 3 points settled and kept (none flagged; not stored: point 2, whose record could not be "
            "evaluated") in out.getvalue(), out.getvalue()


@pytest.mark.slow
def test_the_finish_line_says_what_review_says(tmp_path) -> None:
    plan = tmp_path / "plan.toml"
    plan.write_text(f'rig = "{(run_cli.__globals__["ROOT"] / "configs" / "demo-rig.toml").as_posix()}"\n'
                    + short_plan_text("flags", 100.0, 300.0, 100.0, 0.5))
    run_dir = tmp_path / "run"
    swept = run_cli("sweep", str(plan), "--fast", "--seed", "3", "--out", str(run_dir))
    assert swept.returncode == 0, swept.stderr
    finish = re.search(r"points settled and kept \((none flagged|(\d+) flagged: points? ([\d, ]+))\)", swept.stdout)
    assert finish, swept.stdout
    shown = [] if finish.group(1) == "none flagged" else [int(x) for x in finish.group(3).split(",")]
    review = run_cli("review", str(run_dir))
    assert review.returncode == 0, review.stderr
    stored = re.search(r"(none flagged|(\d+) of them flagged \(points? ([\d, ]+)\))", review.stdout)
    assert stored, review.stdout
    kept = [] if stored.group(1) == "none flagged" else [int(x) for x in stored.group(3).split(",")]
    assert shown == kept
