"""Test helper (not a test module): a private audio server with the rig emulator's two sinks,
the emulator as a separate process, and the reading of a run's points and the emulator's truth.

The server lives in its own runtime folder (never the suite's shared one, so a test may kill
and restart it): sink ``fb_drive`` (2 channels: flamebode plays, the emulator listens on its
monitor) and ``fb_sense`` (6 channels: the emulator plays, flamebode records its monitor).
flamebode is pointed at them with ``PULSE_SINK``/``PULSE_SOURCE`` in its own environment.
"""

from __future__ import annotations

import cmath
import json
import math
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import audio_server
import pytest
from drivers.emulator.files import read_status

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "emulator-rig.toml"
SINKS = {"fb_drive": 2, "fb_sense": 6}


def no_audio_reason() -> str:
    """Why the emulator's audio tests cannot run here ('' when they can)."""
    missing = [p for p in ("pulseaudio", "pactl") if shutil.which(p) is None]
    if missing:
        return f"{', '.join(missing)} not found (apt packages pulseaudio pulseaudio-utils): no audio server"
    try:
        import sounddevice  # noqa: F401
    except OSError as exc:
        return f"PortAudio library missing ({exc}); apt package libportaudio2"
    except ImportError as exc:
        return f"sounddevice not installed ({exc})"
    return ""


class PrivateServer:
    """A PulseAudio server of the test's own, with the emulator sinks; killable and restartable."""

    def __init__(self) -> None:
        self.runtime = tempfile.mkdtemp(prefix="fb-emu-pulse-")
        self.env = audio_server.private_server_env(self.runtime)

    def start(self) -> str:
        return audio_server.start_private(self.runtime, SINKS)

    def kill(self) -> None:
        audio_server.kill_private(self.runtime)

    def close(self) -> None:
        self.kill()
        shutil.rmtree(self.runtime, ignore_errors=True)

    def client_env(self) -> dict[str, str]:
        """What flamebode needs in its environment to use the emulator's sinks."""
        return {"PULSE_RUNTIME_PATH": self.env["PULSE_RUNTIME_PATH"], "PULSE_SERVER": self.env["PULSE_SERVER"],
                "PULSE_STATE_PATH": self.env["PULSE_STATE_PATH"], "PULSE_SINK": "fb_drive",
                "PULSE_SOURCE": "fb_sense.monitor"}


class Emulator:
    """``python -m drivers.emulator audio`` as a separate process, with its truth and status files."""

    def __init__(self, server: PrivateServer, folder: Path, mode: str = "audio", extra: tuple[str, ...] = ()) -> None:
        self.truth, self.status, self.log = folder / "truth.json", folder / "status.jsonl", folder / "emulator.log"
        cmd = [sys.executable, "-m", "drivers.emulator", mode, "--rig", str(RIG), "--truth", str(self.truth),
               "--status", str(self.status), *extra]
        if mode == "audio":
            cmd += ["--drive-source", "fb_drive.monitor", "--sensor-sink", "fb_sense"]
        env = {**os.environ, **(server.env if server else {})}
        self._log = open(self.log, "w")
        self.proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=self._log, stderr=subprocess.STDOUT)

    def wait_for(self, event: str, timeout_s: float = 20.0, after: float = 0.0) -> dict[str, Any] | None:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            for line in read_status(self.status):
                if line.get("event") == event and line["time"] >= after:
                    return line
            if self.proc.poll() is not None:
                return None
            time.sleep(0.1)
        return None

    def lines(self) -> list[dict[str, Any]]:
        return read_status(self.status)

    def truth_points(self) -> list[dict[str, Any]]:
        try:
            return json.loads(self.truth.read_text(encoding="utf-8"))["points"]
        except (OSError, ValueError, KeyError):
            return []

    def truth_at(self, freq_hz: float) -> dict[str, Any] | None:
        """The emulator's truth at the frequency it was driven nearest to ``freq_hz`` (within 0.1 Hz)."""
        near = [p for p in self.truth_points() if abs(p["freq_hz"] - freq_hz) <= 0.1]
        return max(near, key=lambda p: p["blocks"]) if near else None

    def summary(self) -> str:
        """The emulator's events, last counts and log tail (for a failure message)."""
        lines = self.lines()
        events = [ln for ln in lines if "event" in ln]
        last = lines[-1] if lines else {}
        try:
            log = self.log.read_text(errors="replace")[-1500:]
        except OSError:
            log = ""
        return f"\nemulator events: {events}\nlast status: {last}\nemulator log: {log}"

    def stop(self) -> str:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(5)
        self._log.close()
        return self.log.read_text(errors="replace")


