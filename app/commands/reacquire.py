"""``flamebode reacquire RUN_DIR --points 3,7 | --flagged``: measure chosen points again.

New attempts are added and old ones kept; each point then uses the newest attempt with no
flags, or the newest one where all are flagged, unless a person accepted one (see
docs/run-layout.md); the command ends by saying which attempt (point/attempt) each point
uses and how many of the run's points are flagged. Uses the run's own rig,
plan and scenario snapshots and its back-end; a changed snapshot is refused unless
``--accept-changed-snapshot`` is given (as for ``resume``). The choice is checked and the
outcome reported by ``app.services.reacquire`` (as the window's Re-acquire buttons do); the
sweep runs in ``resume.continue_run``. Must not import Qt or open the index itself.
"""

from __future__ import annotations

import argparse
from pathlib import Path


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder")
    which = p.add_mutually_exclusive_group(required=True)
    which.add_argument("--points", help="point numbers, e.g. 3,7 or 10-12")
    which.add_argument("--flagged", action="store_true", help="every point whose accepted attempt is flagged")
    p.add_argument("--fast", action="store_true", default=None,
                   help="simulated runs: run faster than real time (default: as the run was started)")
    from .resume import add_snapshot_option

    add_snapshot_option(p)


def run(args: argparse.Namespace) -> int:
    from ..services import reacquire
    from ..services.points import parse_points
    from ..services.runs import check_run_folder
    from ..services.types import ReacquireRequest
    from .resume import check_snapshots, continue_run

    run_dir = check_run_folder(args.run_dir)
    wanted = () if args.flagged else tuple(parse_points(args.points) or ())
    plan = reacquire.prepare(ReacquireRequest(run_dir=run_dir, point_indices=wanted, flagged=args.flagged))
    if not plan.point_indices:
        print(f"{plan.run_dir}: no point to reacquire")
        return 0
    reacquire.ensure_not_busy(plan.run_dir)
    check_snapshots(plan.run_dir, args.accept_changed_snapshot, "reacquire")
    print(f"reacquiring point(s) {', '.join(str(i + 1) for i in plan.point_indices)} of {plan.run_dir}")
    reason = continue_run(plan.run_dir, list(plan.point_indices), fast=args.fast)
    report_choices(plan.run_dir, list(plan.point_indices))
    return 0 if reason == "complete" else 1


def report_choices(run_dir: Path, points: list[int]) -> None:
    """Which attempt each re-acquired point now uses and why, then the run's counts."""
    from ..services.reacquire import point_uses

    uses, summary = point_uses(run_dir, points)
    for u in uses:
        if u.used is None:
            print(f"point {u.point}: no accepted attempt (see 'flamebode review {run_dir} --attempts')")
            continue
        flags = f"flagged: {', '.join(u.flags)}" if u.flags else "no flags"
        print(f"point {u.point}: uses attempt {u.used} of {u.n_attempts} ({flags}; {u.why})")
    print(summary)
