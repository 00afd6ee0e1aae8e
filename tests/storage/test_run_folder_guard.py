"""Run folders that cannot be fooled: a path that is not a run, record paths that leave the run.

Checked as a user meets them: the real CLI (``python -m app.cli``) in a subprocess with a
timeout, on a run made by a real fast sweep of the simulated burner. A command given
something that is not a run folder must say so, exit non-zero and leave every file as it
was (names, sizes and modification times compared before and after). A record path in
the index is only read when it names a regular file inside the run's ``records/`` folder.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from run_watch import short_plan_text

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "demo-rig.toml"


def cli(*args: str, timeout: float = 20.0, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "app.cli", *args], cwd=ROOT, capture_output=True, text=True,
                          timeout=timeout, env={**os.environ, **(env or {})})


@pytest.fixture(scope="module")
def made_run(tmp_path_factory) -> Path:
    base = tmp_path_factory.mktemp("made")
    plan = base / "plan.toml"
    plan.write_text(short_plan_text("guard test", 200, 400, 100, 0.4))
    proc = cli("sweep", str(plan), "--rig", str(RIG), "--out", str(base / "run"), "--fast", timeout=60)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    return base / "run"


@pytest.fixture
def run_copy(made_run: Path, tmp_path: Path) -> Path:
    dst = tmp_path / "run"
    shutil.copytree(made_run, dst)
    return dst


def tree_state(path: Path) -> dict[str, tuple]:
    """Every entry under ``path`` (and ``path`` itself) with its type, size and mtime in ns."""
    out = {}
    if not os.path.lexists(path):
        return out
    entries = [path, *sorted(path.rglob("*"))] if path.is_dir() else [path]
    for p in entries:
        st = p.lstat()
        out[str(p.relative_to(path.parent))] = (st.st_mode, st.st_size, st.st_mtime_ns)
    return out


def _not_a_run(kind: str, tmp_path: Path) -> Path:
    target = tmp_path / "target"
    if kind == "empty folder":
        target.mkdir()
    elif kind == "folder of other files":
        target.mkdir()
        (target / "notes.txt").write_text("not a run\n")
        (target / "rig.toml").write_text(RIG.read_text())     # a config folder is not a run either
        (target / "plan.toml").write_text(short_plan_text("x", 200, 300, 100, 0.4))
        (target / "sub").mkdir()
        (target / "sub" / "data.h5").write_bytes(b"\x89HDF\r\n\x1a\n")
    elif kind == "foreign sqlite named index.sqlite":
        target.mkdir()
        con = sqlite3.connect(target / "index.sqlite")
        con.execute("CREATE TABLE songs(title TEXT)")
        con.commit()
        con.close()
    elif kind == "garbage index.sqlite":
        target.mkdir()
        (target / "index.sqlite").write_bytes(b"this is not a database" * 10)
    elif kind == "a file":
        target.write_text("hello\n")
    # "missing path": nothing at all
    return target


COMMANDS = [
    ("export",), ("review",), ("resume", "--fast"), ("reacquire", "--points", "1", "--fast"),
    ("accept", "--attempt", "abc"), ("reprocess-run", "--rig", str(RIG)),
]


@pytest.mark.parametrize("kind", ["empty folder", "folder of other files", "foreign sqlite named index.sqlite",
                                  "garbage index.sqlite", "a file", "missing path"])
def test_every_run_command_refuses_what_is_not_a_run_and_touches_nothing(tmp_path: Path, kind: str):
    target = _not_a_run(kind, tmp_path)
    before = tree_state(tmp_path)
    for command, *rest in COMMANDS:
        proc = cli(command, str(target), *rest)
        assert proc.returncode != 0, (command, proc.stdout)
        assert "Traceback" not in proc.stderr, proc.stderr
        assert f"{target}: not a run folder (" in proc.stderr, (command, proc.stderr)
        # names what is missing, and never claims to have rebuilt anything
        assert ("no such file" in proc.stderr if kind == "missing path" else
                "a file, not a folder" in proc.stderr if kind == "a file" else
                "index.sqlite" in proc.stderr), proc.stderr
        assert "rebuilt" not in proc.stdout + proc.stderr and "back-end ?" not in proc.stdout
        assert tree_state(tmp_path) == before, f"{command} changed files of a non-run"
    assert not (tmp_path / "target" / "export").exists()


def _set_record_path(run: Path, point_index: int, record_file: str, size: int, sha: str) -> str:
    con = sqlite3.connect(run / "index.sqlite")
    try:
        attempt = con.execute("SELECT attempt_id FROM attempts WHERE point_index = ?", (point_index,)).fetchone()[0]
        con.execute("UPDATE attempts SET record_file = ?, record_bytes = ?, record_sha256 = ? WHERE attempt_id = ?",
                    (record_file, size, sha, attempt))
        con.commit()
    finally:
        con.close()
    return attempt


def _outside_file(tmp_path: Path) -> Path:
    secret = tmp_path / "secret.txt"
    secret.write_text("a file outside the run\n")
    return secret


@pytest.mark.parametrize("how", ["climbs out (..)", "absolute", "device (absolute)", "symlink out",
                                 "symlink to a device", "not under records/", "fifo", "folder"])
def test_record_paths_outside_the_run_are_refused_and_never_read(run_copy: Path, tmp_path: Path, how: str):
    secret = _outside_file(tmp_path)
    data = secret.read_bytes()
    size, sha = len(data), hashlib.sha256(data).hexdigest()   # the index "agrees" with the outside file
    if how == "climbs out (..)":
        rel = os.path.relpath(secret, run_copy)                # ../secret.txt
        assert rel.startswith("..")
    elif how == "absolute":
        rel = str(secret)
    elif how == "device (absolute)":
        rel, size, sha = "/dev/zero", 0, hashlib.sha256(b"").hexdigest()
    elif how == "symlink out":
        (run_copy / "records" / "p0001-evil.h5").symlink_to(secret)
        rel = "records/p0001-evil.h5"
    elif how == "symlink to a device":
        (run_copy / "records" / "p0001-zero.h5").symlink_to("/dev/zero")
        rel, size, sha = "records/p0001-zero.h5", 0, hashlib.sha256(b"").hexdigest()
    elif how == "not under records/":
        rel = "rig.toml"
        data = (run_copy / "rig.toml").read_bytes()
        size, sha = len(data), hashlib.sha256(data).hexdigest()
    elif how == "fifo":
        os.mkfifo(run_copy / "records" / "p0001-pipe.h5")      # opening it for reading would block
        rel, size, sha = "records/p0001-pipe.h5", 0, hashlib.sha256(b"").hexdigest()
    else:
        (run_copy / "records" / "p0001-dir.h5").mkdir()
        rel, size, sha = "records/p0001-dir.h5", 4096, ""
    attempt = _set_record_path(run_copy, 1, rel, size, sha)

    proc = cli("review", str(run_copy), "--attempts")          # verifies hashes: would read the file
    assert proc.returncode == 0 and "Traceback" not in proc.stderr, proc.stderr
    refusal = [line for line in proc.stdout.splitlines() if line.startswith("problem:") and "record path" in line]
    assert len(refusal) == 1, proc.stdout
    assert f"attempt {attempt}: record path {rel!r}" in refusal[0] and "not read" in refusal[0]
    assert "(point 2)" in refusal[0]                           # numbered from 1, as everywhere
    assert "record refused" in proc.stdout                    # the attempt's line says so too
    # the other points are still shown as accepted; the refused one has no accepted attempt
    assert "1 point(s) without an accepted attempt: 2 " in proc.stdout

    out = tmp_path / "out"
    proc = cli("export", str(run_copy), "--out", str(out), "--no-plots")
    assert proc.returncode == 0, proc.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert [p["status"] for p in summary["points"]] == ["accepted", "no accepted attempt", "accepted"]
    assert any(attempt in p and "not read" in p for p in summary["problems"])


def test_reading_a_refused_record_names_attempt_and_path(run_copy: Path, tmp_path: Path):
    from app.storage.index import UnsafeRecordPath
    from app.storage.reader import open_run

    attempt = _set_record_path(run_copy, 0, "../../../../etc/hostname", 0, "")
    run = open_run(run_copy, verify=False)
    assert run.attempt(attempt)["record_status"] == "refused"
    with pytest.raises(UnsafeRecordPath, match=f"attempt {attempt}: record path '../../../../etc/hostname'"):
        run.read_record(attempt)


def test_review_into_a_closed_pipe_exits_quietly(run_copy: Path):
    # enough output to fill the pipe: many attempt rows naming the same record
    con = sqlite3.connect(run_copy / "index.sqlite")
    cols = [r[1] for r in con.execute("PRAGMA table_info(attempts)")]
    with con:
        for n in range(1500):
            picked = ", ".join(f"attempt_id || '-copy{n}'" if c == "attempt_id" else "''" if c == "decision"
                               else c for c in cols)
            con.execute(f"INSERT INTO attempts({', '.join(cols)}) SELECT {picked} FROM attempts "
                        f"WHERE point_index = 0 AND decision = 'accepted'")
    con.close()
    proc = subprocess.Popen([sys.executable, "-m", "app.cli", "review", str(run_copy), "--attempts", "--no-verify"],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    first = proc.stdout.readline()
    assert first.startswith(b"run ")
    proc.stdout.close()                         # as `| head -1` does
    err = proc.stderr.read().decode()
    proc.stderr.close()
    proc.wait(timeout=20)
    assert "Traceback" not in err and "BrokenPipe" not in err and "Exception ignored" not in err, err
    assert proc.returncode == 141               # as a process ended by SIGPIPE (128 + 13)


def test_a_run_whose_index_was_lost_is_still_a_run(run_copy: Path, tmp_path: Path):
    (run_copy / "index.sqlite").unlink()
    proc = cli("review", str(run_copy))
    assert proc.returncode == 0 and "not a run folder" not in proc.stderr, proc.stderr
    assert "attempts were rebuilt from the record files" in proc.stdout and "3 attempts" in proc.stdout
    proc = cli("resume", str(run_copy), "--fast")
    assert proc.returncode != 0 and "index.sqlite is missing" in proc.stderr and "Traceback" not in proc.stderr
