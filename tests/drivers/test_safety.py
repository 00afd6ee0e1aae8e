"""Tests of drivers.safety: outputs reach zero on SIGTERM, SIGINT, normal exit and uncaught errors.

The signal and exit paths run in real child processes: the child drives a stand-in output
whose "hardware" is a JSON file holding what the output is doing; the parent signals the
child and reads the file after it has gone. Exit status 128 + signal number for a process
ended by a signal it handles is a POSIX shell convention (common practice); Python exits
with status 1 after an uncaught exception (Python documentation, sys.exit / excepthook).
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import threading
from pathlib import Path

import pytest

from drivers import safety

ROOT = Path(__file__).resolve().parents[2]

CHILD = r'''
import json, os, signal, sys, time
import numpy as np
from drivers.guard import CeilingGuard
from drivers import safety

state_path, mode = sys.argv[1], sys.argv[2]


class FileOutput:
    """Stand-in output: what it would put on the wire is written to a JSON file."""

    def __init__(self):
        self.guard = CeilingGuard(2.0, 10000.0, 0.01)
        self.events = []

    def publish(self, block):
        s = self.guard.status()
        state = {"events": self.events, "amplitude_v": s.amplitude_v,
                 "last_peak_v": float(np.max(np.abs(block))) if block.size else None}
        tmp = state_path + ".tmp"
        with open(tmp, "w") as f:
            json.dump(state, f)
        os.replace(tmp, state_path)

    def drive_block(self):
        self.publish(self.guard.render(100))

    def halt(self):
        self.guard.halt()
        self.events.append("halt")
        self.publish(self.guard.render(100))   # the next samples on the wire

    def stop(self):
        self.guard.ramp_down()
        block = self.guard.render(1000)
        self.events.append("stop")
        self.publish(block[-100:])


out = FileOutput()
if mode != "unregistered":
    safety.register(out)
if mode in ("sigterm", "sigint"):
    safety.install_signal_handlers()
out.guard.request(100.0, 1.5)
for _ in range(20):
    out.drive_block()
ready = f"ready {out.guard.status().amplitude_v!r}"
if mode in ("exit", "unregistered"):
    print(ready, flush=True)
    sys.exit(0)
if mode == "exception":
    print(ready, flush=True)
    raise RuntimeError("boom in the measurement loop")
try:
    print(ready, flush=True)   # inside the try: a Ctrl-C right after this is still caught
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        out.drive_block()
        time.sleep(0.005)
except KeyboardInterrupt:
    out.events.append("keyboardinterrupt")
    sys.exit(130)
'''


def _run_child(tmp_path: Path, mode: str, send: signal.Signals | None = None) -> tuple[int, dict, str]:
    script = tmp_path / "child.py"
    script.write_text(CHILD)
    state_path = tmp_path / "state.json"
    with subprocess.Popen([sys.executable, str(script), str(state_path), mode], cwd=ROOT,
                          stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) as proc:
        ready = proc.stdout.readline().split()
        assert ready[:1] == ["ready"], proc.communicate(timeout=30)[1]
        assert float(ready[1]) == 1.5, "the child never drove the output"
        if send is not None:
            proc.send_signal(send)
        _, err = proc.communicate(timeout=60)
    return proc.returncode, json.loads(state_path.read_text()), err


def test_sigterm_zeroes_then_exits(tmp_path):
    code, state, err = _run_child(tmp_path, "sigterm", signal.SIGTERM)
    assert code == 128 + signal.SIGTERM, err
    assert state["events"][0] == "halt" and "stop" in state["events"]
    assert state["amplitude_v"] == 0.0 and state["last_peak_v"] == 0.0


def test_sigint_zeroes_and_still_raises_keyboard_interrupt(tmp_path):
    code, state, err = _run_child(tmp_path, "sigint", signal.SIGINT)
    assert code == 130, err
    assert state["events"][:2] == ["halt", "keyboardinterrupt"]   # zeroed before the exception
    assert state["events"][-1] == "stop"                           # and stopped at exit
    assert state["amplitude_v"] == 0.0 and state["last_peak_v"] == 0.0


def test_normal_exit_zeroes_a_forgotten_output(tmp_path):
    code, state, err = _run_child(tmp_path, "exit")
    assert code == 0, err
    assert state["events"] == ["halt", "stop"]
    assert state["amplitude_v"] == 0.0 and state["last_peak_v"] == 0.0


def test_unregistered_output_is_left_driving(tmp_path):
    # control case: shows the check above can fail (nothing zeroes an unregistered output)
    code, state, err = _run_child(tmp_path, "unregistered")
    assert code == 0, err
    assert state["events"] == [] and state["last_peak_v"] > 1.0


def test_uncaught_exception_zeroes(tmp_path):
    code, state, err = _run_child(tmp_path, "exception")
    assert code == 1 and "boom in the measurement loop" in err
    assert state["events"] == ["halt", "stop"]
    assert state["amplitude_v"] == 0.0 and state["last_peak_v"] == 0.0


# --------------------------------------------------------------------------- in-process
class _Recorder:
    def __init__(self, fail_halt: bool = False):
        self.calls: list[str] = []
        self.fail_halt = fail_halt

    def halt(self):
        self.calls.append("halt")
        if self.fail_halt:
            raise OSError("device gone")

    def stop(self):
        self.calls.append("stop")


@pytest.fixture
def clean_registry():
    before = safety.registered()
    yield
    for obj in safety.registered():
        if obj not in before:
            safety.unregister(obj)


def test_guarded_zeroes_on_exception_and_reraises(clean_registry):
    rec = _Recorder()
    with pytest.raises(ValueError, match="bad point"):
        with safety.guarded(rec):
            assert rec in safety.registered()
            raise ValueError("bad point")
    assert rec.calls == ["halt", "stop"]
    assert rec not in safety.registered()


def test_guarded_leaves_a_normal_exit_alone(clean_registry):
    rec = _Recorder()
    with safety.guarded(rec) as same:
        assert same is rec
    assert rec.calls == [] and rec in safety.registered()


def test_guarded_reports_a_failing_halt_on_the_original_error(clean_registry):
    rec = _Recorder(fail_halt=True)
    with pytest.raises(KeyboardInterrupt) as info:
        with safety.guarded(rec):
            raise KeyboardInterrupt
    assert rec.calls == ["halt", "stop"]          # stop still tried after halt failed
    assert any("device gone" in note for note in info.value.__notes__)


def test_halt_all_continues_past_a_failure(clean_registry):
    bad, good = _Recorder(fail_halt=True), _Recorder()
    stop_only = type("StopOnly", (), {"stop": lambda self: calls.append("stop")})()
    calls: list[str] = []
    for obj in (bad, good, stop_only):
        safety.register(obj)
    errors = safety.halt_all()
    assert len(errors) == 1 and isinstance(errors[0], OSError)
    assert bad.calls == ["halt"] and good.calls == ["halt"] and calls == ["stop"]


def test_register_refuses_objects_that_cannot_be_zeroed(clean_registry):
    with pytest.raises(TypeError, match="neither halt"):
        safety.register(object())
    rec = _Recorder()
    safety.register(rec)
    safety.register(rec)
    assert safety.registered().count(rec) == 1


def test_signal_handlers_install_once_restore_and_refuse_other_threads():
    previous = signal.getsignal(signal.SIGTERM)
    safety.install_signal_handlers()
    try:
        safety.install_signal_handlers()   # idempotent: must not chain to itself
        assert safety.signal_handlers_installed()
        assert safety._previous_handlers[signal.SIGTERM] is previous
        errors: list[BaseException] = []

        def other():
            try:
                safety.install_signal_handlers()
            except RuntimeError as exc:
                errors.append(exc)

        t = threading.Thread(target=other)
        t.start()
        t.join(timeout=10)
        assert len(errors) == 1 and "main thread" in str(errors[0])
    finally:
        safety.uninstall_signal_handlers()
    assert signal.getsignal(signal.SIGTERM) is previous
    assert not safety.signal_handlers_installed()
