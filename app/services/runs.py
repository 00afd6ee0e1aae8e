"""Open and review a stored run: the run itself, its point rows, problems and snapshot notes.

The window's review tab and ``flamebode review`` both read a run through here, so the
numbers (``app.storage.export.point_rows``) and the notes are the same in both.
Must not import Qt, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

import sqlite3
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

from app.storage import index
from app.storage.export import counts, describe_counts, plan_name, point_rows
from app.storage.index import NEVER_ACCEPTED, attempt_label   # noqa: F401  (re-exported for the front ends)
from app.storage.reader import open_run as _open_run

from .types import RunReview, SnapshotNote

if TYPE_CHECKING:
    from app.storage.reader import Run


def check_run_folder(run_dir: str | Path) -> Path:
    """``run_dir`` as a run folder, or a FlamebodeError saying what it is instead."""
    return index.require_run_folder(run_dir)


def open_run(run_dir: str | Path, verify: bool = True) -> "Run":
    """The run folder read from disk (raises a FlamebodeError naming the folder if it is not one)."""
    return _open_run(index.require_run_folder(run_dir), verify=verify)


def review(run_dir: str | Path, verify: bool = True) -> RunReview:
    """Everything ``review`` prints and the review tab shows, in one typed value."""
    run = open_run(run_dir, verify=verify)
    rows = point_rows(run)
    notes = [SnapshotNote(f"snapshot changed since the run was created: {c.describe()} (resume and reacquire "
                          f"refuse it without --accept-changed-snapshot)", accepted=False)
             for c in index.snapshot_changes(run.run_dir)]
    notes += [SnapshotNote(f"snapshot change accepted by {c['command']} at {_utc(c['wall_time_s'])}: {c['name']}: "
                           f"{'; '.join(c['keys']) or 'content changed'} (sha256 {c['old_sha256'][:12]} → "
                           f"{c['new_sha256'][:12]})", accepted=True)
              for c in _accepted_changes(run.run_dir)]
    return RunReview(run=run, plan_name=plan_name(run), rows=tuple(rows), problems=tuple(run.problems),
                     snapshot_notes=tuple(notes), counts_text=describe_counts(counts(rows)),
                     pending_points=tuple(i + 1 for i in run.pending_points()),
                     amplitude_lines=amplitude_lines(run))


def amplitude_lines(run: "Run") -> tuple[str, ...]:
    """The amplitude-dependence test in words for a run forced at two or more amplitudes (else none)."""
    from app.storage.amplitude import amplitude_test, run_points

    test = amplitude_test(run_points(run))
    return tuple(test.lines()) if len(test.amplitudes) > 1 else ()


def opening_problems(run_dir: str | Path) -> tuple[str, ...]:
    """What opening the run found wrong (leftover files, missing records, a locked index)."""
    return tuple(open_run(run_dir, verify=False).problems)


def counts_text(run: "Run") -> str:
    """The run's summary line (points with a result, flagged, without one)."""
    return describe_counts(counts(point_rows(run)))


def attempt_flags(a: dict[str, Any]) -> list[str]:
    """An attempt's flags and its analysis's warnings, once each."""
    an = a.get("analysis") or {}
    return list(a["flags"]) + [w for w in an.get("warnings", ()) if w not in a["flags"]]


def _accepted_changes(run_dir: Path) -> list[dict[str, Any]]:
    try:
        conn = index.connect(run_dir / index.INDEX_NAME, read_only=True, timeout_s=0.5)
        try:
            return index.snapshot_change_log(conn)
        finally:
            conn.close()
    except sqlite3.Error:
        return []


def _utc(wall_s: float) -> str:
    return datetime.fromtimestamp(wall_s, timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC")
