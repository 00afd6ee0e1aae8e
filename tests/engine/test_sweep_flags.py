"""``flamebode sweep`` --prescan / --no-prescan / --survey / --refine and the earlier table's age,
run as a user runs them (a real process, ``run_watch.run_cli``)."""

from __future__ import annotations

import json
import sqlite3
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest

from run_watch import ROOT, run_cli, short_plan_text

RIG = (ROOT / "configs" / "demo-rig.toml").as_posix()


def _plan(tmp_path: Path, extra: str = "") -> Path:
    path = tmp_path / "plan.toml"
    path.write_text(f'rig = "{RIG}"\n' + short_plan_text("flags", 200.0, 400.0, 200.0, 0.3) + extra)
    return path


def _info(run_dir: Path) -> dict[str, str]:
    con = sqlite3.connect(f"{(run_dir / 'index.sqlite').as_uri()}?mode=ro", uri=True)
    try:
        return dict(con.execute("SELECT key, value FROM run_info").fetchall())
    finally:
        con.close()


def test_dry_run_shows_the_sections_the_flags_turn_on_and_off(tmp_path) -> None:
    plan = _plan(tmp_path, "[prescan]\nenabled = true\n")
    on = run_cli("sweep", str(plan), "--dry-run", "--refine", "--survey")
    assert on.returncode == 0, on.stderr
    assert "command line: --survey --refine" in on.stdout
    assert "pre-scan: a multi-sine" in on.stdout and "refinement: up to" in on.stdout
    assert "multi-sine survey" in on.stdout
    off = run_cli("sweep", str(plan), "--dry-run", "--no-prescan")
    assert off.returncode == 0 and "pre-scan: a multi-sine" not in off.stdout
    both = run_cli("sweep", str(plan), "--dry-run", "--prescan", "--no-prescan")
    assert both.returncode == 2 and "not allowed with argument" in both.stderr


def test_dry_run_states_auto_settle_and_the_tables_age(tmp_path) -> None:
    plan = _plan(tmp_path, '[tuning]\nprior = [[200.0, 0.2], [400.0, 0.3]]\n').read_text()
    plan = plan.replace('settle = "0.2 s"', 'settle = "auto"')
    (tmp_path / "plan.toml").write_text(plan)
    out = run_cli("sweep", str(tmp_path / "plan.toml"), "--dry-run")
    assert out.returncode == 0, out.stderr
    assert "settle: settle auto: 5 decay time constants" in out.stdout
    assert "0.5 s where the decay is not measured" in out.stdout
    assert "earlier table ([tuning] prior): of unknown age" in out.stdout


@pytest.mark.slow
@pytest.mark.parametrize("case", ["unknown-age", "fresh", "fresh-but-asked", "stale"])
def test_the_earlier_tables_age_decides_the_prescan(tmp_path, case) -> None:
    measured = {"unknown-age": None, "fresh": timedelta(minutes=5), "fresh-but-asked": timedelta(minutes=5),
                "stale": timedelta(days=2)}[case]
    extra = '[tuning]\nprior = [[200.0, 0.2], [400.0, 0.3]]\n[prescan]\nenabled = true\n'
    if measured is not None:
        when = (datetime.now(timezone.utc) - measured).strftime("%Y-%m-%dT%H:%M:%SZ")
        extra += f"table_measured = {when}\n"
    plan = _plan(tmp_path, extra)
    run_dir = tmp_path / "run"
    args = ["sweep", str(plan), "--fast", "--seed", "4", "--out", str(run_dir)]
    if case == "fresh-but-asked":
        args.append("--prescan")
    done = run_cli(*args)
    assert done.returncode == 0, done.stderr
    info = _info(run_dir)
    prescan = json.loads(info["prescan"])
    if case == "fresh":
        assert "fresh" in prescan["skipped"]
    else:
        assert not prescan["skipped"] and prescan["levels"] >= 1, prescan
    assert info["sweep_options"] == ("--prescan" if case == "fresh-but-asked" else "none")


@pytest.mark.slow
def test_refine_and_auto_settle_reach_the_run(tmp_path) -> None:
    plan = _plan(tmp_path).read_text().replace('settle = "0.2 s"', 'settle = "auto"')
    (tmp_path / "plan.toml").write_text(plan)
    run_dir = tmp_path / "run"
    done = run_cli("sweep", str(tmp_path / "plan.toml"), "--fast", "--seed", "5", "--out", str(run_dir),
                   "--prescan", "--refine")
    assert done.returncode == 0, done.stderr
    info = _info(run_dir)
    assert info["sweep_options"] == "--prescan --refine"
    assert info["settle_rule"].startswith("settle auto")
    assert info["settle_used"].startswith("settle auto")
    assert "note settle-auto" in done.stdout
    assert "note refinement: " in done.stdout and "of at most 10 points inserted" in done.stdout


def test_the_dry_run_says_an_fdf_plan_gets_no_survey(tmp_path) -> None:
    plan = _plan(tmp_path).read_text().replace("values = [0.05]", "values = [0.03, 0.06]")
    (tmp_path / "fdf.toml").write_text(plan)
    out = run_cli("sweep", str(tmp_path / "fdf.toml"), "--dry-run", "--survey")
    assert out.returncode == 0 and "multi-sine survey: NOT made for this plan" in out.stdout, out.stdout
