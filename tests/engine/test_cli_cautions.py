"""What the command line tells before forcing: the calibration in use (dry run), frequencies
outside a calibration file's band refused before any drive, and a caution when a headless
sweep drives real hardware (no checklist is asked for there)."""

from __future__ import annotations

from pathlib import Path

from app.rig import load_rig
from run_watch import run_cli, short_plan_text
from test_calibration_file import _rig_naming, _write

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "demo-rig.toml"


def _cli(*args: str):
    return run_cli(*args, timeout_s=120)


def test_the_dry_run_names_the_calibration_and_refuses_frequencies_outside_its_band(tmp_path: Path) -> None:
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("cal band", 200, 400, 100, 0.5))
    out = _cli("sweep", str(plan), "--rig", str(RIG), "--dry-run")
    assert out.returncode == 0 and "calibration: none (the sensors' nominal sensitivities" in out.stdout, out.stderr
    _write(load_rig(RIG), tmp_path / "cal.toml")            # calibrated over 100-2000 Hz
    rig = _rig_naming(tmp_path, RIG)
    out = _cli("sweep", str(plan), "--rig", str(rig), "--dry-run")
    assert out.returncode == 0 and "cal.toml (relative calibration of the pressure sensors, 100-2000 Hz)" in out.stdout
    low = tmp_path / "low.toml"
    low.write_text(short_plan_text("too low", 50, 150, 50, 0.5))
    out = _cli("sweep", str(low), "--rig", str(rig), "--dry-run")
    assert out.returncode == 2 and "Traceback" not in out.stderr
    assert "50 Hz outside the band 100-2000 Hz of the calibration file" in out.stderr, out.stderr


def test_a_headless_sweep_on_real_hardware_shows_the_caution(tmp_path: Path) -> None:
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("real", 200, 300, 100, 0.5))
    out = _cli("sweep", str(plan), "--rig", str(RIG), "--backend", "daqmx")     # no card here: it then stops
    assert "caution: real hardware. Forcing is loud: hearing protection on" in out.stderr
    assert "Your lab's checklist and rules come first" in out.stderr
    assert out.returncode != 0 and "Traceback" not in out.stderr
    # and what the rig's commissioning record lacks (none kept for this rig in this test)
    assert "commissioning: no dark offset in demo-rig.commissioning.toml" in out.stderr, out.stderr
    sim = _cli("sweep", str(plan), "--rig", str(RIG), "--fast")
    assert sim.returncode == 0 and "caution: real hardware" not in sim.stderr
