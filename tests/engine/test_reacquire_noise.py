"""Re-acquiring a point in rehearsal is a new measurement: the same simulated rig (its sensors'
true errors, its flame) with new noise, unless --seed fixes both. Seen: `reacquire --flagged`
reproduced the first attempt to 16 digits, so a flag from noise could never clear."""

from __future__ import annotations

import sqlite3
from pathlib import Path

from run_watch import run_cli, short_plan_text

ROOT = Path(__file__).resolve().parents[2]


_cli = run_cli


def _gains(run: Path) -> list[float]:
    con = sqlite3.connect(run / "index.sqlite")
    rows = con.execute("SELECT an.gain FROM analyses an JOIN attempts at ON an.attempt_id = at.attempt_id "
                       "WHERE at.point_index = 0 ORDER BY at.seq").fetchall()
    con.close()
    return [r[0] for r in rows]


def test_a_reacquired_point_meets_new_noise(tmp_path: Path) -> None:
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("noise", 200, 300, 100, 0.4))
    run = tmp_path / "run"
    assert _cli("sweep", str(plan), "--rig", str(ROOT / "configs" / "demo-rig.toml"), "--out", str(run),
                "--fast").returncode == 0
    out = _cli("reacquire", str(run), "--points", "1", "--fast")
    assert out.returncode == 0, out.stderr[-2000:]
    first, second = _gains(run)[:2]
    assert first != second                                  # new noise ...
    assert abs(second / first - 1) < 0.1                    # ... on the same rig and flame
