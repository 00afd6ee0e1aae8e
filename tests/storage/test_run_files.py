"""Run files: writer, record round trip, acceptance, damaged parts reported, export equals index.

Synthetic PointSettled events (tests/storage/storage_synth.py) stand in for the engine.
Record integrity checks use HDF5's fletcher32 filter and sha256 (FIPS 180-4, via hashlib).
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest

from app.cli import main
from app.errors import RecordError
from app.storage import index
from app.storage.export import CSV_COLUMNS, export_run
from app.storage.reader import open_run
from app.storage.record import read_record, tmp_name
from storage_synth import phasor, plan_of, settled, write_run


@pytest.fixture
def plan_file(tmp_path: Path) -> Path:
    p = tmp_path / "plan.toml"
    p.write_text('name = "synthetic storage test"\n')
    return p


@pytest.fixture
def run3(tmp_path: Path, plan_file: Path) -> Path:
    writer, bus, acks = write_run(tmp_path / "run", plan_file, plan_of([100.0, 200.0, 300.0]))
    assert acks == [(True, None)] * 3 and writer.fault is None and not bus.errors
    return tmp_path / "run"


def test_record_round_trip_keeps_samples_and_attributes(run3: Path):
    run = open_run(run3)
    assert run.problems == []
    a = run.attempts[1]
    rec = run.read_record(a["attempt_id"])
    expected = settled(1, 200.0)            # same seed -> same synthetic samples
    np.testing.assert_array_equal(rec.data, expected.record)   # lossless, native dtype
    assert rec.data.dtype == expected.record.dtype
    assert rec.channels == expected.channels and rec.sample_rate_hz == 5120.0 and rec.freq_hz == 200.0
    assert rec.attrs["channel_units"][:4] == ("Pa",) * 4
    # sensitivities from the demo rig file: 14.5 mV/Pa for p1
    assert rec.attrs["channel_sensitivity_v_per_unit"][0] == pytest.approx(0.0145)
    np.testing.assert_allclose(rec.attrs["tuning_drive_v"], [0.2, 0.41])
    assert rec.attrs["library_versions"]["h5py"] == h5py.version.version
    # the stored gain re-derives from the stored samples (DFT coefficient at a known
    # frequency, Kay 1993 ch. 3; e^{+iωt} convention, so a lag is a negative phase)
    ph = phasor(rec.data - rec.data.mean(axis=1, keepdims=True), 200.0, 5120.0)
    gain = abs(ph[4] / rec.data[4].mean()) / 0.05
    assert a["analysis"]["gain"] == pytest.approx(gain, rel=1e-9)
    with h5py.File(run3 / a["record_file"], "r") as f:
        ds = f["record/volts"]
        assert ds.fletcher32 and ds.compression == "gzip" and ds.shuffle
        assert 10 * 1024 <= ds.chunks[1] * ds.dtype.itemsize <= 1 << 20


def test_newest_good_attempt_is_accepted_unless_user_chose(tmp_path: Path, plan_file: Path):
    plan = plan_of([100.0, 200.0])
    first = [settled(0, 100.0, attempt_id="a0"), settled(1, 200.0, attempt_id="b0")]
    write_run(tmp_path / "run", plan_file, plan, first)
    assert main(["accept", str(tmp_path / "run"), "--attempt", "b0", "--reason", "looked fine"]) == 0
    more = [settled(0, 100.0, flags=("snr-low",), attempt_id="a1"), settled(0, 100.0, attempt_id="a2"),
            settled(1, 200.0, attempt_id="b1")]
    write_run(tmp_path / "run", plan_file, plan, more)
    acc = open_run(tmp_path / "run").accepted()
    assert acc[0]["attempt_id"] == "a2"          # flagged a1 did not displace a0; good a2 did
    assert acc[1]["attempt_id"] == "b0" and acc[1]["decided_by"] == "user"
    assert main(["accept", str(tmp_path / "run"), "--attempt", "a2", "--reject", "--reason", "leak"]) == 0
    run = open_run(tmp_path / "run")
    assert 0 not in run.accepted() and run.pending_points() == [0]
    assert run.attempt("a2")["decision_reason"] == "leak"
    assert main(["accept", str(tmp_path / "run"), "--attempt", "zz"]) == 2


def test_all_flagged_takes_the_newest_and_warnings_count_as_flags(tmp_path: Path, plan_file: Path):
    """The rule: the newest attempt with no flags, else the newest; analysis warnings are flags too."""
    import dataclasses

    plan = plan_of([100.0, 200.0])
    warned = settled(1, 200.0, attempt_id="b1")
    warned = dataclasses.replace(warned, result=dataclasses.replace(warned.result, warnings=("pair-spread",)))
    write_run(tmp_path / "run", plan_file, plan, [settled(0, 100.0, flags=("snr-low",), attempt_id="a0"),
                                                  settled(1, 200.0, attempt_id="b0")])
    write_run(tmp_path / "run", plan_file, plan, [settled(0, 100.0, flags=("snr-low", "pair-spread"),
                                                          attempt_id="a1"), warned])
    acc = open_run(tmp_path / "run").accepted()
    assert acc[0]["attempt_id"] == "a1" and "every attempt" in acc[0]["decision_reason"]
    assert acc[1]["attempt_id"] == "b0"                  # b1 has an analysis warning: b0 is still the newest good
    assert main(["accept", str(tmp_path / "run"), "1", "1"]) == 0
    write_run(tmp_path / "run", plan_file, plan, [settled(0, 100.0, flags=("snr-low",), attempt_id="a2")])
    acc = open_run(tmp_path / "run").accepted()
    assert acc[0]["attempt_id"] == "a0" and acc[0]["decided_by"] == "user"   # a person's choice is kept


def test_leftover_temp_file_reported_never_read(run3: Path):
    part = run3 / "records" / tmp_name("deadbeef")
    part.write_bytes(b"\x89HDF\r\n\x1a\n half a file")
    run = open_run(run3)
    assert len(run.attempts) == 3 and len(run.accepted()) == 3
    assert any(str(part) in p and "temporary" in p for p in run.problems)
    with pytest.raises(RecordError, match="temporary"):
        read_record(part)


@pytest.mark.parametrize("damage", ["truncate", "flip", "delete"])
def test_damaged_record_reported_rest_readable(run3: Path, damage: str):
    run = open_run(run3)
    victim = run3 / run.attempts[1]["record_file"]
    raw = victim.read_bytes()
    if damage == "truncate":
        victim.write_bytes(raw[: len(raw) // 2])
    elif damage == "flip":
        b = bytearray(raw)
        b[len(b) // 2] ^= 0xFF                  # inside the compressed samples
        victim.write_bytes(bytes(b))
    else:
        victim.unlink()
    run = open_run(run3)
    assert len(run.problems) == 1 and victim.name in run.problems[0]
    assert ("missing" if damage == "delete" else "truncated" if damage == "truncate" else "corrupted") in run.problems[0]
    assert sorted(run.accepted()) == [0, 2] and run.pending_points() == [1]
    for i in (0, 2):
        assert run.read_record(run.accepted()[i]["attempt_id"]).data.shape == (6, 2560)
    if damage != "delete":
        with pytest.raises(RecordError, match="damaged or truncated"):   # HDF5's own checks agree
            read_record(victim)


def test_locked_index_reported_records_still_readable(run3: Path):
    holder = sqlite3.connect(run3 / index.INDEX_NAME)
    try:
        holder.execute("PRAGMA locking_mode=EXCLUSIVE")
        holder.execute("BEGIN EXCLUSIVE")
        holder.execute("UPDATE run_info SET value = value WHERE key = 'schema_version'")
        run = open_run(run3)
    finally:
        holder.rollback()
        holder.close()
    assert any("locked" in p for p in run.problems)
    assert not run.index_readable and sorted(run.accepted()) == [0, 1, 2]
    rec = run.read_record(run.accepted()[2]["attempt_id"])
    assert rec.freq_hz == 300.0 and run.accepted()[2]["analysis"]["gain"] > 0


def test_failing_write_gives_named_fault_and_damages_nothing(tmp_path: Path, plan_file: Path, monkeypatch):
    import errno
    import stat

    import app.storage.record as record_mod

    run_dir = tmp_path / "run"
    write_run(run_dir, plan_file, plan_of([100.0, 200.0, 300.0]), [settled(0, 100.0)])
    before = {p.name: p.read_bytes() for p in (run_dir / "records").iterdir()}
    real_fsync = record_mod.os.fsync

    def full_disk(fd):                       # a record's bytes are written, then the flush fails
        if stat.S_ISREG(record_mod.os.fstat(fd).st_mode):
            raise OSError(errno.ENOSPC, "No space left on device")
        real_fsync(fd)                       # folders still sync

    monkeypatch.setattr(record_mod.os, "fsync", full_disk)
    writer, _, acks = write_run(run_dir, plan_file, plan_of([100.0, 200.0, 300.0]),
                                [settled(1, 200.0), settled(2, 300.0)])
    assert all(ok for ok, _ in acks) and all(err for _, err in acks)
    msg = acks[0][1]
    assert msg.startswith("storage-disk-full") and "point 2 " in msg and str(run_dir) in msg
    assert "Free at least" in msg and "resume" in msg and writer.fault == msg
    monkeypatch.undo()
    after = {p.name: p.read_bytes() for p in (run_dir / "records").iterdir()}
    assert after == before                     # no temp file left, nothing changed
    run = open_run(run_dir)
    assert run.problems == [] and sorted(run.accepted()) == [0] and run.pending_points() == [1, 2]


def test_export_csv_equals_index(tmp_path: Path, plan_file: Path):
    plan = plan_of([100.0, 250.0, 400.0], ratios=[0.03, 0.08])
    events = [settled(p.index, p.freq_hz, p.target_ratio, flags=("snr-low",) if p.index == 4 else ())
              for p in plan.points]
    write_run(tmp_path / "run", plan_file, plan, events)
    paths = export_run(tmp_path / "run", tmp_path / "out")
    assert {p.name for p in paths} == {"points.csv", "summary.json", "points.mat", "points.h5", "gain-phase.png",
                                       "gain-phase.pdf"}
    assert all(p.stat().st_size > 1000 for p in paths if p.suffix in (".png", ".pdf"))
    df = pd.read_csv(tmp_path / "out" / "points.csv", keep_default_na=False)
    assert tuple(df.columns) == CSV_COLUMNS and len(df) == 6
    conn = sqlite3.connect(tmp_path / "run" / index.INDEX_NAME)
    q = pd.read_sql_query(
        "SELECT p.point_index, p.freq_hz, p.target_ratio, an.achieved_ratio, an.gain, an.gain_ci95, an.phase_rad, "
        "an.phase_ci95_rad, at.attempt_id, at.flags FROM points p JOIN attempts at ON at.point_index = p.point_index "
        "AND at.decision = 'accepted' JOIN analyses an ON an.attempt_id = at.attempt_id ORDER BY p.point_index", conn)
    conn.close()
    np.testing.assert_array_equal(df["point"], q["point_index"] + 1)       # people count points from 1
    for csv_col, sql_col in [("freq_hz", "freq_hz"), ("amplitude_ratio_target", "target_ratio"),
                             ("amplitude_ratio_achieved", "achieved_ratio"), ("gain", "gain"),
                             ("gain_ci95", "gain_ci95"), ("phase_wrapped_rad", "phase_rad"),
                             ("phase_ci95_rad", "phase_ci95_rad")]:
        np.testing.assert_array_equal(df[csv_col].astype(float), q[sql_col].astype(float))
    # the unwrapped phase differs from the stored one by whole turns only, and degrees match radians
    turns = (df["phase_rad"] - df["phase_wrapped_rad"]) / (2 * np.pi)
    np.testing.assert_allclose(turns, np.round(turns), atol=1e-12)
    np.testing.assert_allclose(df["phase_deg"], np.degrees(df["phase_rad"]), rtol=1e-15)
    np.testing.assert_allclose(df["phase_ci95_deg"], np.degrees(df["phase_ci95_rad"]), rtol=1e-15)
    assert list(df["used"]) == [f"{p}/1" for p in df["point"]] and set(df["chosen_by"]) == {"auto"}
    assert list(df["attempt_id"]) == list(q["attempt_id"])
    assert list(df["flags"]) == [";".join(json.loads(f)) for f in q["flags"]]
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["kind"] == "FDF" and summary["n_accepted"] == 6
    assert [p["gain"] for p in summary["points"]] == list(df["gain"])


FULL_DISK_CHILD = r"""
import json, resource, signal, sys
sys.path.insert(0, sys.argv[3])
from pathlib import Path
from storage_synth import plan_of, settled, write_run
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)      # a write past the limit then fails with EFBIG
limit = int(sys.argv[4])
resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
writer, bus, acks = write_run(Path(sys.argv[1]), Path(sys.argv[2]), plan_of([100.0, 200.0, 300.0]),
                              [settled(1, 200.0, seconds=2.0), settled(2, 300.0)])
