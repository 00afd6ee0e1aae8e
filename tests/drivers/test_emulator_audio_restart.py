"""The audio server restarted in the middle of a sound-card sweep against the rig emulator.

flamebode (a real process, ``flamebode sweep --backend soundcard``) sweeps through the test's
own PulseAudio server into the emulator (tests/drivers/emulator_rig.py). After two points are
committed, the server is killed and started again. Checks: flamebode ends the sweep with a
named fault (``audio-server-lost``, or a
``backend-timeout``), keeps every stored point, the emulator reconnects by itself and the
drive it then receives is zero (nothing plays on after the fault), and ``flamebode resume``
measures the remaining points through the restarted server.

Needs pulseaudio, pactl and PortAudio (skips with the reason otherwise). About 60 s.
"""

from __future__ import annotations

import subprocess
import sys
import time

import pytest

from emulator_rig import server  # noqa: F401  (the audio-server fixture, used by name)
from emulator_rig import (RIG, ROOT, Emulator, no_audio_reason, plan_text, resume_until_done, run_points)
from run_watch import committed_attempts, run_cli

_REASON = no_audio_reason()
pytestmark = [pytest.mark.audio, pytest.mark.slow,
              pytest.mark.skipif(bool(_REASON), reason=_REASON or "audio server available")]

FREQS_HZ = [150.0, 250.0, 350.0, 450.0, 550.0, 850.0]


def test_audio_server_restarted_mid_sweep_is_a_named_fault_with_the_drive_at_zero_and_the_run_resumes(
        server, tmp_path, monkeypatch):
    emu = Emulator(server, tmp_path)
    run_dir = tmp_path / "run"
    try:
        assert emu.wait_for("connected"), emu.summary()
        for key, value in server.client_env().items():
            monkeypatch.setenv(key, value)
        plan = tmp_path / "plan.toml"
        plan.write_text(plan_text("emulator restart", FREQS_HZ))
        sweep = subprocess.Popen([sys.executable, "-m", "app.cli", "sweep", str(plan), "--rig", str(RIG),
                                  "--backend", "soundcard", "--out", str(run_dir)], cwd=ROOT,
                                 stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        try:
            deadline = time.monotonic() + 90
            while len(committed_attempts(run_dir)) < 2 and sweep.poll() is None and time.monotonic() < deadline:
                time.sleep(0.2)
            if sweep.poll() is not None or len(committed_attempts(run_dir)) < 2:
                sweep.kill()
                early_out, early_err = sweep.communicate(timeout=10)
                pytest.fail("the sweep ended before two points were stored: " + early_out[-3000:] + early_err[-1500:]
                            + emu.summary())
            killed_at = time.time()
            server.kill()
            time.sleep(1.0)
            assert server.start() == "", "the audio server did not come back"
            stdout, stderr = sweep.communicate(timeout=60)
        finally:
            if sweep.poll() is None:
                sweep.kill()
                sweep.wait(10)
        text = stdout + stderr
        assert sweep.returncode != 0 and "Traceback" not in stderr, text[-3000:]
        assert "audio-server-lost" in text or "FAULT backend-timeout" in text, text[-3000:]
        kept = run_points(run_dir)
        faults = kept.pop(-1, {}).get("faults", [])
        assert any(f["name"] in ("audio-server-lost", "backend-timeout") for f in faults), faults
        assert len(kept) >= 2, kept                       # nothing stored was lost
        # the emulator found the server again by itself; what it received after that: no drive
        back = emu.wait_for("audio-server-back", timeout_s=20, after=killed_at)
        assert back is not None, emu.summary()
        time.sleep(1.5)
        after = [s for s in emu.lines() if "drive_peak_v" in s and s["time"] > back["time"]]
        assert len(after) >= 3 and all(s["drive_peak_v"] == 0.0 for s in after), after
        assert any(s.get("event") == "audio-server-lost" and s["time"] >= killed_at - 1 for s in emu.lines())

        # the run resumes through the restarted server
        out, resumed = resume_until_done(run_dir, run_cli("resume", str(run_dir), timeout_s=120), emu)
        print("resumed again after:", resumed)
        assert out.returncode == 0, out.stdout[-3000:] + out.stderr[-2000:] + emu.summary()
        done = run_points(run_dir)
        done.pop(-1, None)
        assert sorted(p["freq_hz"] for p in done.values()) == FREQS_HZ, (done, out.stdout[-2000:])
    finally:
        time.sleep(2.0)      # the end of flamebode's last ramp-down is still on its way through the loop
        emu.stop()
    tail = [s for s in emu.lines() if "drive_peak_v" in s][-4:]
    assert tail and all(s["drive_peak_v"] == 0.0 for s in tail), tail
