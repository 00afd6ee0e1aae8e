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


@pytest.fixture(autouse=True)
def own_window_settings(tmp_path_factory, monkeypatch):
    """The window remembers its layout between launches (app/ui/settings.py): every test, and
    every window it starts as a subprocess, gets a settings file of its own."""
    monkeypatch.setenv("FLAMEBODE_SETTINGS", str(tmp_path_factory.mktemp("settings") / "flamebode.ini"))
    # commissioning records (app/commissioning_record.py) go beside the rig file: never into configs/
    monkeypatch.setenv("FLAMEBODE_COMMISSIONING_DIR", str(tmp_path_factory.mktemp("commissioning")))


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
