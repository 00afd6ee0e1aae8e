"""Shared pytest set-up: Qt offscreen by default, paths to the shipped configs."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"


@pytest.fixture
def demo_rig_path() -> Path:
    return CONFIGS / "demo-rig.toml"
