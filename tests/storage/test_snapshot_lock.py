"""A run keeps the files it was started with: an edited snapshot never changes a resumed sweep silently.

Safety promise (docs/run-layout.md, user guide): the sha256 of the run's rig, plan and
scenario snapshots is fixed when the run is created. ``resume`` and ``reacquire`` refuse a
changed snapshot, naming the file and the keys that differ, and drive nothing; with
``--accept-changed-snapshot`` they go on and the change (old and new hash, keys, time) is
recorded in the run's index, the creation hash untouched.

Checked from outside the process: real ``python -m app.cli`` subprocesses on the
simulated burner (fast), the drive log (``FLAMEBODE_DRIVE_LOG``: every block the ceiling
guard put out, with the ceiling it applied) and the run's index read with sqlite3.
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from drivers.drive_log import read_log
from run_watch import short_plan_text

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "demo-rig.toml"


def cli(*args: str, log: Path | None = None, timeout: float = 60.0) -> subprocess.CompletedProcess:
    env = {**os.environ}
    env.pop("FLAMEBODE_DRIVE_LOG", None)
    if log is not None:
        env["FLAMEBODE_DRIVE_LOG"] = str(log)
    return subprocess.run([sys.executable, "-m", "app.cli", *args], cwd=ROOT, capture_output=True, text=True,
                          timeout=timeout, env=env)


def index_rows(run: Path, sql: str) -> list[dict]:
    con = sqlite3.connect(f"{(run / 'index.sqlite').as_uri()}?mode=ro", uri=True)
    con.row_factory = sqlite3.Row
    try:
        return [dict(r) for r in con.execute(sql)]
    finally:
        con.close()


@pytest.fixture
def half_run(tmp_path: Path) -> Path:
    """A 4-point run whose last two points have no accepted attempt (resume has work to do)."""
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("snapshot test", 200, 500, 100, 0.4))
    run = tmp_path / "run"
    proc = cli("sweep", str(plan), "--rig", str(RIG), "--out", str(run), "--fast")
    assert proc.returncode == 0, proc.stdout + proc.stderr
    late = [r["attempt_id"] for r in index_rows(run, "SELECT attempt_id FROM attempts WHERE point_index >= 2")]
    args = [a for attempt in late for a in ("--attempt", attempt)]
    assert cli("accept", str(run), *args, "--reject", "--reason", "test").returncode == 0
    return run


def _state(run: Path) -> tuple:
    attempts = index_rows(run, "SELECT attempt_id, decision FROM attempts ORDER BY attempt_id")
    return attempts, sorted(p.name for p in (run / "records").iterdir())


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_resume_refuses_an_edited_rig_snapshot_and_drives_nothing(half_run: Path, tmp_path: Path):
    rig = half_run / "rig.toml"
    created = _sha(rig)
    assert index_rows(half_run, "SELECT value FROM run_info WHERE key = 'rig_sha256'")[0]["value"] == created
    rig.write_text(rig.read_text().replace('ceiling = "2.0 V"', 'ceiling = "9 V"')
                   .replace('sensitivity = "14.4 mV/Pa"', 'sensitivity = "15 mV/Pa"'))
    before = _state(half_run)
    log = tmp_path / "drive.csv"
    proc = cli("resume", str(half_run), "--fast", log=log)
    assert proc.returncode != 0 and "Traceback" not in proc.stderr, proc.stderr
    assert "rig.toml: pressure_sensors[4].sensitivity: 14.4 mV/Pa → 15 mV/Pa; drive.ceiling: 2.0 V → 9 V" \
        in proc.stderr
    assert f"sha256 {created[:12]} → {_sha(rig)[:12]}" in proc.stderr
    assert "--accept-changed-snapshot" in proc.stderr and "nothing was measured" in proc.stderr
    assert _state(half_run) == before                       # no new attempt, no new record file
    assert not log.exists() or not (read_log(log)["peak_v"] > 0).any(), "drive sent with a refused snapshot"
    assert index_rows(half_run, "SELECT value FROM run_info WHERE key = 'rig_sha256'")[0]["value"] == created
    # review shows the change as a problem, and a second try is refused the same way
    review = cli("review", str(half_run))
    assert "snapshot changed since the run was created: rig.toml: pressure_sensors[4]" in review.stdout
    assert cli("resume", str(half_run), "--fast", log=log).returncode != 0


def test_accepting_an_edited_rig_snapshot_records_the_change_and_uses_it(half_run: Path, tmp_path: Path):
    rig = half_run / "rig.toml"
    created = _sha(rig)
    rig.write_text(rig.read_text().replace('ceiling = "2.0 V"', 'ceiling = "9 V"'))
    edited = _sha(rig)
    log = tmp_path / "drive.csv"
    t0 = time.time()
    proc = cli("resume", str(half_run), "--fast", "--accept-changed-snapshot", log=log)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "changed snapshot accepted" in proc.stdout and "drive.ceiling: 2.0 V → 9 V" in proc.stdout
    changes = index_rows(half_run, "SELECT * FROM snapshot_changes")
    assert len(changes) == 1
    c = changes[0]
    assert (c["name"], c["old_sha256"], c["new_sha256"], c["command"]) == ("rig.toml", created, edited, "resume")
    assert json.loads(c["keys"]) == ["drive.ceiling: 2.0 V → 9 V"] and t0 <= c["wall_time_s"] <= time.time()
    # the creation hash is never overwritten; the new analyses name the rig that was used
    assert index_rows(half_run, "SELECT value FROM run_info WHERE key = 'rig_sha256'")[0]["value"] == created
    new = index_rows(half_run, "SELECT an.rig_sha256 FROM analyses an JOIN attempts at USING (attempt_id) "
                               "WHERE at.point_index >= 2 AND at.decision = 'accepted'")
    assert len(new) == 2 and {r["rig_sha256"] for r in new} == {edited}
    drive = read_log(log)
    assert drive.size and drive["peak_v"].max() > 0
    assert set(drive["ceiling_v"]) == {9.0}                   # the guard applied the accepted ceiling
    review = cli("review", str(half_run))
    assert "snapshot change accepted by resume" in review.stdout and "changed since" not in review.stdout
    # once accepted, the edited snapshot is the run's: a later resume is not refused again
    again = cli("resume", str(half_run), "--fast", log=log)
    assert again.returncode == 0 and "nothing to resume" in again.stdout, again.stdout + again.stderr


def test_reacquire_refuses_an_edited_plan_snapshot_naming_the_key(half_run: Path, tmp_path: Path):
    plan = half_run / "plan.toml"
    plan.write_text(plan.read_text().replace("values = [0.05]", "values = [0.08]"))
    before = _state(half_run)
    log = tmp_path / "drive.csv"
    proc = cli("reacquire", str(half_run), "--points", "1", "--fast", log=log)
    assert proc.returncode != 0 and "Traceback" not in proc.stderr, proc.stderr
    assert "plan.toml: amplitude.values: [0.05] → [0.08]" in proc.stderr
    assert _state(half_run) == before
    assert not log.exists() or not (read_log(log)["peak_v"] > 0).any()
    proc = cli("resume", str(half_run), "--fast", log=log)
    assert proc.returncode != 0 and "plan.toml: amplitude.values" in proc.stderr
    assert _state(half_run) == before
    proc = cli("reacquire", str(half_run), "--points", "1", "--fast", "--accept-changed-snapshot", log=log)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "changed snapshot accepted" in proc.stdout and "plan.toml: amplitude.values: [0.05] → [0.08]" in proc.stdout
    change = index_rows(half_run, "SELECT name, command, keys FROM snapshot_changes")
    assert change == [{"name": "plan.toml", "command": "reacquire", "keys": '["amplitude.values: [0.05] → [0.08]"]'}]
    assert len(_state(half_run)[0]) == len(before[0]) + 1      # one new attempt, of point 1


def test_a_missing_or_added_snapshot_is_refused(half_run: Path, tmp_path: Path):
    before = _state(half_run)
    plan = half_run / "plan.toml"
    text = plan.read_bytes()
    plan.unlink()
    for extra in ([], ["--accept-changed-snapshot"]):
        proc = cli("resume", str(half_run), "--fast", *extra)
        assert proc.returncode != 0 and "Traceback" not in proc.stderr, proc.stderr
        assert "plan.toml: the snapshot is missing" in proc.stderr
    assert "cannot be accepted" in proc.stderr
    plan.write_bytes(text)
    (half_run / "scenario.toml").write_text((ROOT / "configs" / "demo-scenario.toml").read_text())
    proc = cli("resume", str(half_run), "--fast")
    assert proc.returncode != 0 and "scenario.toml: a scenario file the run was not created with" in proc.stderr
    assert _state(half_run) == before
    assert index_rows(half_run, "SELECT COUNT(*) AS n FROM snapshot_changes")[0]["n"] == 0
