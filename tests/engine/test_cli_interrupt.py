"""Ctrl-C on a headless sweep: the drive is ramped to zero, the sweep ends as aborted and
every point already stored is kept and says so."""

from __future__ import annotations

import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from run_watch import committed_attempts, short_plan_text

ROOT = Path(__file__).resolve().parents[2]
PLAN = short_plan_text("interrupt test", 200, 1200, 50, 0.5)


def stored(run_dir: Path) -> int:
    return len(committed_attempts(run_dir))


@pytest.mark.slow
@pytest.mark.timeout(120)
def test_ctrl_c_aborts_and_keeps_stored_points(tmp_path: Path):
    plan = tmp_path / "plan.toml"
    plan.write_text(PLAN)
    run_dir = tmp_path / "run"
    proc = subprocess.Popen([sys.executable, "-m", "app.cli", "sweep", str(plan), "--rig",
                             str(ROOT / "configs" / "demo-rig.toml"), "--out", str(run_dir), "--fast"],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while stored(run_dir) < 2 and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    assert proc.poll() is None, "the sweep ended before it could be interrupted"
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=60)
    assert "ramping the drive to zero" in err
    assert "sweep aborted" in out
    kept = stored(run_dir)
    assert 2 <= kept < 21
    assert f"{kept} of 21 points settled and kept" in out
    assert "Traceback" not in err
    assert proc.returncode == 1
