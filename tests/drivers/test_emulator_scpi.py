"""The full FTF job through the instrument protocol: an SCPI generator in a process of its own.

flamebode runs as a real process with the ``scpi+simulated`` back-end: the generator is the
loopback SCPI emulator (tests/drivers/scpi_emulator.py, served as a separate process on a
fixed loopback port, reached through pyvisa-py), and the simulated burner records the
response to what the generator reports it outputs (its ``SOUR:FREQ?``/``SOUR:VOLT?``/``OUTP?``
read-back): the instrument's settings feed the physics. Checks: an FTF sweep of 8 points
recovers the simulator's truth (``drivers.simulated.truth.true_ftf``) within the tool's own
95 % intervals at no fewer points than honest intervals reach in all but one run in a thousand
(``emulator_rig.coverage_floor``; below it, the same plan in-process tells an interval matter
from a fault of the SCPI path, and the failure names which); the generator killed mid-sweep gives a named
fault, the stored points are kept, and ``flamebode resume`` against the restarted instrument
finishes the run and leaves its output off at zero.

Needs pyvisa and pyvisa-py (skips with the reason otherwise). About 40 s.
"""

from __future__ import annotations

import json
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from emulator_rig import coverage_floor, run_points, within
from run_watch import ROOT, committed_attempts, run_cli

pytest.importorskip("pyvisa", reason="pyvisa not installed")
pytest.importorskip("pyvisa_py", reason="pyvisa-py not installed")
pytestmark = pytest.mark.slow

DEMO = ROOT / "configs" / "demo-rig.toml"
EMULATOR = Path(__file__).with_name("scpi_emulator.py")
FREQS_HZ = [150.0, 250.0, 350.0, 400.0, 450.0, 550.0, 850.0, 950.0]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Instrument:
    """The SCPI emulator as a process: start, kill -9, start again on the same port."""

    def __init__(self, folder: Path) -> None:
        self.port, self.status, self.proc = free_port(), folder / "scpi-status.jsonl", None

    def start(self) -> None:
        self.proc = subprocess.Popen([sys.executable, str(EMULATOR), "--port", str(self.port), "--status",
                                      str(self.status)], stdout=subprocess.PIPE, text=True)
        assert "scpi emulator on port" in self.proc.stdout.readline()

    def kill(self) -> float:
        self.proc.kill()
        self.proc.wait(10)
        self.proc.stdout.close()
        return time.time()

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            self.proc.wait(10)
            self.proc.stdout.close()

    def lines(self) -> list[dict]:
        out = []
        for line in self.status.read_text().splitlines():
            try:
                out.append(json.loads(line))
            except json.JSONDecodeError:
                pass
        return out


def rig_file(folder: Path, port: int) -> Path:
    path = folder / "rig.toml"
    path.write_text(DEMO.read_text(encoding="utf-8") + f"""
[hardware.scpi]
resource = "TCPIP0::127.0.0.1::{port}::SOCKET"
timeout = "2 s"
ramp_step = "20 ms"
""", encoding="utf-8")
    return path


def plan_file(folder: Path, freqs: list[float]) -> Path:
    path = folder / "plan.toml"
    values = ", ".join(f"{f:g}" for f in freqs)
    path.write_text(f'name = "scpi emulator"\nscenario = "{ROOT / "configs" / "demo-scenario.toml"}"\n'
                    f'[frequencies]\nvalues = [{values}]\n[amplitude]\nvalues = [0.05]\nbasis = "peak"\n'
                    f'[timing]\nrecord = "1 s"\nsettle = "0.2 s"\ntuning_window = "0.2 s"\n'
                    f'tuning_discard = "0.05 s"\n', encoding="utf-8")
    return path


