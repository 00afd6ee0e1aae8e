"""Open a run folder for reading: points, attempts, acceptance, analyses and problems.

``open_run(run_dir)`` never fails because one part of a run is damaged: a leftover
temporary file, a missing or corrupt record file, a record not in the index, a locked or
unreadable index each become one plain message in ``Run.problems`` while the rest stays
readable. When the index cannot be read at all, the attempts are rebuilt from the
record files' own attributes (records are self-describing).

Imports: standard library, numpy, h5py (via record.py) only. No Qt, no drivers.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import FlamebodeError, RecordError
from . import index
from .record import RawRecord, file_digest, is_tmp, read_record, read_record_attrs
from .writer import RECORDS_DIR, SNAPSHOT_PLAN, SNAPSHOT_RIG


class RunNotFound(FlamebodeError):
    """The folder given is not a run folder."""


@dataclass
class Run:
    """A run as read from disk. ``attempts`` rows carry their newest analysis under ``analysis``."""

    run_dir: Path
    info: dict[str, str]
    points: list[dict[str, Any]]
    attempts: list[dict[str, Any]]
    faults: list[dict[str, Any]] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    index_readable: bool = True

    @property
    def rig_path(self) -> Path:
        return self.run_dir / SNAPSHOT_RIG

    @property
    def plan_path(self) -> Path:
        return self.run_dir / SNAPSHOT_PLAN

    def attempt(self, attempt_id: str) -> dict[str, Any]:
        for a in self.attempts:
            if a["attempt_id"] == attempt_id:
                return a
        raise RecordError(f"{self.run_dir}: no attempt '{attempt_id}' in this run")

    def attempts_of(self, point_index: int) -> list[dict[str, Any]]:
        return [a for a in self.attempts if a["point_index"] == point_index]

    def accepted(self) -> dict[int, dict[str, Any]]:
        """The accepted attempt of each point that has one (and whose record is usable)."""
        return {a["point_index"]: a for a in self.attempts
                if a["decision"] == "accepted" and a["record_status"] == "ok"}

    def pending_points(self) -> list[int]:
        """Planned points, in order, that have no usable accepted attempt."""
        done = self.accepted()
        return [p["point_index"] for p in self.points if p["point_index"] not in done]

    def flagged_points(self) -> list[int]:
        return [i for i, a in sorted(self.accepted().items()) if a["flags"] or a["analysis"].get("warnings")]

    def read_record(self, attempt_id: str) -> RawRecord:
        a = self.attempt(attempt_id)
        return read_record(index.record_path(self.run_dir, a["record_file"], attempt_id))

    @property
    def kind(self) -> str:
        """'FDF' when the points span more than one target amplitude, else 'FTF' (or as recorded)."""
        if self.info.get("kind"):
            return self.info["kind"].upper()
        ratios = {round(p["target_ratio"], 9) for p in self.points}
        return "FDF" if len(ratios) > 1 else "FTF"


def open_run(run_dir: str | Path, verify: bool = True) -> Run:
    """Read a run; ``verify`` re-hashes each record file against the index (sha256)."""
    try:
        run_dir = index.require_run_folder(run_dir)
    except index.NotARunFolder as exc:
        raise RunNotFound(str(exc)) from None
    records = run_dir / RECORDS_DIR
    problems = _leftover_temp_files(run_dir)
    idx = run_dir / index.INDEX_NAME
    run = _read_index(run_dir, idx, problems) if idx.exists() else None
    if run is None:
        if not idx.exists():
            problems.append(f"{idx}: the index is missing; attempts were rebuilt from the record files")
        run = _rebuild_from_records(run_dir, problems)
    known = {a["record_file"] for a in run.attempts}
    for f in sorted(records.glob("*.h5")) if records.is_dir() else ():
        rel = f"{RECORDS_DIR}/{f.name}"
        if rel not in known:
            problems.append(f"{f}: record file not in the index (written just before an interruption; its "
                            f"point was never acknowledged); ignored")
    for a in run.attempts:
        a["record_status"] = _check_file(run_dir, a, verify, problems) if run.index_readable else "ok"
    run.problems = problems
    return run


def _leftover_temp_files(run_dir: Path) -> list[str]:
    out = []
    for f in sorted(run_dir.rglob(".tmp-*")):
        if is_tmp(f) or f.name.endswith(".part"):
            out.append(f"{f}: leftover temporary file from an interrupted write; it is not data and was "
                       f"ignored (safe to delete)")
    return out


def _read_index(run_dir: Path, idx: Path, problems: list[str]) -> Run | None:
    try:
        conn = index.connect(idx, read_only=True, timeout_s=0.5)
        try:
            info = index.get_info(conn)
            pts = index.points(conn)
            atts = index.attempts(conn)
            analyses = index.latest_analyses(conn)
            faults = index.faults(conn)
        finally:
            conn.close()
    except sqlite3.OperationalError as exc:
        what = ("is locked by another program (a sweep still running, or another tool holding it)"
                if "locked" in str(exc) or "busy" in str(exc) else f"cannot be read ({exc})")
        problems.append(f"{idx}: the index {what}; showing the attempts rebuilt from the record files, "
                        f"without decisions or reprocessed analyses")
        return None
    except sqlite3.DatabaseError as exc:
        problems.append(f"{idx}: the index is damaged ({exc}); showing the attempts rebuilt from the "
                        f"record files, without decisions or reprocessed analyses")
        return None
    for a in atts:
        a["analysis"] = analyses.get(a["attempt_id"], {})
    return Run(run_dir=run_dir, info=info, points=pts, attempts=atts, faults=faults)


def _check_file(run_dir: Path, a: dict[str, Any], verify: bool, problems: list[str]) -> str:
    try:
        path = index.record_path(run_dir, a["record_file"], a["attempt_id"])
    except index.UnsafeRecordPath as exc:
        problems.append(f"{exc} (point {_point_number(a['point_index'])})")
        return "refused"
    where = f"{path} (point {_point_number(a['point_index'])}, attempt {a['attempt_id']})"
    if not path.exists():
        problems.append(f"{where}: record file is missing; the point needs a new attempt (reacquire)")
        return "missing"
    size = path.stat().st_size
    if size != a["record_bytes"]:
        problems.append(f"{where}: record file is {size} bytes, the index says {a['record_bytes']}: "
                        f"truncated or changed; not used")
        return "damaged"
    if verify and file_digest(path)[1] != a["record_sha256"]:
        problems.append(f"{where}: record file content does not match its sha256 in the index: corrupted; "
                        f"not used")
        return "damaged"
    return "ok"


def _point_number(point_index: Any) -> str:
    """A stored point index as users see it (from 1)."""
    return str(int(point_index) + 1) if isinstance(point_index, int) else "?"


def _rebuild_from_records(run_dir: Path, problems: list[str]) -> Run:
    atts: list[dict[str, Any]] = []
    records = run_dir / RECORDS_DIR
    for f in sorted(records.glob("*.h5")) if records.is_dir() else ():
        try:
            at = read_record_attrs(f)
        except RecordError as exc:
            problems.append(f"{exc}; not used")
            continue
        atts.append(_attempt_from_attrs(f, at))
    atts.sort(key=lambda a: (a["point_index"], a["started_wall_s"]))
    points: dict[int, dict[str, Any]] = {}
    for a in atts:
        points.setdefault(a["point_index"], {"point_index": a["point_index"], "freq_hz": a["freq_hz"],
                                             "target_ratio": a["target_ratio"]})
        a["seq"] = sum(1 for b in atts if b["point_index"] == a["point_index"] and b is not a and
                       b["started_wall_s"] <= a["started_wall_s"]) + 1
    choose_by_rule(atts)
    return Run(run_dir=run_dir, info={}, points=list(points.values()), attempts=atts, index_readable=False)


def choose_by_rule(atts: list[dict[str, Any]]) -> None:
    """Mark each point's attempt by the index's own rule (newest unflagged, else newest; never an
    interrupted one), as the index would have: for a run rebuilt from its records."""
    for i in {a["point_index"] for a in atts}:
        chosen = index.rule_choice([a for a in atts if a["point_index"] == i])
        for a in atts:
            if a["point_index"] == i:
                a["decision"] = "accepted" if a is chosen else ""


def _attempt_from_attrs(f: Path, at: dict[str, Any]) -> dict[str, Any]:
    """An attempt row from a record's checked attributes (record.check_attrs); absent ones get defaults."""
    return {"attempt_id": at.get("attempt_id", f.stem), "point_index": at.get("point_index", -1),
            "record_file": f"{RECORDS_DIR}/{f.name}", "freq_hz": at["freq_hz"],
            "target_ratio": at.get("target_ratio", float("nan")), "drive_v": at.get("drive_v", float("nan")),
            "sample_rate_hz": at["sample_rate_hz"], "overflows": at.get("overflows", 0),
            "flags": tuple(at.get("flags", ())), "started_wall_s": at.get("started_wall_s", 0.0),
            "decided_by": "", "decision_reason": "", "record_status": "ok",
            "analysis": {**at.get("analysis", {}), "rig_path": SNAPSHOT_RIG}}
