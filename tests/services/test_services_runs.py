"""The run services on a real stored run: review, decide by numbers, reprocess, export, compare.

The run is made once per module, headless by ``flamebode sweep`` on the simulated burner (three
points), and copied fresh for each test that changes it. (No conftest.py here: the window tests
import their own ``conftest`` by name.)
"""

from __future__ import annotations

import csv
import shutil
from dataclasses import FrozenInstanceError
from pathlib import Path

import pytest

from app.errors import FlamebodeError
from app.services import decisions, export, reacquire, reprocess, runs
from app.services.types import (Choice, CompareRequest, DecideRequest, ExportRequest, ReacquireRequest,
                                ReprocessRequest)

CONFIGS = Path(__file__).resolve().parents[2] / "configs"


def _write_inputs(folder: Path) -> Path:
    scenario = folder / "scenario.toml"
    text = (CONFIGS / "demo-scenario.toml").read_text(encoding="utf-8")
    scenario.write_text(text.replace('rig = "demo-rig.toml"', f'rig = "{CONFIGS / "demo-rig.toml"}"'),
                        encoding="utf-8")
    plan = folder / "plan.toml"
    plan.write_text(
        f'name = "service test"\nrig = "{CONFIGS / "demo-rig.toml"}"\nscenario = "{scenario}"\n'
        "[frequencies]\nvalues = [200.0, 400.0, 600.0]\n"
        '[amplitude]\nvalues = [0.05]\nbasis = "peak"\n'
        '[timing]\nrecord = "0.5 s"\nsettle = "0.3 s"\ntuning_window = "0.3 s"\ntuning_discard = "0.05 s"\n',
        encoding="utf-8")
    return plan


