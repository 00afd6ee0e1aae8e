"""Fixtures for the run-service tests: one small stored run made headless by ``flamebode sweep``
on the simulated burner (three points), copied fresh for each test that changes it."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
CONFIGS = ROOT / "configs"


def _write_inputs(folder: Path) -> Path:
    scenario = folder / "scenario.toml"
    text = (CONFIGS / "demo-scenario.toml").read_text(encoding="utf-8")
    scenario.write_text(text.replace('rig = "demo-rig.toml"', f'rig = "{CONFIGS / "demo-rig.toml"}"'),
                        encoding="utf-8")
    plan = folder / "plan.toml"
    plan.write_text(
        f'name = "service test"\nrig = "{CONFIGS / "demo-rig.toml"}"\nscenario = "{scenario}"\n'
        "[frequencies]\nvalues = [200.0, 400.0, 600.0]\n"
        '[amplitude]\nvalues = [0.05]\nbasis = "peak"\n'
        '[timing]\nrecord = "0.5 s"\nsettle = "0.3 s"\ntuning_window = "0.3 s"\ntuning_discard = "0.05 s"\n',
        encoding="utf-8")
    return plan


@pytest.fixture(scope="module")
def stored_run_master(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from app.cli import main

    folder = tmp_path_factory.mktemp("service-run")
    run_dir = folder / "run"
    assert main(["sweep", str(_write_inputs(folder)), "--fast", "--seed", "3", "--out", str(run_dir)]) == 0
    return run_dir


@pytest.fixture
def stored_run(stored_run_master: Path, tmp_path: Path) -> Path:
    """A private copy of the stored run (tests may change its index)."""
    out = tmp_path / "run"
    shutil.copytree(stored_run_master, out)
    return out
