"""Fixtures for engine tests: the demo rig."""

from __future__ import annotations

import pytest

from app.rig import Rig, load_rig
from engine_helpers import CONFIGS


@pytest.fixture(scope="session")
def rig() -> Rig:
    return load_rig(CONFIGS / "demo-rig.toml")
