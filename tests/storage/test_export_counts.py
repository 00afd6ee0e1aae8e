"""`flamebode export` says what its files hold: points with a result, flagged ones, and the
points left without one (seen: a rejected point became a blank row, and nothing was said)."""

from __future__ import annotations

from pathlib import Path

from run_watch import run_cli, short_plan_text

ROOT = Path(__file__).resolve().parents[2]


_cli = run_cli


def test_export_names_the_points_without_a_result(tmp_path: Path) -> None:
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("counts", 200, 400, 100, 0.3))
    run = tmp_path / "run"
    assert _cli("sweep", str(plan), "--rig", str(ROOT / "configs" / "demo-rig.toml"), "--out", str(run), "--fast",
                "--seed", "6").returncode == 0
    assert _cli("accept", str(run), "2/1", "--reject").returncode == 0
    out = _cli("export", str(run), "--out", str(tmp_path / "x"), "--no-plots")
    assert out.returncode == 0, out.stderr
    assert "3 points: 2 with an accepted attempt" in out.stdout and "1 without (point 2)" in out.stdout, out.stdout
