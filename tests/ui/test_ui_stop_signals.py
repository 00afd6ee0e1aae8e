"""Stop signals sent to a real window process: SIGTERM, SIGINT and SIGHUP halt its sweep.

Promise (user guide, "Keys, signals and closing the window"): on any of these signals the
window halts as the halt button does — outputs to zero at once, no further drive, the
record in progress kept as interrupted and never accepted, the writer flushed, the run
saying why it ended — and the process exits within 2 s with exit code 128 + signal number
and no traceback.

Checked from outside, as a user meets it: ``python -m app.cli window --start`` runs as a
subprocess under the offscreen platform on the simulated burner (real time and faster than
real time); the signal arrives at a seeded random moment after the first point is stored;
the checks read the drive log (every block the ceiling guard put out,
``FLAMEBODE_DRIVE_LOG``) and the run folder's index. Common practice for rig control: an
emergency stop zeroes the actuator without a ramp and latches until the next deliberate
start. In-process checks of the signal router itself come last.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from app.storage.record import read_record
from drivers.drive_log import read_log
from run_watch import committed_attempts, short_plan_text

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "demo-rig.toml"
BLOCK_S = 0.1            # the demo rig's block: the block being rendered at the signal may finish
EXIT_WITHIN_S = 2.0


def _plan(tmp_path: Path, record_s: float = 1.0) -> Path:
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("window stop test", 200, 1200, 50, record_s))
    return plan


def _start_window(tmp_path: Path, plan: Path, fast: bool, log: Path) -> subprocess.Popen:
    env = {**os.environ, "FLAMEBODE_DRIVE_LOG": str(log), "PYTHONUNBUFFERED": "1", "QT_QPA_PLATFORM": "offscreen"}
    args = [sys.executable, "-m", "app.cli", "window", "--rig", str(RIG), "--plan", str(plan),
            "--runs-root", str(tmp_path / "runs"), "--start"] + (["--fast"] if fast else [])
    return subprocess.Popen(args, cwd=ROOT, env=env, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def _run_dir(tmp_path: Path, proc: subprocess.Popen) -> Path:
    deadline = time.monotonic() + 90
    while time.monotonic() < deadline and proc.poll() is None:
        runs = sorted((tmp_path / "runs").glob("*/index.sqlite"))
        if runs:
            return runs[0].parent
        time.sleep(0.02)
    raise AssertionError(f"no run folder appeared (exit code {proc.poll()})")


def _signal_when(proc: subprocess.Popen, run_dir: Path, sig: int, after_first_s: float) -> float:
    """Send ``sig`` ``after_first_s`` seconds after the first attempt is on disk; returns the time."""
    deadline = time.monotonic() + 90
    while not committed_attempts(run_dir) and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.01)
    time.sleep(after_first_s)
    assert proc.poll() is None, "the window ended before the signal"
    t_signal = time.time()
    proc.send_signal(sig)
    return t_signal


def _index(run_dir: Path) -> tuple[list[dict], dict[str, str]]:
    con = sqlite3.connect(f"{(run_dir / 'index.sqlite').as_uri()}?mode=ro", uri=True)
    con.row_factory = sqlite3.Row
    try:
        attempts = [dict(r) for r in con.execute("SELECT * FROM attempts ORDER BY stored_wall_s")]
        info = {r["key"]: r["value"] for r in con.execute("SELECT key, value FROM run_info")}
    finally:
        con.close()
    return attempts, info


def _stop_and_check(proc: subprocess.Popen, sig: int, t_signal: float, log: Path, run_dir: Path) -> list[dict]:
    try:
        out, err = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    elapsed_s = time.time() - t_signal
    name = signal.Signals(sig).name
    assert "Traceback" not in err, err
    assert proc.returncode == 128 + sig, (proc.returncode, err[-2000:])
    assert f"{name} received: sweep halted, outputs zeroed" in err, err[-2000:]
    # the exit comes within 2 s of the signal (measured from outside, including the writer's flush)
    assert elapsed_s <= EXIT_WITHIN_S, f"exited {elapsed_s:.2f} s after {name}"
    # no drive after the signal: every block the guard put out later is exactly zero
    drive = read_log(log)
    assert drive.size and drive["peak_v"].max() > 0.0, "the drive log saw no drive at all"
    late = drive[drive["wall_time_s"] > t_signal + BLOCK_S]
    assert np.all(late["peak_v"] == 0.0), f"drive after {name}: {late['peak_v'].max():.3g} V"
    # nothing recorded after the signal is accepted (a record whose last block arrived just
    # before it may be committed just after it, whole: docs/run-layout.md, recorded_wall_s);
    # a record caught by the signal is kept as interrupted, rejected
    attempts, info = _index(run_dir)
    assert attempts, "no point was stored before the signal"
    for a in attempts:
        recorded = read_record(run_dir / a["record_file"]).attrs["recorded_wall_s"]
        if recorded > t_signal:
            assert a["decision"] != "accepted", a
            assert "interrupted" in a["flags"], a
        if "interrupted" in a["flags"]:
            assert a["decision"] == "rejected", a
    assert info["last_finish_reason"] == "halted"
    assert info["last_finish_detail"] == f"{name} received"
    return attempts


@pytest.mark.slow
@pytest.mark.timeout(180)
@pytest.mark.parametrize("sig, fast, seed", [
    (signal.SIGTERM, False, 11), (signal.SIGINT, False, 12), (signal.SIGHUP, False, 13),
    (signal.SIGTERM, True, 14), (signal.SIGINT, True, 15),
])
def test_a_signal_halts_the_window_sweep_at_a_random_moment(tmp_path: Path, sig: int, fast: bool, seed: int):
    log = tmp_path / "drive.csv"
    moment_s = random.Random(seed).uniform(0.0, 0.5 if fast else 2.5)
    proc = _start_window(tmp_path, _plan(tmp_path), fast, log)
    run_dir = _run_dir(tmp_path, proc)
    t_signal = _signal_when(proc, run_dir, sig, moment_s)
    _stop_and_check(proc, sig, t_signal, log, run_dir)


@pytest.mark.slow
@pytest.mark.timeout(180)
def test_a_signal_during_a_record_keeps_it_as_interrupted_and_never_accepted(tmp_path: Path):
    # 3 s records in real time: 1.5 s after a point is stored, the next one is recording
    log = tmp_path / "drive.csv"
    proc = _start_window(tmp_path, _plan(tmp_path, record_s=3.0), False, log)
    run_dir = _run_dir(tmp_path, proc)
    t_signal = _signal_when(proc, run_dir, signal.SIGTERM, 1.5)
    attempts = _stop_and_check(proc, signal.SIGTERM, t_signal, log, run_dir)
    interrupted = [a for a in attempts if "interrupted" in a["flags"]]
    assert len(interrupted) == 1, attempts
    assert interrupted[0]["decision"] != "accepted"
    assert interrupted[0]["n_samples"] < 3.0 * 25600      # cut short, not finished after the signal
    assert sum(a["decision"] == "accepted" for a in attempts) == len(attempts) - 1


@pytest.mark.timeout(120)
def test_a_signal_with_no_sweep_running_closes_the_window_quietly(tmp_path: Path):
    env = {**os.environ, "PYTHONUNBUFFERED": "1", "QT_QPA_PLATFORM": "offscreen"}
    # --run on an empty folder: the window opens (the review just finds no run) and idles
    proc = subprocess.Popen([sys.executable, "-m", "app.cli", "window", "--runs-root", str(tmp_path / "runs"),
                             "--run", str(tmp_path)], cwd=ROOT, env=env, stdin=subprocess.DEVNULL,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        assert proc.stdout is not None
        assert proc.stdout.readline().startswith("flamebode window: open;")    # its event loop runs
        t = time.time()
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert time.time() - t <= EXIT_WITHIN_S
    assert proc.returncode == 128 + signal.SIGTERM, err[-2000:]
    assert "Traceback" not in err and "SIGTERM received: no sweep was running" in err, err[-2000:]


# ---------------------------------------------------------------- the router, in process
def test_stop_signals_act_at_once_off_the_gui_thread_then_reach_the_gui_thread(qtbot) -> None:
    import threading

    from app.ui.stop_signals import StopSignals

    acted: list[tuple[int, str]] = []
    before = {s: signal.getsignal(s) for s in (signal.SIGTERM, signal.SIGHUP)}
    router = StopSignals(act=lambda s: acted.append((s, threading.current_thread().name)),
                         signals=(signal.SIGTERM, signal.SIGHUP))
    router.install()
    try:
        for sig in (signal.SIGTERM, signal.SIGHUP):
            with qtbot.waitSignal(router.received, timeout=5000) as blocker:
                os.kill(os.getpid(), sig)           # the process survives: only noted and routed
            assert blocker.args == [int(sig)]
        # act() ran first, on the watcher thread (the halt never waits for the GUI thread)
        assert acted == [(signal.SIGTERM, "ui-stop-signals"), (signal.SIGHUP, "ui-stop-signals")]
        assert router.noted == [signal.SIGTERM, signal.SIGHUP]
    finally:
        router.uninstall()
        router.deleteLater()
    assert {s: signal.getsignal(s) for s in before} == before
    assert not any(t.name == "ui-stop-signals" for t in threading.enumerate())


def test_an_ignored_signal_stays_ignored(qtbot) -> None:
    from app.ui.stop_signals import StopSignals

    previous = signal.signal(signal.SIGHUP, signal.SIG_IGN)     # as under nohup
    router = StopSignals(signals=(signal.SIGHUP,))
    try:
        router.install()
        assert signal.getsignal(signal.SIGHUP) == signal.SIG_IGN
        router.uninstall()
        assert signal.getsignal(signal.SIGHUP) == signal.SIG_IGN
    finally:
        router.deleteLater()
        signal.signal(signal.SIGHUP, previous)