def run_points(run_dir: Path) -> dict[int, dict[str, Any]]:
    """The latest analysis of every point of a run: freq, gain, phase and their 95 % half-widths."""
    con = sqlite3.connect(f"{(run_dir / 'index.sqlite').as_uri()}?mode=ro", uri=True)
    try:
        rows = con.execute(
            "SELECT a.point_index, p.freq_hz, an.gain, an.phase_rad, an.gain_ci95, an.phase_ci95_rad, a.overflows "
            "FROM analyses an JOIN attempts a ON a.attempt_id = an.attempt_id "
            "JOIN points p ON p.point_index = a.point_index ORDER BY an.analysis_id").fetchall()
        faults = con.execute("SELECT name, message FROM faults ORDER BY fault_id").fetchall()
    finally:
        con.close()
    out = {r[0]: {"freq_hz": r[1], "gain": r[2], "phase_rad": r[3], "gain_ci95": r[4], "phase_ci95_rad": r[5],
                  "overflows": r[6]} for r in rows if r[2] is not None}
    out_faults = [{"name": n, "message": m} for n, m in faults]
    return out if not out_faults else {**out, -1: {"faults": out_faults}}


def within(point: dict[str, Any], true: dict[str, Any]) -> bool:
    """Truth inside the tool's own 95 % intervals, gain and phase both."""
    h = complex(true["ftf_re"], true["ftf_im"])
    dphi = math.remainder(point["phase_rad"] - cmath.phase(h), 2 * math.pi)
    return abs(point["gain"] - abs(h)) <= point["gain_ci95"] and abs(dphi) <= point["phase_ci95_rad"]


def coverage_floor(n_points: int, alpha: float = 1e-3) -> int:
    """The fewest of ``n_points`` that honest 95 % intervals put the truth inside (gain and phase both).

    A point's truth falls inside both its gain and its phase 95 % interval with probability at
    least 0.95² = 0.9025, whatever the correlation of the two errors (Šidák's inequality for
    jointly normal errors; Šidák 1967, J. Am. Stat. Assoc. 62, 626). The count of such points is
    then binomial; the floor is the largest count k with P(count < k) <= ``alpha``
    (scipy.stats.binom), so honest intervals fail the check at most once in 1/alpha runs. A
    fixed "90 % of 8 points" demands all 8, which honest intervals meet only ~45 % of the time.

    The binomial law takes the points' misses as independent. Errors shared by every point (the
    sensors' calibration errors) make misses come together: with 60 % of the error variance
    shared, honest runs would fail about 3 % of the time. The emulator's rig is the same in every
    run (its scenario's seed fixes the sensors' errors; only the noise is new), so the shared part
    is fixed, not drawn anew: it moves which points sit near their interval's edge, and the runs on
    record put 7 to 10 of 10 points inside, well above the floor of 5.
    """
    from scipy.stats import binom

    p = 0.95 ** 2
    return max(k for k in range(n_points + 1) if binom.cdf(k - 1, n_points, p) <= alpha)


def plan_text(name: str, freqs_hz: list[float], record_s: float = 1.0) -> str:
    """An FTF plan at the given frequencies (5 % peak forcing, short settle and tuning windows)."""
    values = ", ".join(f"{f:g}" for f in freqs_hz)
    return (f'name = "{name}"\n[frequencies]\nvalues = [{values}]\n'
            f'[amplitude]\nvalues = [0.05]\nbasis = "peak"\n[timing]\nrecord = "{record_s:g} s"\n'
            f'settle = "0.2 s"\ntuning_window = "0.2 s"\ntuning_discard = "0.05 s"\n')


LOAD_FAULTS = ("flame-out", "drive-not-answering", "output-above-command", "backend-timeout", "sensor-dead",
               "audio-server-lost")   # a stream that died under load (PortAudio: "stopped by itself")


def resume_until_done(run_dir: Path, first, emu: "Emulator", tries: int = 3) -> tuple[Any, list[str]]:
    """Resume a run that a real-time fault ended until it completes (at most ``tries`` times).

    On a loaded machine the audio server or the emulator misses a deadline now and then; the
    emulator then plays a gap, and flamebode, seeing the light or the reference vanish, ends the
    sweep with a named fault, keeping every stored point. A lab resumes; so does the test, and
    says so. Only the faults such a gap can cause are resumed, and only when the emulator counted
    a missed deadline of its own or of the server."""
    from run_watch import run_cli

    out, resumed = first, []
    for _ in range(tries):
        if out.returncode == 0:
            break
        faults = [ln for ln in out.stdout.splitlines() if "FAULT" in ln]
        counts = emu.lines()[-1] if emu.lines() else {}
        missed = sum(int(counts.get(k, 0)) for k in ("output_underflow", "starved", "input_overflow"))
        if not faults or not all(any(f"FAULT {name}:" in ln for name in LOAD_FAULTS) for ln in faults) or not missed:
            break
        resumed.append(faults[-1].strip())
        out = run_cli("resume", str(run_dir), timeout_s=150)
    return out, resumed


@pytest.fixture
def server():
    """A private audio server for one test (skipped with the reason where none can start)."""
    srv = PrivateServer()
    why = srv.start()
    if why:
        srv.close()
        pytest.skip(f"no audio server: {why}")
    try:
        yield srv
    finally:
        srv.close()
