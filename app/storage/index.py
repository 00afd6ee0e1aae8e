"""The run index: one SQLite file (``index.sqlite``) listing points, attempts and analyses.

One writer (the run writer's thread, or a short command such as ``accept``) changes it
inside transactions; WAL journal with ``synchronous=FULL`` so that a killed process
loses at most the transaction it was in. Readers open it read-only. The schema is
documented in docs/run-layout.md; keep the two in step.

Acceptance rule (:func:`rule_choice`): the accepted attempt of a point is the one whose
``decision`` is ``accepted``. Unless a person accepted an attempt of that point, each new
attempt makes the point take, among its attempts not rejected, the newest one with no flags
(neither attempt flags nor analysis warnings); where every such attempt is flagged, the
newest one (``decided_by = 'auto'``). A person's decision (``accept``/``reject``) is kept
when new attempts are added. An attempt whose record was cut short (flag ``interrupted``:
a halt, an abort or a fatal fault such as a flame-out during the record) is stored as
evidence, marked rejected, and can never be accepted. People name an attempt by its point
number and its attempt number, both from 1 (:func:`attempt_label`, e.g. ``7/2``).

Guards for run folders (used by every command that takes one): :func:`require_run_folder`
refuses a path that is not a run folder before anything is read or written;
:func:`record_path` refuses a record path from the index that does not name a regular
file inside the run's ``records/`` folder; :func:`snapshot_changes` compares the rig, plan
and scenario snapshots with the hashes fixed when the run was created (or last accepted
with ``--accept-changed-snapshot``, see :func:`accept_snapshot_changes`).

Imports: standard library and ``app.errors`` only (no Qt, no drivers, no h5py).
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
import stat
import time
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable

from app.core.flagging import NEVER_ACCEPTED, acceptable, attempt_flagged  # the one rule (also the engine's)
from app.errors import FlamebodeError

INDEX_NAME = "index.sqlite"
RECORDS_DIR = "records"
SCHEMA_VERSION = 1

SCHEMA = """
CREATE TABLE IF NOT EXISTS run_info (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS points (
    point_index   INTEGER PRIMARY KEY,
    freq_hz       REAL NOT NULL,
    target_ratio  REAL NOT NULL
);
CREATE TABLE IF NOT EXISTS attempts (
    attempt_id      TEXT PRIMARY KEY,
    point_index     INTEGER NOT NULL REFERENCES points(point_index),
    seq             INTEGER NOT NULL,
    record_file     TEXT NOT NULL,
    record_bytes    INTEGER NOT NULL,
    record_sha256   TEXT NOT NULL,
    freq_hz         REAL NOT NULL,
    target_ratio    REAL NOT NULL,
    drive_v         REAL NOT NULL,
    sample_rate_hz  REAL NOT NULL,
    n_samples       INTEGER NOT NULL,
    overflows       INTEGER NOT NULL,
    flags           TEXT NOT NULL,
    started_wall_s  REAL NOT NULL,
    stored_wall_s   REAL NOT NULL,
    decision        TEXT NOT NULL DEFAULT '',
    decided_by      TEXT NOT NULL DEFAULT '',
    decision_reason TEXT NOT NULL DEFAULT '',
    decided_wall_s  REAL
);
CREATE INDEX IF NOT EXISTS attempts_by_point ON attempts(point_index, seq);
CREATE TABLE IF NOT EXISTS analyses (
    analysis_id      INTEGER PRIMARY KEY AUTOINCREMENT,
    attempt_id       TEXT NOT NULL REFERENCES attempts(attempt_id),
    created_wall_s   REAL NOT NULL,
    rig_path         TEXT NOT NULL,
    rig_sha256       TEXT NOT NULL,
    tool_version     TEXT NOT NULL,
    achieved_ratio   REAL,
    sigma_ratio      REAL,
    mean_velocity_m_s REAL,
    gain             REAL,
    phase_rad        REAL,
    gain_ci95        REAL,
    phase_ci95_rad   REAL,
    ftf_re           REAL,
    ftf_im           REAL,
    quality          TEXT NOT NULL,
    warnings         TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS analyses_by_attempt ON analyses(attempt_id, analysis_id);
CREATE TABLE IF NOT EXISTS faults (
    fault_id     INTEGER PRIMARY KEY AUTOINCREMENT,
    wall_time_s  REAL NOT NULL,
    name         TEXT NOT NULL,
    message      TEXT NOT NULL,
    action       TEXT NOT NULL,
    advice       TEXT NOT NULL,
    point_index  INTEGER,
    fatal        INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS snapshots (
    name           TEXT PRIMARY KEY,
    sha256         TEXT NOT NULL,
    content        BLOB NOT NULL,
    created_wall_s REAL NOT NULL
);
CREATE TABLE IF NOT EXISTS snapshot_changes (
    change_id    INTEGER PRIMARY KEY AUTOINCREMENT,
    wall_time_s  REAL NOT NULL,
    name         TEXT NOT NULL,
    old_sha256   TEXT NOT NULL,
    new_sha256   TEXT NOT NULL,
    keys         TEXT NOT NULL,
    content      BLOB NOT NULL,
    command      TEXT NOT NULL
);
"""

ANALYSIS_FIELDS = ("achieved_ratio", "sigma_ratio", "mean_velocity_m_s", "gain", "phase_rad",
                   "gain_ci95", "phase_ci95_rad", "ftf_re", "ftf_im")


def connect(path: str | Path, *, read_only: bool = False, timeout_s: float = 5.0) -> sqlite3.Connection:
    """Open the index; read-only opens never create or change the file."""
    p = Path(path)
    if read_only:
        conn = sqlite3.connect(f"{p.resolve().as_uri()}?mode=ro", uri=True, timeout=timeout_s)
    else:
        conn = sqlite3.connect(str(p), timeout=timeout_s)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=FULL")
    conn.row_factory = sqlite3.Row
    conn.execute("PRAGMA foreign_keys=ON")
    return conn


def create(path: str | Path) -> None:
    """Create the schema if missing (idempotent)."""
    conn = connect(path)
    try:
        with conn:
            conn.executescript(SCHEMA)
            conn.execute("INSERT OR IGNORE INTO run_info(key, value) VALUES ('schema_version', ?)",
                         (str(SCHEMA_VERSION),))
    finally:
        conn.close()


def set_info(conn: sqlite3.Connection, values: dict[str, Any]) -> None:
    conn.executemany("INSERT OR REPLACE INTO run_info(key, value) VALUES (?, ?)",
                     [(k, v if isinstance(v, str) else json.dumps(v)) for k, v in values.items()])


def get_info(conn: sqlite3.Connection) -> dict[str, str]:
    return {r["key"]: r["value"] for r in conn.execute("SELECT key, value FROM run_info")}


def upsert_points(conn: sqlite3.Connection, points: Iterable[tuple[int, float, float]]) -> None:
    conn.executemany("INSERT OR IGNORE INTO points(point_index, freq_hz, target_ratio) VALUES (?, ?, ?)",
                     [(int(i), float(f), float(a)) for i, f, a in points])


def next_seq(conn: sqlite3.Connection, point_index: int) -> int:
    """The attempt number (from 1) the point's next stored attempt gets."""
    return int(conn.execute("SELECT COALESCE(MAX(seq), 0) + 1 FROM attempts WHERE point_index = ?",
                            (int(point_index),)).fetchone()[0])


def insert_attempt(conn: sqlite3.Connection, row: dict[str, Any], analysis: dict[str, Any]) -> None:
    """Insert one attempt with its first analysis and apply the acceptance rule (caller commits)."""
    upsert_points(conn, [(row["point_index"], row["freq_hz"], row["target_ratio"])])
    seq = next_seq(conn, row["point_index"])
    cols = ("attempt_id", "point_index", "record_file", "record_bytes", "record_sha256", "freq_hz",
            "target_ratio", "drive_v", "sample_rate_hz", "n_samples", "overflows", "flags",
            "started_wall_s", "stored_wall_s")
    values = [row[c] if c != "flags" else json.dumps(list(row["flags"])) for c in cols]
    conn.execute(f"INSERT INTO attempts({', '.join(cols)}, seq) VALUES ({', '.join('?' * len(cols))}, ?)",
                 (*values, seq))
    insert_analysis(conn, row["attempt_id"], analysis)
    _auto_accept(conn, row["point_index"], row["attempt_id"])


def insert_analysis(conn: sqlite3.Connection, attempt_id: str, analysis: dict[str, Any]) -> int:
    cols = ("attempt_id", "created_wall_s", "rig_path", "rig_sha256", "tool_version", *ANALYSIS_FIELDS,
            "quality", "warnings")
    vals = [attempt_id, analysis.get("created_wall_s", time.time()), analysis["rig_path"],
            analysis["rig_sha256"], analysis["tool_version"], *(analysis.get(k) for k in ANALYSIS_FIELDS),
            json.dumps(analysis.get("quality", {})), json.dumps(list(analysis.get("warnings", ())))]
    cur = conn.execute(f"INSERT INTO analyses({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})", vals)
    return int(cur.lastrowid)


def attempt_label(point_index: int, seq: Any) -> str:
    """How people name an attempt: point number / attempt number, both from 1 (e.g. ``7/2``)."""
    return f"{int(point_index) + 1}/{seq if seq is not None else '?'}"


def is_flagged(attempt: dict[str, Any]) -> bool:
    """An attempt with attempt flags or analysis warnings (under ``analysis`` or ``warnings``):
    app.core.flagging's rule, on a stored attempt's row."""
    warnings = attempt.get("warnings")
    if warnings is None:
        warnings = (attempt.get("analysis") or {}).get("warnings", ())
    return attempt_flagged(attempt.get("flags") or (), warnings or ())


def rule_choice(attempts_of_point: list[dict[str, Any]]) -> dict[str, Any] | None:
    """The attempt the acceptance rule takes for one point (attempts in order of ``seq``).

    Among attempts not rejected and never-accepted flags aside: the newest with no flags,
    else the newest. A person's accepted attempt is not overridden (the caller checks)."""
    candidates = [a for a in attempts_of_point if a.get("decision") != "rejected"
                  and acceptable(a.get("flags") or ())]
    candidates.sort(key=lambda a: a.get("seq") or 0)
    good = [a for a in candidates if not is_flagged(a)]
    return (good or candidates)[-1] if candidates else None


def _point_attempts(conn: sqlite3.Connection, point_index: int) -> list[dict[str, Any]]:
    rows = conn.execute("SELECT at.attempt_id, at.seq, at.flags, at.decision, at.decided_by, "
                        "(SELECT an.warnings FROM analyses an WHERE an.attempt_id = at.attempt_id "
                        "ORDER BY an.analysis_id DESC LIMIT 1) AS warnings FROM attempts at "
                        "WHERE at.point_index = ? ORDER BY at.seq", (point_index,)).fetchall()
    return [{**dict(r), "flags": json_list(r["flags"]), "warnings": json_list(r["warnings"])}
            for r in rows]


def _auto_accept(conn: sqlite3.Connection, point_index: int, attempt_id: str) -> None:
    flags = conn.execute("SELECT flags FROM attempts WHERE attempt_id = ?", (attempt_id,)).fetchone()
    now = time.time()
    if flags is not None and NEVER_ACCEPTED & set(json_list(flags["flags"])):
        conn.execute("UPDATE attempts SET decision = 'rejected', decided_by = 'auto', decision_reason = ?, "
                     "decided_wall_s = ? WHERE attempt_id = ?",
                     ("record interrupted before its end (kept as evidence, never accepted)", now, attempt_id))
        return
    atts = _point_attempts(conn, point_index)
    current = next((a for a in atts if a["decision"] == "accepted"), None)
    if current is not None and current["decided_by"] == "user":
        return
    chosen = rule_choice(atts)
    if chosen is None or (current is not None and current["attempt_id"] == chosen["attempt_id"]):
        return
    conn.execute("UPDATE attempts SET decision = '', decided_by = 'auto', decision_reason = 'superseded by a "
                 "newer attempt', decided_wall_s = ? WHERE point_index = ? AND decision = 'accepted'",
                 (now, point_index))
    rejected = any(a.get("decision") == "rejected" for a in atts)
    why = ("newest attempt with no flags" if not is_flagged(chosen)
           else "newest attempt (every other attempt is flagged or rejected)" if rejected
           else "newest attempt (every attempt of the point is flagged)")
    conn.execute("UPDATE attempts SET decision = 'accepted', decided_by = 'auto', decision_reason = ?, "
                 "decided_wall_s = ? WHERE attempt_id = ?", (why, now, chosen["attempt_id"]))


def find_attempt(conn: sqlite3.Connection, point_number: int, attempt_number: int) -> str:
    """The attempt id of point ``point_number``'s attempt ``attempt_number`` (both from 1);
    :class:`LookupError` naming what exists when there is none."""
    rows = conn.execute("SELECT attempt_id, seq FROM attempts WHERE point_index = ? ORDER BY seq",
                        (int(point_number) - 1,)).fetchall()
    for r in rows:
        if r["seq"] == attempt_number:
            return str(r["attempt_id"])
    if not rows:
        raise LookupError(f"point {point_number} has no attempt")
    raise LookupError(f"point {point_number} has no attempt {attempt_number} (it has attempt(s) "
                      f"{', '.join(str(r['seq']) for r in rows)})")


class NotAcceptable(FlamebodeError):
    """An attempt that can never be accepted (its record was interrupted before its end)."""


def decide(conn: sqlite3.Connection, attempt_id: str, accept: bool, reason: str) -> int:
    """User decision on one attempt; returns its point index. Accepting un-accepts the others.

    An interrupted attempt (flag ``interrupted``) cannot be accepted: :class:`NotAcceptable`."""
    row = conn.execute("SELECT point_index, flags FROM attempts WHERE attempt_id = ?", (attempt_id,)).fetchone()
    if row is None:
        raise KeyError(attempt_id)
    if accept and NEVER_ACCEPTED & set(json_list(row["flags"])):
        raise NotAcceptable(f"attempt {attempt_id} was interrupted before its record ended (halt, abort or "
                            f"fault); it is kept as evidence and cannot be accepted: measure the point again")
    point, now = int(row["point_index"]), time.time()
    if accept:
        conn.execute("UPDATE attempts SET decision = '', decided_by = 'user', decision_reason = 'another "
                     "attempt accepted', decided_wall_s = ? WHERE point_index = ? AND decision = 'accepted'",
                     (now, point))
    conn.execute("UPDATE attempts SET decision = ?, decided_by = 'user', decision_reason = ?, decided_wall_s = ? "
                 "WHERE attempt_id = ?", ("accepted" if accept else "rejected", reason, now, attempt_id))
    return point


def insert_fault(conn: sqlite3.Connection, fault: dict[str, Any]) -> None:
    conn.execute("INSERT INTO faults(wall_time_s, name, message, action, advice, point_index, fatal) "
                 "VALUES (?, ?, ?, ?, ?, ?, ?)",
                 (fault["wall_time_s"], fault["name"], fault["message"], fault["action"], fault["advice"],
                  fault["point_index"], int(bool(fault["fatal"]))))


def json_list(text: Any) -> tuple[Any, ...]:
    """A JSON list stored in the index (flags, warnings), or ("unreadable-index-entry",) when the
    text is damaged: a damaged entry reads as flagged instead of breaking every command."""
    try:
        value = json.loads(text) if text else []
    except (TypeError, ValueError):
        return ("unreadable-index-entry",)
    return tuple(value) if isinstance(value, list) else ("unreadable-index-entry",)


def json_dict(text: Any) -> dict[str, Any]:
    try:
        value = json.loads(text) if text else {}
    except (TypeError, ValueError):
        return {}
    return value if isinstance(value, dict) else {}


def attempts(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    rows = conn.execute("SELECT * FROM attempts ORDER BY point_index, seq").fetchall()
    out = []
    for r in rows:
        d = dict(r)
        d["flags"] = json_list(d["flags"])
        out.append(d)
    return out


def latest_analyses(conn: sqlite3.Connection) -> dict[str, dict[str, Any]]:
    """The newest analysis row of every attempt, keyed by attempt id."""
    rows = conn.execute("SELECT a.* FROM analyses a JOIN (SELECT attempt_id, MAX(analysis_id) AS m "
                        "FROM analyses GROUP BY attempt_id) b ON a.analysis_id = b.m").fetchall()
    out = {}
    for r in rows:
        d = dict(r)
        d["quality"] = json_dict(d["quality"])
        d["warnings"] = json_list(d["warnings"])
        out[d["attempt_id"]] = d
    return out


def points(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    return [dict(r) for r in conn.execute("SELECT * FROM points ORDER BY point_index")]


def faults(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    return [dict(r) for r in conn.execute("SELECT * FROM faults ORDER BY fault_id")]


# -- guards for run folders --------------------------------------------------------------


class NotARunFolder(FlamebodeError):
    """The path given to a run command is not a run folder (nothing was read or written)."""


class UnsafeRecordPath(FlamebodeError):
    """An index row names a record path outside the run's records folder, or not a regular file."""


class SnapshotChanged(FlamebodeError):
    """A rig, plan or scenario snapshot differs from the one the run was created (or last accepted) with."""


def _has_run_tables(idx: Path) -> tuple[bool, str]:
    """(looks like a run index, why not); a locked index counts as one (a sweep holds it)."""
    try:
        conn = sqlite3.connect(f"{idx.resolve().as_uri()}?mode=ro", uri=True, timeout=0.5)
        try:
            names = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        finally:
            conn.close()
    except sqlite3.OperationalError as exc:
        if "locked" in str(exc) or "busy" in str(exc):
            return True, ""
        return False, f"{INDEX_NAME} cannot be read: {exc}"
    except sqlite3.DatabaseError as exc:
        return False, f"{INDEX_NAME} is not an SQLite index: {exc}"
    missing = [t for t in ("run_info", "attempts") if t not in names]
    if missing:
        return False, f"{INDEX_NAME} has no {' and no '.join(missing)} table"
    return True, ""


def _has_records(run_dir: Path) -> bool:
    records = run_dir / RECORDS_DIR
    return records.is_dir() and any(f.is_file() for f in records.glob("*.h5"))


def require_run_folder(run_dir: str | Path) -> Path:
    """``run_dir`` as a Path if it is a run folder, else :class:`NotARunFolder` naming what is missing.

    A run folder holds ``index.sqlite`` with the run tables; a folder whose index was lost or
    damaged still counts when ``records/`` holds record files (they are self-describing).
    Only reads: nothing in the folder is created or changed."""
    p = Path(run_dir)
    if not p.exists():
        raise NotARunFolder(f"{p}: not a run folder (no such file or folder)")
    if not p.is_dir():
        raise NotARunFolder(f"{p}: not a run folder (a file, not a folder; give the folder a sweep wrote "
                            f"with --out)")
    idx = p / INDEX_NAME
    if idx.exists() and not idx.is_file():
        raise NotARunFolder(f"{p}: not a run folder ({INDEX_NAME} is not a regular file)")
    if idx.is_file():
        ok, why = _has_run_tables(idx)
        if ok or _has_records(p):
            return p
        raise NotARunFolder(f"{p}: not a run folder ({why}, and no record files in {RECORDS_DIR}/)")
    if _has_records(p):
        return p
    raise NotARunFolder(f"{p}: not a run folder (no index: {INDEX_NAME} is missing, and no record files "
                        f"in {RECORDS_DIR}/); give the folder a sweep wrote with --out")


def record_path(run_dir: str | Path, record_file: Any, attempt_id: Any) -> Path:
    """The record file an index row names, checked before anything reads it.

    It must be a relative path ``records/<name>`` that stays inside the run folder after
    symbolic links are resolved, and, if it exists, a regular file (not a device, pipe or
    folder). Otherwise :class:`UnsafeRecordPath` names the attempt and the path; a missing
    file is returned as is (the caller reports it missing)."""
    run = Path(run_dir)
    where = f"{run / INDEX_NAME}: attempt {attempt_id}: record path {record_file!r}"
    if not isinstance(record_file, str) or not record_file.strip() or "\x00" in record_file:
        raise UnsafeRecordPath(f"{where} is not a file name; not read")
    rel = Path(record_file)
    if rel.is_absolute() or record_file.startswith(("\\", "~")) or (len(record_file) > 1 and record_file[1] == ":"):
        raise UnsafeRecordPath(f"{where} is absolute; record paths are relative to the run folder "
                               f"({RECORDS_DIR}/<name>.h5); not read")
    if ".." in rel.parts or "\\" in record_file:
        raise UnsafeRecordPath(f"{where} climbs out of the run folder (..); not read")
    if len(rel.parts) != 2 or rel.parts[0] != RECORDS_DIR:
        raise UnsafeRecordPath(f"{where} is not in the run's {RECORDS_DIR}/ folder; not read")
    full = run / rel
    try:
        real = full.resolve(strict=False)
        root = run.resolve(strict=True)
    except (OSError, RuntimeError) as exc:       # a symbolic-link loop
        raise UnsafeRecordPath(f"{where} cannot be resolved ({exc}); not read") from None
    if not real.is_relative_to(root / RECORDS_DIR):
        raise UnsafeRecordPath(f"{where} leads outside the run's {RECORDS_DIR}/ folder (to {real}, through a "
                               f"symbolic link); not read")
    try:
        mode = os.stat(real).st_mode
    except FileNotFoundError:
        return full
    except OSError as exc:
        raise UnsafeRecordPath(f"{where} cannot be examined ({exc}); not read") from None
    if not stat.S_ISREG(mode):
        raise UnsafeRecordPath(f"{where} is not a regular file (a device, pipe or folder); not read")
    return full


# -- snapshot hashes ---------------------------------------------------------------------


@dataclass(frozen=True)
class SnapshotChange:
    """One snapshot that differs from the version the run accepts (creation or last accepted)."""

    name: str                   # file name in the run folder, e.g. rig.toml
    old_sha256: str
    new_sha256: str             # empty when the file is missing
    keys: tuple[str, ...]       # e.g. "drive.ceiling: 2.0 V → 9 V"; empty when unknown or none
    content: bytes = b""

    def describe(self) -> str:
        if not self.new_sha256:
            return f"{self.name}: the snapshot is missing (sha256 {self.old_sha256[:12]} expected)"
        what = "; ".join(self.keys) if self.keys else "content changed"
        return f"{self.name}: {what} (sha256 {self.old_sha256[:12] or '(none)'} → {self.new_sha256[:12]})"


def _flatten(value: Any, prefix: str = "") -> dict[str, Any]:
    if isinstance(value, dict):
        out: dict[str, Any] = {}
        for k, v in value.items():
            out.update(_flatten(v, f"{prefix}.{k}" if prefix else str(k)))
        return out
    if isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
        out = {}
        for i, v in enumerate(value):
            out.update(_flatten(v, f"{prefix}[{i + 1}]"))
        return out
    return {prefix: value}


def _show(value: Any) -> str:
    if value is _ABSENT:
        return "(absent)"
    return value if isinstance(value, str) else json.dumps(value, default=str)


_ABSENT = object()


def changed_keys(name: str, old: bytes, new: bytes) -> tuple[str, ...]:
    """``key: old → new`` for every key that differs between two TOML texts (dotted names)."""
    if not name.endswith(".toml"):
        return ()
    try:
        a = _flatten(tomllib.loads(old.decode("utf-8")))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError):
        return ()
    try:
        b = _flatten(tomllib.loads(new.decode("utf-8")))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        return (f"not valid TOML now ({exc})",)
    out = [f"{k}: {_show(a.get(k, _ABSENT))} → {_show(b.get(k, _ABSENT))}"
           for k in list(a) + [k for k in b if k not in a] if a.get(k, _ABSENT) != b.get(k, _ABSENT)]
    return tuple(out) or ("no key changed (comments or layout only)",)


def _accepted_snapshots(conn: sqlite3.Connection) -> dict[str, tuple[str, bytes | None]]:
    """name -> (sha256, content or None) the run accepts: the newest accepted change, else creation."""
    info = get_info(conn)
    out: dict[str, tuple[str, bytes | None]] = {}
    for key in ("rig", "plan", "scenario", "calibration"):
        name, digest = info.get(f"{key}_snapshot"), info.get(f"{key}_sha256")
        if name and digest:
            out[name] = (digest, None)
    tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    if "snapshots" in tables:
        for r in conn.execute("SELECT name, sha256, content FROM snapshots"):
            if r[0] in out and out[r[0]][0] == r[1]:
                out[r[0]] = (r[1], bytes(r[2]))
    if "snapshot_changes" in tables:
        for r in conn.execute("SELECT name, new_sha256, content FROM snapshot_changes ORDER BY change_id"):
            out[r[0]] = (r[1], bytes(r[2]))
    return out


def snapshot_changes(run_dir: str | Path) -> list[SnapshotChange]:
    """Snapshots of the run that differ from the accepted version; [] when the index cannot be read
    (the caller reports an unreadable index and refuses to continue anyway)."""
    run = Path(run_dir)
    try:
        conn = connect(run / INDEX_NAME, read_only=True, timeout_s=2.0)
        try:
            accepted = _accepted_snapshots(conn)
        finally:
            conn.close()
    except sqlite3.Error:
        return []
    out = []
    for name, (digest, old) in accepted.items():
        f = run / name
        if not f.is_file():
            out.append(SnapshotChange(name, digest, "", ()))
            continue
        now = f.read_bytes()
        new_digest = hashlib.sha256(now).hexdigest()
        if new_digest != digest:
            keys = changed_keys(name, old, now) if old is not None else (
                "(the run's index holds no copy of the accepted text, so the changed keys are unknown)",)
            out.append(SnapshotChange(name, digest, new_digest, keys, now))
    for f in sorted(run.glob("scenario.*")):     # resume would use a scenario the run never had
        if f.name not in accepted and f.is_file():
            now = f.read_bytes()
            out.append(SnapshotChange(f.name, "", hashlib.sha256(now).hexdigest(),
                                      ("a scenario file the run was not created with",), now))
    return out


def accept_snapshot_changes(run_dir: str | Path, changes: list[SnapshotChange], command: str) -> float:
    """Record accepted snapshot changes (old and new hash, keys, time, command) in ``snapshot_changes``;
    the creation hashes in ``run_info`` are never overwritten. Returns the time recorded."""
    missing = [c for c in changes if not c.new_sha256]
    if missing:
        raise SnapshotChanged("; ".join(c.describe() for c in missing) + ": a missing snapshot cannot be accepted")
    path = Path(run_dir) / INDEX_NAME
    create(path)
    now = time.time()
    conn = connect(path)
    try:
        with conn:
            conn.executemany(
                "INSERT INTO snapshot_changes(wall_time_s, name, old_sha256, new_sha256, keys, content, command) "
                "VALUES (?, ?, ?, ?, ?, ?, ?)",
                [(now, c.name, c.old_sha256, c.new_sha256, json.dumps(list(c.keys), ensure_ascii=False),
                  c.content, command) for c in changes])
    finally:
        conn.close()
    return now


def record_creation_snapshots(conn: sqlite3.Connection, contents: dict[str, bytes]) -> None:
    """Keep the text of each snapshot as created (for naming changed keys later); never replaces a row."""
    now = time.time()
    conn.executemany("INSERT OR IGNORE INTO snapshots(name, sha256, content, created_wall_s) VALUES (?, ?, ?, ?)",
                     [(name, hashlib.sha256(data).hexdigest(), data, now) for name, data in contents.items()])


def snapshot_change_log(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    """Accepted snapshot changes, oldest first (without the texts)."""
    tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    if "snapshot_changes" not in tables:
        return []
    rows = conn.execute("SELECT change_id, wall_time_s, name, old_sha256, new_sha256, keys, command "
                        "FROM snapshot_changes ORDER BY change_id").fetchall()
    return [{**dict(r), "keys": tuple(json.loads(r["keys"]))} for r in rows]
