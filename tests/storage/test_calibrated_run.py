"""A sweep with a rig that names its calibration file by a relative path stores complete records.

Seen: the run writer rebuilt the records' channel map (roles, units, sensitivities) from the
run's snapshot of the rig file, where the relative calibration path no longer resolves, and
silently stored an empty map in every record. Run through the real CLI.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from app.rig import load_rig
from app.storage.reader import open_run
from run_watch import short_plan_text
from test_calibration_file import _rig_naming, _write

ROOT = Path(__file__).resolve().parents[2]


def _calibrated_sweep(tmp_path: Path) -> tuple[Path, Path]:
    """A sweep of the demo rig naming a calibration file by a relative path: (the file, its folder)."""
    demo = ROOT / "configs" / "demo-rig.toml"
    rig_dir = tmp_path / "rig"
    rig_dir.mkdir()
    cal = _write(load_rig(demo), rig_dir / "cal.toml")
    rig = _rig_naming(rig_dir, demo)                 # pressure_calibration = "cal.toml", relative
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("calibrated", 200, 300, 100, 0.3))
    out = subprocess.run([sys.executable, "-m", "app.cli", "sweep", str(plan), "--rig", str(rig), "--out",
                          str(tmp_path / "run"), "--fast", "--seed", "2"], cwd=tmp_path, capture_output=True,
                         text=True, timeout=170)
    assert out.returncode == 0, out.stderr[-2000:]
    return cal, rig_dir


def test_records_keep_their_channel_map_with_a_relative_calibration_file(tmp_path: Path) -> None:
    _calibrated_sweep(tmp_path)
    run = open_run(tmp_path / "run", verify=False)
    [a, *_] = run.attempts
    attrs = run.read_record(a["attempt_id"]).attrs
    roles = list(attrs["channel_roles"])
    assert roles.count("pressure") == 4 and "light" in roles and "drive_reference" in roles
    assert len(list(attrs["channel_sensitivity_v_per_unit"])) == len(roles)


def test_the_run_keeps_the_calibration_it_was_measured_with(tmp_path: Path) -> None:
    # the run folder holds a copy of the calibration file; its snapshot of the rig reads that copy,
    # so a run can be reprocessed after the lab's calibration file was replaced or removed
    import shutil

    cal, rig_dir = _calibrated_sweep(tmp_path)
    copy = tmp_path / "run" / "calibration.toml"
    assert copy.read_bytes() == cal.read_bytes()
    shutil.move(str(rig_dir), str(tmp_path / "gone"))        # the lab's files moved away
    snap = load_rig(tmp_path / "run" / "rig.toml")
    assert snap.pressure_sensors[1].calibration, "the snapshot rig reads the run's copy"
    run = open_run(tmp_path / "run", verify=True)
    assert not [p for p in run.problems if "calibration" in p], run.problems
    out = subprocess.run([sys.executable, "-m", "app.cli", "reprocess-run", str(tmp_path / "run"), "--rig",
                          str(tmp_path / "run" / "rig.toml")], cwd=tmp_path, capture_output=True, text=True,
                         timeout=170)
    assert out.returncode == 0 and "Traceback" not in out.stderr, out.stdout[-1500:] + out.stderr[-1500:]
    # an edited copy is not used silently: review and reprocess-run say the snapshot changed
    copy.write_text(copy.read_text().replace("coherence", "coherence", 1) + "\n# edited\n")
    run = open_run(tmp_path / "run", verify=True)
    from app.storage.index import snapshot_changes

    assert [c.name for c in snapshot_changes(tmp_path / "run")] == ["calibration.toml"]
    out = subprocess.run([sys.executable, "-m", "app.cli", "review", str(tmp_path / "run")], cwd=tmp_path,
                         capture_output=True, text=True, timeout=170)
    assert "snapshot changed since the run was created: calibration.toml" in out.stdout, out.stdout[-1500:]


def test_a_missing_run_copy_is_named_and_the_original_never_used_in_its_place(tmp_path: Path) -> None:
    # seen: with the run's calibration.toml gone, the snapshot rig quietly read the lab's original
    # file again (which may have been recalibrated since) or reported it under the original's name
    cal, rig_dir = _calibrated_sweep(tmp_path)
    copy = tmp_path / "run" / "calibration.toml"
    copy.unlink()
    assert cal.is_file()                                       # the lab's original is still there
    out = subprocess.run([sys.executable, "-m", "app.cli", "reprocess-run", str(tmp_path / "run"), "--rig",
                          str(tmp_path / "run" / "rig.toml")], cwd=tmp_path, capture_output=True, text=True,
                         timeout=170)
    assert out.returncode != 0 and "Traceback" not in out.stderr, out.stderr[-1500:]
    assert str(copy) in out.stderr and "copy of the calibration it was measured with is missing" in out.stderr, \
        out.stderr[-1500:]