@pytest.fixture(scope="module")
def stored_run_master(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from app.cli import main

    folder = tmp_path_factory.mktemp("service-run")
    run_dir = folder / "run"
    assert main(["sweep", str(_write_inputs(folder)), "--fast", "--seed", "3", "--out", str(run_dir)]) == 0
    return run_dir


@pytest.fixture
def stored_run(stored_run_master: Path, tmp_path: Path) -> Path:
    """A private copy of the stored run (tests may change its index)."""
    out = tmp_path / "run"
    shutil.copytree(stored_run_master, out)
    return out


def test_review_counts_and_rows_match_the_run(stored_run: Path) -> None:
    rv = runs.review(stored_run)
    assert [row["point"] for row in rv.rows] == [1, 2, 3]
    assert rv.plan_name == "service test"
    assert rv.pending_points == ()
    assert rv.counts_text.startswith("3 points: 3 with an accepted attempt")
    assert all(row["used"] == f"{row['point']}/1" for row in rv.rows)
    with pytest.raises(FrozenInstanceError):
        rv.plan_name = "other"            # type: ignore[misc]


def test_review_of_a_folder_that_is_not_a_run_is_a_plain_error(tmp_path: Path) -> None:
    with pytest.raises(FlamebodeError, match=str(tmp_path)):
        runs.review(tmp_path)


def test_decide_by_point_and_attempt_number_rejects_and_is_read_back(stored_run: Path) -> None:
    out = decisions.decide(DecideRequest(run_dir=stored_run, choices=(Choice(2, 1),), accept=False, reason="noisy"))
    assert [(d.point, d.label, d.accepted) for d in out] == [(2, "2/1", False)]
    run = runs.open_run(stored_run)
    assert 1 not in run.accepted() and run.attempt(out[0].attempt_id)["decision"] == "rejected"
    assert runs.review(stored_run).pending_points == (2,)


def test_decide_is_all_or_nothing_and_names_what_exists(stored_run: Path) -> None:
    with pytest.raises(decisions.DecisionError, match="point 3 has no attempt 4"):
        decisions.decide(DecideRequest(run_dir=stored_run, choices=(Choice(1, 1), Choice(3, 4)), accept=False))
    assert sorted(runs.open_run(stored_run).accepted()) == [0, 1, 2]      # the first one was not written
    with pytest.raises(decisions.DecisionError, match="start at 1"):
        decisions.decide(DecideRequest(run_dir=stored_run, choices=(Choice(0, 1),)))


@pytest.mark.parametrize("tokens, pairs", [(["7", "2"], [(7, 2)]), (["7/2", "9/1"], [(7, 2), (9, 1)])])
def test_parse_choices(tokens: list[str], pairs: list[tuple[int, int]]) -> None:
    assert [(c.point, c.attempt) for c in decisions.parse_choices(tokens)] == pairs


def test_parse_choices_refuses_other_text() -> None:
    with pytest.raises(decisions.DecisionError, match="POINT ATTEMPT"):
        decisions.parse_choices(["7", "x"])


def test_reprocess_adds_one_analysis_per_attempt_with_the_new_rig(stored_run: Path, tmp_path: Path) -> None:
    rig = tmp_path / "edited-rig.toml"
    rig.write_text((CONFIGS / "demo-rig.toml").read_text(encoding="utf-8").replace('"14.2 mV/Pa"', '"14.9 mV/Pa"'),
                   encoding="utf-8")
    before = {a["attempt_id"]: a["analysis"]["gain"] for a in runs.open_run(stored_run).attempts}
    res = reprocess.reprocess(ReprocessRequest(run_dir=stored_run, rig_path=rig, point_indices=(0, 2)))
    assert res.n_done == 2 and not res.not_done and [o.point for o in res.outcomes] == [1, 3]
    assert res.rig_copy.is_file() and res.rig_copy.name.startswith(res.rig_sha256[:12])
    after = runs.open_run(stored_run)
    for o in res.outcomes:
        a = after.attempt(o.attempt_id)
        assert a["analysis"]["rig_sha256"] == res.rig_sha256
        assert a["analysis"]["gain"] == pytest.approx(o.gain)
        assert a["analysis"]["gain"] != pytest.approx(before[o.attempt_id], rel=1e-9)   # a changed sensitivity
    untouched = [a for a in after.attempts if a["point_index"] == 1]
    assert untouched and all(a["analysis"].get("rig_sha256") != res.rig_sha256 for a in untouched)


def test_reprocess_refuses_points_not_in_the_run(stored_run: Path) -> None:
    with pytest.raises(reprocess.ReprocessRefused, match="--points: 9 not in this run"):
        reprocess.reprocess(ReprocessRequest(run_dir=stored_run, rig_path=CONFIGS / "demo-rig.toml",
                                             point_indices=(8,)))


def test_export_writes_the_review_numbers(stored_run: Path, tmp_path: Path) -> None:
    res = export.export(ExportRequest(run_dir=stored_run, out_dir=tmp_path / "out", plots=False))
    csv_path = next(p for p in res.paths if p.name == "points.csv")
    with csv_path.open(encoding="utf-8") as f:
        gains = [float(r["gain"]) for r in csv.DictReader(f)]
    assert gains == pytest.approx([row["gain"] for row in runs.review(stored_run).rows], rel=1e-6)
    assert res.counts_text == runs.review(stored_run).counts_text


def test_compare_draws_one_figure_and_refuses_a_non_run(stored_run: Path, tmp_path: Path) -> None:
    res = export.compare(CompareRequest(run_dirs=(stored_run,), out=tmp_path / "cmp.png"))
    assert res.figure.is_file() and res.figure.stat().st_size > 1000
    with pytest.raises(FlamebodeError):
        export.compare(CompareRequest(run_dirs=(stored_run, tmp_path / "nothing"), out=tmp_path / "cmp2.png"))


def test_reacquire_prepare_checks_points_and_names_the_runs_backend(stored_run: Path) -> None:
    plan = reacquire.prepare(ReacquireRequest(run_dir=stored_run, point_indices=(2, 0)))
    assert plan.point_indices == (0, 2) and plan.simulated and plan.rig_path.is_file()
    assert reacquire.prepare(ReacquireRequest(run_dir=stored_run, flagged=True)).point_indices == \
        tuple(runs.open_run(stored_run).flagged_points())
    with pytest.raises(FlamebodeError, match="--points: 5 not in this run's plan"):
        reacquire.prepare(ReacquireRequest(run_dir=stored_run, point_indices=(4,)))
    uses, summary = reacquire.point_uses(stored_run, [1])
    assert [(u.point, u.used, u.n_attempts) for u in uses] == [(2, "2/1", 1)] and summary == runs.review(stored_run).counts_text


def test_reprocess_reports_problems_then_each_outcome_as_it_comes(stored_run: Path) -> None:
    seen: list[object] = []
    res = reprocess.reprocess(ReprocessRequest(run_dir=stored_run, rig_path=CONFIGS / "demo-rig.toml"),
                              on_opened=lambda probs: seen.append(("opened", probs)), on_outcome=seen.append)
    assert seen[0] == ("opened", res.problems)
    assert tuple(seen[1:]) == res.outcomes and len(res.outcomes) == 3
