"""What a front end needs from storage to run a sweep into a run folder: the run writer for a
new run or for an existing one (re-acquire), and the back-end and scenario a run was made with.

Must not import Qt, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from app.engine.events import EventBus

from .runs import open_run


def new_run_writer(run_dir: Path, rig_path: Path, plan_path: Path, bus: EventBus, scenario_path: Path | None,
                   options: dict[str, str]) -> Any:
    """The writer of a new run folder (snapshots of rig, plan and scenario; index; records)."""
    from app.storage.writer import RunWriter

    return RunWriter(run_dir, rig_path, plan_path, bus, scenario_path=scenario_path, options=options)


def existing_run_writer(run_dir: Path, bus: EventBus) -> Any:
    """A writer appending new attempts to a stored run."""
    from app.storage.writer import writer_for_existing_run

    return writer_for_existing_run(run_dir, bus)


def run_backend(run_dir: Path) -> tuple[str, Path | None]:
    """The back-end name a run was made with and its scenario snapshot (None if there is none)."""
    info = open_run(run_dir, verify=False).info
    snapshots = sorted(Path(run_dir).glob("scenario.*"))
    return info.get("backend", "simulated") or "simulated", snapshots[0] if snapshots else None
