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
    proc = subprocess.run([sys.executable, "-m", "app.cli", "resume", str(run_dir), "--fast"], cwd=ROOT,
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    run = open_run(run_dir, verify=True)
    assert run.pending_points() == [] and len(run.accepted()) == 6
    assert seen <= {a["attempt_id"] for a in run.attempts}
