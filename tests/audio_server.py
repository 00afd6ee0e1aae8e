"""Test helper (not a test module): a private PulseAudio server with a null sink for the audio tests.

When the tests run without ``.ci/run`` (which starts one through ``.ci/start-audio``) and
``pulseaudio`` and ``pactl`` are installed, :func:`start` brings up the same private server
(a null sink "rig" whose monitor is the capture source, ``norewinds=1`` so it keeps real
time) in a temporary runtime folder and points ``PULSE_SERVER`` at it before any test imports
PortAudio; :func:`stop` shuts it down. Without those programs nothing happens and the audio
tests skip, naming the missing package.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
import time

SINK = "rig"
_started: dict[str, str] = {}


def _pactl(*args: str, env: dict[str, str]) -> bool:
    try:
        return subprocess.run(["pactl", *args], env=env, capture_output=True, timeout=10).returncode == 0
    except (OSError, subprocess.TimeoutExpired):
        return False


def start(rate_hz: int = 48000) -> str:
    """Start a private server if none is configured; returns why not, or '' when one answers."""
    if os.environ.get("PULSE_SERVER"):
        return ""
    missing = [p for p, pkg in (("pulseaudio", "pulseaudio"), ("pactl", "pulseaudio-utils")) if shutil.which(p) is None]
    if missing:
        return f"{', '.join(missing)} not found (apt packages pulseaudio pulseaudio-utils)"
    runtime = tempfile.mkdtemp(prefix="flamebode-pulse-")
    env = {**os.environ, "PULSE_RUNTIME_PATH": runtime, "PULSE_SERVER": f"unix:{runtime}/native",
           "PULSE_STATE_PATH": os.path.join(runtime, "state")}
    os.makedirs(env["PULSE_STATE_PATH"], exist_ok=True)
    why = _launch(runtime, env, [f"--load=module-null-sink sink_name={SINK} rate={rate_hz} channels=2 norewinds=1"])
    if why:
        return why
    if not (_pactl("set-default-sink", SINK, env=env) and _pactl("set-default-source", f"{SINK}.monitor", env=env)):
        stop_env(env)
        return "pulseaudio started but its null sink could not be made the default"
    for key in ("PULSE_RUNTIME_PATH", "PULSE_SERVER", "PULSE_STATE_PATH"):
        os.environ[key] = env[key]
        _started[key] = env[key]
    return ""


def stop_env(env: dict[str, str]) -> None:
    try:
        subprocess.run(["pulseaudio", "--kill"], env=env, capture_output=True, timeout=10)
    except (OSError, subprocess.SubprocessError):
        pass
    shutil.rmtree(env.get("PULSE_RUNTIME_PATH", ""), ignore_errors=True)


def stop() -> None:
    """Stop the server :func:`start` started (none started: nothing to do)."""
    if _started:
        stop_env({**os.environ, **_started})
        for key in _started:
            os.environ.pop(key, None)
        _started.clear()


# ---------------------------------------------------------------------------- the rig emulator's sinks
# Two multichannel null sinks in float32 (no quantisation between the two processes), each with
# the channel map the ALSA "pulse" plugin uses for that many channels, so PulseAudio never
# remixes: channel k played is channel k recorded.
ALSA_CHANNEL_MAPS = {1: "mono", 2: "front-left,front-right",
                     4: "front-left,front-right,rear-left,rear-right",
                     6: "front-left,front-right,rear-left,rear-right,front-center,lfe",
                     8: "front-left,front-right,rear-left,rear-right,front-center,lfe,side-left,side-right"}


def null_sink_args(name: str, channels: int, rate_hz: int = 48000) -> list[str]:
    """module-null-sink arguments for an emulator sink of ``channels`` channels."""
    return [f"sink_name={name}", f"rate={rate_hz}", f"channels={channels}",
            f"channel_map={ALSA_CHANNEL_MAPS[channels]}", "format=float32le", "norewinds=1"]


def load_null_sink(name: str, channels: int, env: dict[str, str] | None = None) -> str:
    """Load an emulator sink on the server ``env`` points at; returns the module index ('' on failure)."""
    try:
        out = subprocess.run(["pactl", "load-module", "module-null-sink", *null_sink_args(name, channels)],
                             env=env or dict(os.environ), capture_output=True, text=True, timeout=10)
    except (OSError, subprocess.TimeoutExpired):
        return ""
    return out.stdout.strip() if out.returncode == 0 else ""


def unload_module(index: str, env: dict[str, str] | None = None) -> None:
    if index:
        _pactl("unload-module", index, env=env or dict(os.environ))


def private_server_env(runtime: str) -> dict[str, str]:
    """Environment of a private server living in ``runtime`` (made if missing)."""
    os.makedirs(os.path.join(runtime, "state"), exist_ok=True)
    return {**os.environ, "PULSE_RUNTIME_PATH": runtime, "PULSE_SERVER": f"unix:{runtime}/native",
            "PULSE_STATE_PATH": os.path.join(runtime, "state")}


def start_private(runtime: str, sinks: dict[str, int]) -> str:
    """Start (or restart) a server in ``runtime`` with the emulator sinks ``{name: channels}``
    loaded at start-up; returns '' when it answers, or why not."""
    env = private_server_env(runtime)
    return _launch(runtime, env, [f"--load=module-null-sink {' '.join(null_sink_args(n, c))}"
                                  for n, c in sinks.items()])


def _launch(runtime: str, env: dict[str, str], loads: list[str]) -> str:
    """Start a daemon with its socket in ``runtime`` and the module ``loads``; '' once it answers."""
    cmd = ["pulseaudio", "--daemonize=yes", "-n", "--exit-idle-time=-1", f"--log-target=file:{runtime}/pulse.log",
           f"--load=module-native-protocol-unix socket={runtime}/native auth-anonymous=1", *loads]
    try:
        subprocess.run(cmd, env=env, capture_output=True, timeout=20, check=True)
    except (OSError, subprocess.SubprocessError) as exc:
        return f"pulseaudio did not start ({exc})"
    deadline = time.monotonic() + 5.0
    while not _pactl("info", env=env) and time.monotonic() < deadline:
        time.sleep(0.1)
    return "" if _pactl("info", env=env) else "pulseaudio started but does not answer"


def kill_private(runtime: str) -> None:
    """Stop the server in ``runtime`` at once (its clients lose it mid-stream)."""
    try:
        subprocess.run(["pulseaudio", "--kill"], env=private_server_env(runtime), capture_output=True, timeout=10)
    except (OSError, subprocess.SubprocessError):
        pass
    deadline = time.monotonic() + 5.0
    while _pactl("info", env=private_server_env(runtime)) and time.monotonic() < deadline:
        time.sleep(0.1)
