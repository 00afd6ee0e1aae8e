"""kill -9 at random moments, then reopen and resume: no acknowledged point is lost.

A real headless sweep (``python -m app.cli sweep PLAN --out RUN --fast``: the simulated
burner through the sweep engine and the run writer; later rounds continue it with
``python -m app.cli resume RUN --fast``) is killed with SIGKILL at seeded random moments. Because the writer commits an attempt's index row
only after its record file is complete, and acknowledges only after the commit, every
attempt seen in the index before a kill must reopen intact: size and sha256 (FIPS 180-4)
as indexed, and every sample readable through HDF5's fletcher32 filter. Finally the run
is resumed to completion.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from app.storage.reader import open_run
from run_watch import committed_attempts, short_plan_text

ROOT = Path(__file__).resolve().parents[2]
PLAN = short_plan_text("crash test", 200, 700, 100, 0.4)


def start_sweep(run_dir: Path, plan: Path) -> subprocess.Popen:
    if (run_dir / "index.sqlite").exists():
        cmd = ["resume", str(run_dir), "--fast"]
    else:
        cmd = ["sweep", str(plan), "--rig", str(ROOT / "configs" / "demo-rig.toml"),
               "--scenario", str(ROOT / "configs" / "demo-scenario.toml"), "--out", str(run_dir), "--fast"]
    return subprocess.Popen([sys.executable, "-m", "app.cli", *cmd], cwd=ROOT,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)


@pytest.mark.slow
@pytest.mark.timeout(120)
def test_sigkill_loses_no_acknowledged_point_and_resume_completes(tmp_path: Path):
    plan = tmp_path / "plan.toml"
    plan.write_text(PLAN)
    run_dir = tmp_path / "run"
    rng = random.Random(20240607)            # fixed seed: the kill moments are reproducible
    seen: set[str] = set()
    kills = 0
    for _ in range(4):
        proc = start_sweep(run_dir, plan)
        # a random moment: after 0 or 1 more stored points, then 0-300 ms into the next one
        target = len(committed_attempts(run_dir)) + rng.randint(0, 1)
        while len(committed_attempts(run_dir)) < target and proc.poll() is None:
            seen |= committed_attempts(run_dir)
            time.sleep(0.01)
        deadline = time.monotonic() + rng.uniform(0.0, 0.3)
        while time.monotonic() < deadline and proc.poll() is None:
            seen |= committed_attempts(run_dir)
            time.sleep(0.01)
        if proc.poll() is None:
            os.kill(proc.pid, signal.SIGKILL)
            kills += 1
        proc.wait(timeout=30)
        proc.stderr.close()
        run = open_run(run_dir, verify=True)
        ids = {a["attempt_id"] for a in run.attempts}
        assert seen <= ids, f"acknowledged attempts lost: {seen - ids}"
        for a in run.attempts:
            assert a["record_status"] == "ok", run.problems
            rec = run.read_record(a["attempt_id"])          # reads every chunk: fletcher32 verified
            assert rec.freq_hz == a["freq_hz"] and rec.data.shape[1] == a["n_samples"]
        assert all("temporary" in p or "not in the index" in p for p in run.problems), run.problems
    assert kills >= 3 and seen              # killed mid-sweep, after some points were stored
    files_before = _files(run_dir)
    proc = subprocess.run([sys.executable, "-m", "app.cli", "resume", str(run_dir), "--fast"], cwd=ROOT,
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    run = open_run(run_dir, verify=True)
    assert run.pending_points() == [] and len(run.accepted()) == 6
    assert seen <= {a["attempt_id"] for a in run.attempts}
    # leftovers of the kills were set aside, not deleted: every file is still there, byte for byte
    assert run.problems == [], run.problems
    after = _files(run_dir)
    for rel, data in files_before.items():
        if rel not in after:
            moved = f"set-aside/{Path(rel).name.lstrip('.')}"
            assert after.get(moved) == data, f"{rel} vanished"
            assert f"set aside {rel} -> {moved}" in proc.stdout


def _files(run_dir: Path) -> dict[str, bytes]:
    return {str(p.relative_to(run_dir)): p.read_bytes() for p in sorted(run_dir.rglob("*"))
            if p.is_file() and p.parent.name in ("records", "set-aside")}


def _made_run(tmp_path: Path, record_s: float = 0.4, fast: bool = True) -> tuple[Path, list[str]]:
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("set-aside test", 200, 400, 100, record_s))
    run_dir = tmp_path / "run"
    cmd = [sys.executable, "-m", "app.cli", "sweep", str(plan), "--rig", str(ROOT / "configs" / "demo-rig.toml"),
           "--out", str(run_dir)] + (["--fast"] if fast else [])
    return run_dir, cmd


def test_resume_sets_leftovers_aside_naming_each_and_deletes_nothing(tmp_path: Path):
    run_dir, cmd = _made_run(tmp_path)
    proc = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    records = run_dir / "records"
    real = sorted(records.glob("*.h5"))
    planted = {
        records / ".tmp-deadbeef.h5.part": b"\x89HDF\r\n\x1a\n half a record",
        run_dir / ".tmp-rig.toml.part": b"name = 'half a snapshot'",
        records / "p0001-orphan-1234.h5": real[1].read_bytes(),     # renamed, never committed
    }
    for path, data in planted.items():
        path.write_bytes(data)
    assert sum("temporary" in p or "not in the index" in p for p in open_run(run_dir).problems) == 3
    proc = subprocess.run([sys.executable, "-m", "app.cli", "resume", str(run_dir), "--fast"], cwd=ROOT,
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0 and "Traceback" not in proc.stderr, proc.stdout + proc.stderr
    for path, data in planted.items():
        rel = path.relative_to(run_dir)
        moved = run_dir / "set-aside" / path.name.lstrip(".")
        assert not path.exists() and moved.read_bytes() == data
        assert f"set aside {rel} -> set-aside/{moved.name}: " in proc.stdout, proc.stdout
    assert "unfinished temporary file" in proc.stdout and "no index row names" in proc.stdout
    assert sorted(records.glob("*.h5")) == real                 # indexed records stay where they are
    run = open_run(run_dir)
    assert run.problems == [] and len(run.accepted()) == 3
    # a second leftover with a name already taken in set-aside/ gets a new name, nothing is overwritten
    (records / ".tmp-deadbeef.h5.part").write_bytes(b"another half")
    proc = subprocess.run([sys.executable, "-m", "app.cli", "resume", str(run_dir), "--fast"], cwd=ROOT,
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0
    assert (run_dir / "set-aside" / "tmp-deadbeef-2.h5.part").read_bytes() == b"another half"
    assert (run_dir / "set-aside" / "tmp-deadbeef.h5.part").read_bytes() == planted[records / ".tmp-deadbeef.h5.part"]


@pytest.mark.timeout(60)
def test_resume_and_reacquire_refuse_while_a_sweep_still_writes_the_run(tmp_path: Path):
    run_dir, cmd = _made_run(tmp_path, record_s=2.0, fast=False)     # real time: it is still running
    sweep = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 40
        while not committed_attempts(run_dir) and sweep.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        assert sweep.poll() is None and committed_attempts(run_dir)
        part = run_dir / "records" / ".tmp-other.h5.part"
        part.write_bytes(b"maybe a writer's own file")
        proc = subprocess.run([sys.executable, "-m", "app.cli", "resume", str(run_dir), "--fast"], cwd=ROOT,
                              capture_output=True, text=True, timeout=30)
        assert proc.returncode != 0 and "Traceback" not in proc.stderr, proc.stderr
        assert "still writing this run" in proc.stderr
        assert part.exists() and not (run_dir / "set-aside").exists()
        proc = subprocess.run([sys.executable, "-m", "app.cli", "reacquire", str(run_dir), "--points", "1",
                               "--fast"], cwd=ROOT, capture_output=True, text=True, timeout=30)
        assert proc.returncode != 0 and "still writing this run" in proc.stderr, proc.stdout + proc.stderr
        assert "reacquiring" not in proc.stdout
    finally:
        sweep.send_signal(signal.SIGTERM)
        sweep.communicate(timeout=30)