def inside_count(run_dir: Path) -> int:
    from app.rig import load_rig
    from drivers.simulated import SimulatedBurner, truth

    sim = SimulatedBurner(load_rig(DEMO))
    n = 0
    for p in run_points(run_dir).values():
        if "freq_hz" in p:
            h = truth.true_ftf(sim, p["freq_hz"], 0.05)
            n += within(p, {"ftf_re": h.real, "ftf_im": h.imag})
    return n


@pytest.fixture
def instrument(tmp_path):
    inst = Instrument(tmp_path)
    inst.start()
    try:
        yield inst
    finally:
        inst.stop()


def test_full_ftf_sweep_through_the_scpi_generator(instrument, tmp_path):
    rig, plan = rig_file(tmp_path, instrument.port), plan_file(tmp_path, FREQS_HZ)
    out = run_cli("sweep", str(plan), "--rig", str(rig), "--backend", "scpi+simulated", "--out",
                  str(tmp_path / "run"), timeout_s=150)
    assert out.returncode == 0 and "8 of 8 points" in out.stdout, out.stdout[-3000:] + out.stderr[-2000:]
    inside = inside_count(tmp_path / "run")
    floor = coverage_floor(len(FREQS_HZ))
    if inside < floor:
        ref = run_cli("sweep", str(plan), "--rig", str(DEMO), "--backend", "simulated", "--fast", "--out",
                      str(tmp_path / "in-process"))
        assert ref.returncode == 0, ref.stdout[-2000:]
        reference = inside_count(tmp_path / "in-process")
        if reference < floor:
            pytest.fail(f"the tool's own 95 % intervals cover the truth at only {reference}/{len(FREQS_HZ)} "
                        f"points in-process (SCPI path: {inside}): the intervals, not the SCPI path, are wrong")
        pytest.fail(f"SCPI path: truth inside at {inside} of {len(FREQS_HZ)} points, fewer than the {floor} honest "
                    f"intervals reach (in-process: {reference})\n{out.stdout[-3000:]}")
    last = instrument.lines()[-1]
    assert last["output"] is False, last                    # the generator's output off at the end


def test_generator_killed_mid_sweep_is_a_named_fault_and_the_run_resumes(instrument, tmp_path):
    rig, plan = rig_file(tmp_path, instrument.port), plan_file(tmp_path, FREQS_HZ[:5])
    run_dir = tmp_path / "run"
    sweep = subprocess.Popen([sys.executable, "-m", "app.cli", "sweep", str(plan), "--rig", str(rig), "--backend",
                              "scpi+simulated", "--out", str(run_dir)], cwd=ROOT, stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 90
        while len(committed_attempts(run_dir)) < 2 and sweep.poll() is None and time.monotonic() < deadline:
            time.sleep(0.1)
        if sweep.poll() is not None or len(committed_attempts(run_dir)) < 2:
            pytest.fail("the sweep ended before two points were stored: " + "".join(sweep.communicate(timeout=10)))
        instrument.kill()
        stdout, stderr = sweep.communicate(timeout=60)
    finally:
        if sweep.poll() is None:
            sweep.kill()
            sweep.wait(10)
    assert sweep.returncode != 0 and "Traceback" not in stderr, (stdout + stderr)[-3000:]
    kept = run_points(run_dir)
    faults = kept.pop(-1, {}).get("faults", [])
    assert faults and all(f["name"] in ("driver-error", "backend-timeout", "output-unconfirmed") for f in faults), faults
    assert len(kept) >= 2, kept
    # the instrument comes back (power-cycled: output off, as after *RST); the run resumes on it
    instrument.start()
    out = run_cli("resume", str(run_dir), timeout_s=120)
    assert out.returncode == 0, out.stdout[-3000:] + out.stderr[-2000:]
    done = run_points(run_dir)
    done.pop(-1, None)
    assert sorted(p["freq_hz"] for p in done.values()) == FREQS_HZ[:5], out.stdout[-2000:]
    time.sleep(0.2)
    last = instrument.lines()[-1]
    assert last["output"] is False, last                    # drive at zero, as the instrument reports it
