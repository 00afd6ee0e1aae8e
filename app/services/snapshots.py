"""A stored run's snapshots (rig, plan, scenario) and the checks before measuring into it again.

Resume and re-acquire refuse a run whose snapshot was edited since it was created, unless
the person accepts the change, which is then recorded in the run. Also: whether another
process is writing the run, and setting aside leftover temporary files before resuming.
Must not import Qt, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

from pathlib import Path

from app.storage import index
from app.storage.export import kept_phases          # noqa: F401  (phases already kept, for a progress display)
from app.storage.writer import ensure_not_busy, refusal_message, set_aside_leftovers   # noqa: F401

INDEX_NAME = index.INDEX_NAME


def has_index(run_dir: Path) -> bool:
    return (Path(run_dir) / index.INDEX_NAME).is_file()


def refuse_changed(run_dir: str | Path) -> None:
    """``SnapshotChanged`` naming each file and key when a snapshot was edited (nothing accepted)."""
    run_dir = index.require_run_folder(run_dir)
    changes = index.snapshot_changes(run_dir)
    if changes:
        raise index.SnapshotChanged(refusal_message(run_dir, changes))


def check(run_dir: Path, accept: bool, command: str) -> tuple[str, ...]:
    """Refuse a changed snapshot unless ``accept``; when accepted, record it in the run and
    return each change described (for the front end to show)."""
    changes = index.snapshot_changes(run_dir)
    if not changes:
        return ()
    if not accept:
        raise index.SnapshotChanged(refusal_message(run_dir, changes))
    index.accept_snapshot_changes(run_dir, changes, command)
    return tuple(c.describe() for c in changes)
