"""Calibration files: written whole, read back the same, applied by the rig, refused when they do not fit.

Every refusal must name the file and the problem (a user-facing message), and nothing of a
refused file is applied.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

import numpy as np
import pytest

from app.calibration_file import (CalibrationFileError, band_problems, read_calibration, rig_identity,
                                  write_calibration)
from app.services.pressure_calibration import calibration_file_of
from app.core import calibration as core
from app.errors import ConfigError, FlamebodeError
from app.rig import load_rig

FREQS = np.array([100.0, 500.0, 1000.0, 2000.0])


def _factors(rig) -> np.ndarray:
    """Invented but plausible relative factors, (frequencies, sensors), reference first."""
    n = len(rig.pressure_sensors)
    base = np.array([1.0] + [1.0 + 0.02 * k * (-1) ** k for k in range(1, n)])
    phase = np.radians(np.array([0.0] + [0.3 * k for k in range(1, n)]))
    return (base * np.exp(1j * phase))[None, :] * (1 + 0.001 * FREQS[:, None] / 1000.0)


def _write(rig, path: Path) -> Path:
    f = _factors(rig)
    f[:, 0] = 1.0
    names = [s.channel for s in rig.pressure_sensors]
    u = np.full(f.shape, 1e-3)
    u[:, 0] = 0.0
    c = core.Calibration(tuple(names), names[0], FREQS, f, u, u, np.full(f.shape, 0.9999))
    return write_calibration(path, calibration_file_of(c, rig, {"backend": "test"}, 4400.0))


def _rig_naming(tmp_path: Path, demo_rig_path: Path, cal_name: str = "cal.toml", edit=lambda t: t) -> Path:
    text = demo_rig_path.read_text(encoding="utf-8")
    first = text.index("\nname = ")
    end = text.index("\n", first + 1)
    text = text[:end + 1] + f'pressure_calibration = "{cal_name}"\n' + text[end + 1:]
    path = tmp_path / "rig.toml"
    path.write_text(edit(text), encoding="utf-8")
    return path


def test_written_file_reads_back_and_the_rig_applies_it(tmp_path, demo_rig_path):
    rig = load_rig(demo_rig_path)
    cal_path = _write(rig, tmp_path / "cal.toml")
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]   # no temporary left
    back = read_calibration(cal_path)
    assert back.rig_identity == rig_identity(rig) and back.reference == "p1"
    assert back.frequency_hz == tuple(FREQS) and back.created.endswith("Z")
    calibrated = load_rig(_rig_naming(tmp_path, demo_rig_path))
    f = _factors(rig)
    for j, s in enumerate(calibrated.pressure_sensors[1:], start=1):
        for k, freq in enumerate(FREQS):
            assert s.correction(freq) == pytest.approx(f[k, j], rel=1e-9)
    assert band_problems(calibrated, [100.0, 2000.0]) == []
    assert "2500 Hz outside the band 100-2000 Hz" in band_problems(calibrated, [2500.0])[0]
    assert band_problems(rig, [2500.0]) == []          # a rig without a calibration file


def test_writing_replaces_an_old_file_only_when_the_new_one_is_whole(tmp_path, demo_rig_path, monkeypatch):
    rig = load_rig(demo_rig_path)
    target = tmp_path / "cal.toml"
    target.write_text("old\n", encoding="utf-8")

    def fail(*args):
        raise OSError("disk full")

    monkeypatch.setattr(os, "fsync", fail)
    with pytest.raises(OSError, match="disk full"):
        _write(rig, target)
    assert target.read_text(encoding="utf-8") == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cal.toml"]


@pytest.mark.parametrize("edit, expected", [
    (lambda t: t.replace('name = "Gorsefield-3 demo burner (invented)"', 'name = "Another rig"'),
     "made on rig 'Gorsefield-3 demo burner (invented)', this is 'Another rig'"),
    (lambda t: t.replace('sensitivity = "14.2 mV/Pa"', 'sensitivity = "14.0 mV/Pa"'),
     "p2: nominal sensitivity 0.0142 V/Pa then, 0.014 V/Pa now"),
    (lambda t: t.replace('position = "-300 mm"', 'position = "-310 mm"'), "p3: position -0.3 m then, -0.31 m now"),
])
def test_a_file_of_another_rig_is_refused(tmp_path, demo_rig_path, edit, expected):
    _write(load_rig(demo_rig_path), tmp_path / "cal.toml")
    with pytest.raises(CalibrationFileError) as err:
        load_rig(_rig_naming(tmp_path, demo_rig_path, edit=edit))
    text = str(err.value)
    assert str(tmp_path / "cal.toml") in text and "rig_identity" in text and expected in text


def test_missing_sensors_are_named(tmp_path, demo_rig_path):
    cal_path = _write(load_rig(demo_rig_path), tmp_path / "cal.toml")
    text = cal_path.read_text(encoding="utf-8")
    text = text.replace('sensors = ["p1", "p2", "p3", "p4"]', 'sensors = ["p1", "p2", "p3"]')
    text = text[:text.index('[sensor."p4"]')]
    cal_path.write_text(text, encoding="utf-8")
    with pytest.raises(CalibrationFileError, match=r"no factors for the rig's pressure sensor\(s\) p4"):
        load_rig(_rig_naming(tmp_path, demo_rig_path))


@pytest.mark.parametrize("mangle, expected", [
    (lambda t: t[: len(t) // 2], "cut short"),
    (lambda t: t.replace("[sensor.", "[[sensor.", 1), "not valid TOML"),
    (lambda t: t.replace('format = "flamebode-calibration"', 'format = "other"'), "not a flamebode calibration file"),
    (lambda t: t.replace("version = 1", "version = 7"), "version: 7"),
    (lambda t: t.replace("gain = [1.0", "gain = [-1.0", 1), "sensor.p1.gain: -1.0 is not a finite number more than 0"),
    (lambda t: t.replace("coherence = [0.9999, ", "coherence = [", 1), "3 values, but frequency_hz has 4"),
    (lambda t: t.replace("frequency_hz = [100.0, 500.0", "frequency_hz = [500.0, 100.0"), "strictly increasing"),
    (lambda t: t.replace('reference = "p1"', 'reference = "p9"'), "reference: 'p9' is not one of the sensors"),
    (lambda t: t.replace("u_gain = [0.0", "u_gain = [nan", 1), "is not a finite number"),
    # found by an attack: hand edits that read as a calibration but are not one
    (lambda t: t.replace("gain = [1.0, 1.0", "gain = [2.0, 2.0", 1), "the reference sensor's factors must be gain 1"),
    (lambda t: t.replace("cut_on_hz = 4400.0", "cut_on_hz = 1500.0"), "at or above the file's own cut_on_hz 1500 Hz"),
    (lambda t: t.replace('sensors = ["p1", "p2"', 'sensors = ["p1", "p1", "p2"'), "p1 listed more than once"),
    (lambda t: t.replace("coherence = [0.9999", "coherence = [0.0", 2), "coherence: 0 means no coherent signal"),
    # bounds said by key, never a validation library's text (found by an attack)
    (lambda t: t.replace("gain = [0.98", "gain = [1e6, 0.98", 1).replace("0.9800979999999999, ", "", 1),
     "sensor.p2.gain: 1000000.0 is not a finite number more than 0 and at most 100"),
    (lambda t: t.replace("u_gain = [0.001", "u_gain = [50.0", 1), "u_gain: 50.0 is not a finite number at least 0 "
                                                                  "and at most 1"),
])
def test_a_corrupt_or_malformed_file_is_refused_naming_the_problem(tmp_path, demo_rig_path, mangle, expected):
    cal_path = _write(load_rig(demo_rig_path), tmp_path / "cal.toml")
    cal_path.write_text(mangle(cal_path.read_text(encoding="utf-8")), encoding="utf-8")
    with pytest.raises(CalibrationFileError) as err:
        load_rig(_rig_naming(tmp_path, demo_rig_path))
    assert str(cal_path) in str(err.value) and expected in str(err.value)


def test_a_missing_file_and_two_calibration_sources_are_refused(tmp_path, demo_rig_path):
    with pytest.raises(CalibrationFileError, match="calibration file not found"):
        load_rig(_rig_naming(tmp_path, demo_rig_path, cal_name="nowhere.toml"))
    _write(load_rig(demo_rig_path), tmp_path / "cal.toml")
    both = _rig_naming(tmp_path, demo_rig_path, edit=lambda t: t.replace(
        'position_uncertainty = "0.5 mm"   # standard uncertainty, enters the error budget',
        'position_uncertainty = "0.5 mm"\ncalibration = [{ frequency = "100 Hz", gain = 1.0 }]', 1))
    with pytest.raises(ConfigError, match="not both"):
        load_rig(both)


def test_a_rig_with_a_bad_file_gives_a_plain_message_in_the_cli(tmp_path, demo_rig_path):
    import subprocess
    import sys

    cal_path = _write(load_rig(demo_rig_path), tmp_path / "cal.toml")
    cal_path.write_text(cal_path.read_text(encoding="utf-8")[:200], encoding="utf-8")
    rig_path = _rig_naming(tmp_path, demo_rig_path)
    plan = demo_rig_path.parent / "demo-ftf-plan.toml"
    proc = subprocess.run([sys.executable, "-m", "app.cli", "sweep", str(plan), "--rig", str(rig_path), "--dry-run"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and str(cal_path) in proc.stderr and "cut short" in proc.stderr
    assert issubclass(CalibrationFileError, FlamebodeError)


def test_a_sensor_exchanged_since_its_calibration_is_refused_by_serial(tmp_path, demo_rig_path):
    # common practice: a calibration belongs to the physical sensor; the serial number tells
    def serials(mark: str):
        def edit(text: str) -> str:
            out, n = [], 0
            for line in text.splitlines(keepends=True):
                out.append(line)
                if line.strip() == "[[pressure_sensors]]":
                    n += 1
                    out.append(f'serial = "PX-{mark if n == 2 else "A"}{n}"\n')
            return "".join(out)
        return edit

    first = _rig_naming(tmp_path, demo_rig_path, edit=serials("A"))
    text = first.read_text().replace('pressure_calibration = "cal.toml"\n', "")
    plain = tmp_path / "plain.toml"
    plain.write_text(text)
    _write(load_rig(plain), tmp_path / "cal.toml")            # calibrated with sensors PX-A1..PX-A4
    assert load_rig(first).pressure_sensors[1].calibration     # same sensors: applied
    _rig_naming(tmp_path, demo_rig_path, edit=serials("B"))     # p2 now carries PX-B2
    with pytest.raises(CalibrationFileError) as exc:
        load_rig(tmp_path / "rig.toml")
    assert "sensor.p2: serial 'PX-A2' was calibrated" in str(exc.value) and "'PX-B2'" in str(exc.value)


def test_writing_through_a_link_writes_its_target_and_keeps_the_files_permissions(tmp_path, demo_rig_path):
    # found by an attack: the link was replaced by a private (0600) copy, the shared file kept its old factors
    rig = load_rig(demo_rig_path)
    shared = tmp_path / "shared"
    shared.mkdir()
    target = _write(rig, shared / "cal.toml")
    os.chmod(target, 0o644)
    link = tmp_path / "link.toml"
    link.symlink_to(target)
    _write(rig, link)
    assert link.is_symlink() and link.resolve() == target.resolve()
    assert stat.S_IMODE(target.stat().st_mode) == 0o644
