"""The run index: one SQLite file (``index.sqlite``) listing points, attempts and analyses.

One writer (the run writer's thread, or a short command such as ``accept``) changes it
inside transactions; WAL journal with ``synchronous=FULL`` so that a killed process
loses at most the transaction it was in. Readers open it read-only. The schema is
documented in docs/run-layout.md; keep the two in step.

Acceptance rule: the accepted attempt of a point is the one whose ``decision`` is
``accepted``. A newly stored attempt becomes accepted (``decided_by = 'auto'``) unless the
user has accepted another attempt of that point; a flagged attempt is accepted only when
the point has no accepted attempt yet, so the newest *good* attempt wins. An attempt whose
record was cut short (flag ``interrupted``: a halt, an abort or a fatal fault such as a
flame-out during the record) is stored as evidence, marked rejected, and can never be
accepted.

Imports: standard library and ``app.errors`` only (no Qt, no drivers, no h5py).
"""

from __future__ import annotations

import json
import sqlite3
import time
from pathlib import Path
from typing import Any, Iterable

from app.errors import FlamebodeError

INDEX_NAME = "index.sqlite"
SCHEMA_VERSION = 1
NEVER_ACCEPTED = frozenset({"interrupted"})   # attempt flags that keep an attempt out of every result

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


def insert_attempt(conn: sqlite3.Connection, row: dict[str, Any], analysis: dict[str, Any]) -> None:
    """Insert one attempt with its first analysis and apply the acceptance rule (caller commits)."""
    upsert_points(conn, [(row["point_index"], row["freq_hz"], row["target_ratio"])])
    seq = conn.execute("SELECT COALESCE(MAX(seq), 0) + 1 FROM attempts WHERE point_index = ?",
                       (row["point_index"],)).fetchone()[0]
    cols = ("attempt_id", "point_index", "record_file", "record_bytes", "record_sha256", "freq_hz",
            "target_ratio", "drive_v", "sample_rate_hz", "n_samples", "overflows", "flags",
            "started_wall_s", "stored_wall_s")
    values = [row[c] if c != "flags" else json.dumps(list(row["flags"])) for c in cols]
    conn.execute(f"INSERT INTO attempts({', '.join(cols)}, seq) VALUES ({', '.join('?' * len(cols))}, ?)",
                 (*values, seq))
    insert_analysis(conn, row["attempt_id"], analysis)
    _auto_accept(conn, row["point_index"], row["attempt_id"], good=not row["flags"])


def insert_analysis(conn: sqlite3.Connection, attempt_id: str, analysis: dict[str, Any]) -> int:
    cols = ("attempt_id", "created_wall_s", "rig_path", "rig_sha256", "tool_version", *ANALYSIS_FIELDS,
            "quality", "warnings")
    vals = [attempt_id, analysis.get("created_wall_s", time.time()), analysis["rig_path"],
            analysis["rig_sha256"], analysis["tool_version"], *(analysis.get(k) for k in ANALYSIS_FIELDS),
            json.dumps(analysis.get("quality", {})), json.dumps(list(analysis.get("warnings", ())))]
    cur = conn.execute(f"INSERT INTO analyses({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})", vals)
    return int(cur.lastrowid)


def _auto_accept(conn: sqlite3.Connection, point_index: int, attempt_id: str, good: bool) -> None:
    flags = conn.execute("SELECT flags FROM attempts WHERE attempt_id = ?", (attempt_id,)).fetchone()
    if flags is not None and NEVER_ACCEPTED & set(json.loads(flags["flags"])):
        conn.execute("UPDATE attempts SET decision = 'rejected', decided_by = 'auto', decision_reason = ?, "
                     "decided_wall_s = ? WHERE attempt_id = ?",
                     ("record interrupted before its end (kept as evidence, never accepted)", time.time(),
                      attempt_id))
        return
    current = conn.execute("SELECT attempt_id, decided_by FROM attempts WHERE point_index = ? "
                           "AND decision = 'accepted'", (point_index,)).fetchone()
    if current is not None and (current["decided_by"] == "user" or not good):
        return
    now = time.time()
    conn.execute("UPDATE attempts SET decision = '', decided_by = 'auto', decision_reason = 'superseded by a "
                 "newer attempt', decided_wall_s = ? WHERE point_index = ? AND decision = 'accepted'",
                 (now, point_index))
    conn.execute("UPDATE attempts SET decision = 'accepted', decided_by = 'auto', decision_reason = ?, "
                 "decided_wall_s = ? WHERE attempt_id = ?",
                 ("newest attempt" + ("" if good else " (flagged; no other attempt)"), now, attempt_id))


class NotAcceptable(FlamebodeError):
    """An attempt that can never be accepted (its record was interrupted before its end)."""


def decide(conn: sqlite3.Connection, attempt_id: str, accept: bool, reason: str) -> int:
    """User decision on one attempt; returns its point index. Accepting un-accepts the others.

    An interrupted attempt (flag ``interrupted``) cannot be accepted: :class:`NotAcceptable`."""
    row = conn.execute("SELECT point_index, flags FROM attempts WHERE attempt_id = ?", (attempt_id,)).fetchone()
    if row is None:
        raise KeyError(attempt_id)
    if accept and NEVER_ACCEPTED & set(json.loads(row["flags"])):
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


def attempts(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    rows = conn.execute("SELECT * FROM attempts ORDER BY point_index, seq").fetchall()
    out = []
    for r in rows:
        d = dict(r)
        d["flags"] = tuple(json.loads(d["flags"]))
        out.append(d)
    return out


def latest_analyses(conn: sqlite3.Connection) -> dict[str, dict[str, Any]]:
    """The newest analysis row of every attempt, keyed by attempt id."""
    rows = conn.execute("SELECT a.* FROM analyses a JOIN (SELECT attempt_id, MAX(analysis_id) AS m "
                        "FROM analyses GROUP BY attempt_id) b ON a.analysis_id = b.m").fetchall()
    out = {}
    for r in rows:
        d = dict(r)
        d["quality"] = json.loads(d["quality"])
        d["warnings"] = tuple(json.loads(d["warnings"]))
        out[d["attempt_id"]] = d
    return out


def points(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    return [dict(r) for r in conn.execute("SELECT * FROM points ORDER BY point_index")]


def faults(conn: sqlite3.Connection) -> list[dict[str, Any]]:
    return [dict(r) for r in conn.execute("SELECT * FROM faults ORDER BY fault_id")]
