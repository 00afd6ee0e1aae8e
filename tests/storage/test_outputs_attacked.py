"""Outputs and damaged runs, attacked from outside (real CLI processes). Seen before the fix:

* ``calibrate --out`` wrote over the rig file and over a run's index and records;
  ``fit --save`` wrote over a raw record; a failed write left a hidden ``.part`` file;
* tracebacks from ``fit --terms 0``, text or a negative interval in an analysis, bad JSON in an
  attempt's flags, an output that is a folder or cannot be written, ``--seed -1``;
* ``runs`` failed on the whole listing for one damaged run; ``fit``, ``report`` and ``compare``
  said nothing of index damage that ``review`` reports.

Every case must end with a plain message (no traceback) and leave every file as it was.
"""

from __future__ import annotations

import hashlib
import shutil
import sqlite3
import subprocess
from pathlib import Path

import pytest

from run_watch import run_cli, short_plan_text

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "demo-rig.toml"


_cli = run_cli


def _digests(folder: Path) -> dict[str, str]:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file() and not p.name.endswith(("-wal", "-shm"))}


@pytest.fixture(scope="module")
def base_run(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("attacked")
    plan = tmp / "plan.toml"
    plan.write_text(short_plan_text("attacked", 200, 700, 100, 0.3))
    out = _cli("sweep", str(plan), "--rig", str(RIG), "--out", str(tmp / "run"), "--fast", "--seed", "8")
    assert out.returncode == 0, out.stderr[-2000:]
    return tmp / "run"


@pytest.fixture
def run(base_run: Path, tmp_path: Path) -> Path:
    copy = tmp_path / "run"
    shutil.copytree(base_run, copy)
    return copy


def _plain(out: subprocess.CompletedProcess) -> None:
    assert "Traceback" not in out.stderr, out.stderr[-3000:]
    assert out.returncode == 2, (out.returncode, out.stdout[-500:], out.stderr[-1500:])


def test_outputs_never_write_over_a_rig_file_or_a_runs_files(run: Path, tmp_path: Path) -> None:
    rig_copy = tmp_path / "rig.toml"
    shutil.copy(RIG, rig_copy)
    before, rig_before = _digests(run), rig_copy.read_bytes()
    record = next((run / "records").glob("*.h5"))
    for args in (["calibrate", str(rig_copy), "--out", str(rig_copy), "--fast"],
                 ["calibrate", str(RIG), "--out", str(run / "index.sqlite"), "--fast"],
                 ["calibrate", str(RIG), "--out", str(record), "--fast"],
                 ["fit", str(run), "--model", "n-tau", "--save", str(record)],
                 ["fit", str(run), "--model", "n-tau", "--save", str(run / "ftf.h5")],
                 ["report", str(run), "--out", str(run / "records" / "r.pdf")],
                 ["compare", str(run), "--out", str(run / "plan.toml.png")]):
        out = _cli(*args)
        _plain(out)
        assert "not written over" in out.stderr or "never written over" in out.stderr, out.stderr
    assert _digests(run) == before and rig_copy.read_bytes() == rig_before
    # the run's own export/ folder is the place for them, and a fit file may be replaced by a new one
    assert _cli("fit", str(run), "--model", "n-tau", "--save", str(run / "export" / "ftf.h5")).returncode == 0
    assert _cli("fit", str(run), "--model", "n-tau", "--save", str(run / "export" / "ftf.h5")).returncode == 0


def test_unwritable_or_folder_outputs_are_plain_messages_and_leave_nothing(run: Path, tmp_path: Path) -> None:
    (tmp_path / "d.mat").mkdir()
    for args in (["fit", str(run), "--save", str(tmp_path / "d.mat")],
                 ["fit", str(run), "--save", "/proc/x.mat"],
                 ["report", str(run), "--out", str(tmp_path / "nowhere" / "r.pdf")],
                 ["compare", str(run), "--out", str(tmp_path / "d.mat")],
                 ["calibrate", str(RIG), "--out", "/proc/c.toml", "--fast"]):
        _plain(_cli(*args))
    assert not list(tmp_path.rglob(".*.part"))


def test_bad_numbers_and_options_are_plain_messages(run: Path) -> None:
    for terms in ("0", "-1", "1000000"):
        out = _cli("fit", str(run), "--terms", terms)
        _plain(out)
        assert "must be 1 to 4" in out.stderr
    out = _cli("sweep", str(ROOT / "configs" / "demo-ftf-plan.toml"), "--seed", "-1")
    assert out.returncode == 2 and "Traceback" not in out.stderr and "--seed" in out.stderr


def test_a_damaged_index_does_not_break_fit_report_compare_or_runs(run: Path, tmp_path: Path) -> None:
    con = sqlite3.connect(run / "index.sqlite")
    first, second = [r[0] for r in con.execute("SELECT attempt_id FROM attempts ORDER BY point_index LIMIT 2")]
    con.execute("UPDATE analyses SET gain = 'abc' WHERE attempt_id = ?", (first,))
    con.execute("UPDATE analyses SET gain_ci95 = -1 WHERE attempt_id = ?", (second,))
    con.execute("UPDATE attempts SET flags = '[not json' WHERE attempt_id = ?", (second,))
    con.commit()
    con.close()
    for args in (["fit", str(run), "--model", "n-tau"], ["report", str(run), "--out", str(tmp_path / "r.pdf")],
                 ["compare", str(run), "--out", str(tmp_path / "c.png")], ["runs", str(run.parent)],
                 ["review", str(run)]):
        out = _cli(*args)
        assert "Traceback" not in out.stderr and out.returncode == 0, (args, out.stderr[-2000:])
    fit = _cli("fit", str(run), "--model", "n-tau")
    assert "5 points" in fit.stdout and "not fitted" not in fit.stdout, fit.stdout   # text left out, the rest fitted


def test_fit_says_what_review_says_of_a_damaged_run(run: Path) -> None:
    next((run / "records").glob("*.h5")).write_bytes(b"")       # a record lost
    review = _cli("review", str(run))
    fit = _cli("fit", str(run), "--model", "n-tau")
    assert "problem" in review.stdout + review.stderr
    assert "problem:" in fit.stderr and fit.returncode == 0, fit.stderr
