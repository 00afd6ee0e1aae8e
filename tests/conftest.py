"""Shared pytest set-up: Qt offscreen by default, a private audio server where none is
configured and PulseAudio is installed (tests/audio_server.py), paths to the shipped configs."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from hypothesis import settings

# Property tests are derandomised so CI is repeatable: the same examples on every run and
# every machine (a failure is a real failure, reproducible at once).
settings.register_profile("flamebode", derandomize=True, print_blob=True)
settings.load_profile("flamebode")

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
# The window remembers its layout between launches (app/ui/settings.py, in $XDG_CONFIG_HOME):
# tests, and the windows they start as subprocesses, keep theirs in a folder of their own.
import tempfile  # noqa: E402

os.environ["XDG_CONFIG_HOME"] = tempfile.mkdtemp(prefix="flamebode-test-config-")


def pytest_configure(config: pytest.Config) -> None:
    # before any test module imports PortAudio, so its device list sees the server
    import audio_server

    config.stash[_AUDIO] = audio_server.start()


def pytest_unconfigure(config: pytest.Config) -> None:
    import audio_server

    audio_server.stop()


_AUDIO = pytest.StashKey[str]()

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"


@pytest.fixture
def demo_rig_path() -> Path:
    return CONFIGS / "demo-rig.toml"