print(json.dumps(acks))
"""


def test_file_size_limit_in_subprocess_gives_named_fault(tmp_path: Path, plan_file: Path):
    """RLIMIT_FSIZE (POSIX setrlimit) makes the kernel refuse writes past the limit, as a full disk does."""
    import subprocess
    import sys

    run_dir = tmp_path / "run"
    write_run(run_dir, plan_file, plan_of([100.0, 200.0, 300.0]), [settled(0, 100.0)])
    before = {p.name: p.read_bytes() for p in (run_dir / "records").iterdir()}
    limit = 200 * 1024                 # the index fits; a 2 s record (~440 kB) does not
    proc = subprocess.run([sys.executable, "-c", FULL_DISK_CHILD, str(run_dir), str(plan_file),
                           str(Path(__file__).parent), str(limit)], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    acks = json.loads(proc.stdout.strip().splitlines()[-1])
    assert all(ok for ok, _ in acks) and all(err for _, err in acks)
    assert acks[0][1].startswith("storage-disk-full: could not store point 2")   # index 1: the second point, numbered from 1 as everywhere
    after = {p.name: p.read_bytes() for p in (run_dir / "records").iterdir()}
    assert after == before
    run = open_run(run_dir)
    assert run.problems == [] and sorted(run.accepted()) == [0]
    assert run.read_record(run.accepted()[0]["attempt_id"]).freq_hz == 100.0


def test_hot_wire_figures_are_exported_as_columns_when_a_run_has_them(tmp_path: Path, plan_file: Path):
    # a run whose points carry the hot-wire cross-check (app.core.hotwire) gets its columns, with
    # units, after the usual ones; a run without a wire keeps exactly CSV_COLUMNS (above)
    import dataclasses
    import json

    from app.storage.export import HOTWIRE_COLUMNS

    plan = plan_of([100.0, 250.0])
    events = []
    for p in plan.points:
        ev = settled(p.index, p.freq_hz, p.target_ratio)
        q = {**ev.result.quality, "hotwire_ratio": 1.02 + 0.01 * p.index, "hotwire_ratio_ci95": 0.03,
             "hotwire_phase_diff_rad": -0.01, "hotwire_phase_ci95_rad": 0.02, "hotwire_diff_z": 0.7,
             "hotwire_coherence": 0.98}
        if p is plan.points[0]:   # carried to the reference plane at the first point only (a node at the second)
            q.update({"hotwire_velocity_ratio": 0.051, "hotwire_velocity_ratio_ci95": 0.002})
        events.append(dataclasses.replace(ev, result=dataclasses.replace(ev.result, quality=q)))
    write_run(tmp_path / "run", plan_file, plan, events)
    export_run(tmp_path / "run", tmp_path / "out", plots=False)
    df = pd.read_csv(tmp_path / "out" / "points.csv", keep_default_na=False)
    assert tuple(df.columns) == CSV_COLUMNS + HOTWIRE_COLUMNS
    assert list(df["hotwire_ratio"]) == pytest.approx([1.02, 1.03]) and list(df["hotwire_coherence"]) == [0.98] * 2
    assert list(df["hotwire_velocity_ratio"].astype(str)) == ["0.051", ""]      # empty where not carried
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["points"][1]["hotwire_diff_z"] == 0.7 and "hotwire_ratio" in summary["units"]
