"""Shared pytest set-up: Qt offscreen by default, paths to the shipped configs."""

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

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"


@pytest.fixture
def demo_rig_path() -> Path:
    return CONFIGS / "demo-rig.toml"
