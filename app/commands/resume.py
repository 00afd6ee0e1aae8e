"""``flamebode resume RUN_DIR [--fast]``: continue an interrupted sweep where it stopped.

Every planned point without a usable accepted attempt is measured again, in plan order
(so the sweep restarts at the first such point), with the run's own rig, plan and
scenario snapshots and the back-end the run recorded. New attempts are added to the
run; nothing stored is changed. ``continue_run`` is shared with ``reacquire``.

Before anything is measured: the folder must be a run folder; a snapshot that differs
from the one the run was created with is refused (named key by key) unless
``--accept-changed-snapshot`` is given, and then the change is recorded in the run;
leftover ``.part`` files and record files no index row names are moved into
``RUN_DIR/set-aside/`` (never deleted). Stored runs are reached through ``app.services``
(``snapshots``, ``runs``, ``sweeps``). Must not import Qt.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path
from typing import Any

from ..errors import FlamebodeError


class ResumeError(FlamebodeError):
    """The run cannot be continued (unknown back-end, damaged snapshots...)."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder to continue")
    p.add_argument("--fast", action="store_true", default=None,
                   help="simulated runs: run faster than real time (default: as the run was started)")
    add_snapshot_option(p)


def add_snapshot_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--accept-changed-snapshot", action="store_true",
                   help="continue although the run's rig.toml, plan.toml or scenario snapshot was edited since "
                        "the run was created; the change (old and new sha256, keys, time) is recorded in the run")


def check_snapshots(run_dir: Path, accept: bool, command: str) -> None:
    """Refuse a changed snapshot (naming file and keys) unless ``accept``; then record and print it."""
    from ..services import snapshots

    for text in snapshots.check(run_dir, accept, command):
        print(f"changed snapshot accepted (--accept-changed-snapshot) and recorded in the run: {text}")


def open_backend(info: dict[str, str], rig: Any, run_dir: Path, fast: bool | None) -> tuple[Any, str]:
    """The back-end the run used, reopened from its snapshots: (device, name)."""
    from .running import open_device

    name = info.get("backend", "simulated") or "simulated"
    scenarios = sorted(run_dir.glob("scenario.*"))
    fast_now = fast if fast is not None else info.get("fast", "0") in ("1", "true", "True")
    return open_device(name, rig, scenarios[0] if scenarios else None, fast=bool(fast_now)), name


def continue_run(run_dir: str | Path, point_indices: list[int], fast: bool | None = None,
                 show_progress: bool = True) -> str:
    """Measure ``point_indices`` of the run again, storing new attempts; returns the finish reason."""
    from ..engine.events import EventBus
    from ..engine.progress import ProgressDisplay
    from ..engine.sweep import SweepEngine
    from ..plan import load_plan
    from ..rig import load_rig
    from ..services import snapshots
    from ..services.runs import open_run
    from ..services.sweeps import existing_run_writer
    from .running import run_engine

    snapshots.refuse_changed(run_dir)      # before the back-end is opened: nothing is driven with a changed file
    run = open_run(run_dir, verify=False)
    rig = load_rig(run.rig_path)
    plan = load_plan(run.plan_path, rig)
    device, name = open_backend(run.info, rig, run.run_dir, fast)
    bus = EventBus()
    writer = existing_run_writer(run.run_dir, bus)
    if fast is not None:
        writer.note({"fast": "1" if fast else "0"})
    writer.start()
    bus.subscribe(writer)
    closers: tuple = (writer.close,)
    if show_progress:
        display = ProgressDisplay(known=snapshots.kept_phases(run))   # phases unwrapped on the run's kept points
        bus.subscribe(display)
        display.start()
        closers = (display.close, writer.close)
    engine = SweepEngine(plan, rig, device, bus, backend_name=name, run_label=f"r{time.strftime('%H%M%S')}",
                         wait_for_store=True, points=list(point_indices))
    reason = run_engine(engine, device, closers)
    if writer.fault:
        print(writer.fault)
    if engine.error is not None:
        raise ResumeError(f"{run.run_dir}: the sweep ended with an error: {engine.error}")
    return reason


def run(args: argparse.Namespace) -> int:
    from ..plan import load_plan
    from ..services import snapshots
    from ..services.runs import check_run_folder, open_run

    run_dir = check_run_folder(args.run_dir)
    if not snapshots.has_index(run_dir):
        raise ResumeError(f"{run_dir}: cannot resume: the index {snapshots.INDEX_NAME} is missing (the record "
                          f"files are still there; 'flamebode review {run_dir}' lists them)")
    snapshots.ensure_not_busy(run_dir)
    check_snapshots(run_dir, args.accept_changed_snapshot, "resume")
    for src, dst, why in snapshots.set_aside_leftovers(run_dir):
        print(f"set aside {src.relative_to(run_dir)} -> {dst.relative_to(run_dir)}: {why}")
    r = open_run(run_dir, verify=True)
    for p in r.problems:
        print(f"problem: {p}")
    if not r.index_readable:
        raise ResumeError(f"{r.run_dir}: cannot resume while the index is unreadable (see above)")
    done = r.accepted()
    pending = [p.index for p in load_plan(r.plan_path).points() if p.index not in done]
    if not pending:
        print(f"{r.run_dir}: every point has an accepted attempt; nothing to resume")
        return 0
    print(f"resuming {r.run_dir} at point {pending[0] + 1}: {len(pending)} point(s) to measure")
    reason = continue_run(r.run_dir, pending, fast=args.fast)
    left = open_run(r.run_dir, verify=False).pending_points()
    print(f"{len(left)} point(s) still without an accepted attempt" if left else "every point has an accepted attempt")
    return 0 if reason == "complete" and not left else 1
