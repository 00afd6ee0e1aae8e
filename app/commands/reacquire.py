"""``flamebode reacquire RUN_DIR --points 3,7 | --flagged``: measure chosen points again.

New attempts are added and old ones kept; each point then uses the newest attempt with no
flags, or the newest one where all are flagged, unless a person accepted one (see
docs/run-layout.md); the command ends by saying which attempt (point/attempt) each point
uses and how many of the run's points are flagged. Uses the run's own rig,
plan and scenario snapshots and its back-end; a changed snapshot is refused unless
``--accept-changed-snapshot`` is given (as for ``resume``). Must not import Qt.
"""

from __future__ import annotations

import argparse

from ..errors import FlamebodeError


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
    from ..plan import load_plan
    from ..storage import index
    from ..storage.reader import open_run
    from ..storage.writer import ensure_not_busy
    from .reprocess_run import parse_points
    from .resume import check_snapshots, continue_run

    run_dir = index.require_run_folder(args.run_dir)
    r = open_run(run_dir, verify=False)
    if not r.index_readable:
        raise FlamebodeError(f"{r.run_dir}: cannot reacquire while the index is unreadable: {r.problems[0]}")
    planned = [p.index for p in load_plan(r.plan_path).points()]
    wanted = r.flagged_points() if args.flagged else parse_points(args.points) or []
    unknown = sorted(set(wanted) - set(planned))
    if unknown:
        raise FlamebodeError(f"--points: {', '.join(str(i + 1) for i in unknown)} not in this run's plan "
                             f"(points 1-{len(planned)})")
    if not wanted:
        print(f"{r.run_dir}: no point to reacquire")
        return 0
    ensure_not_busy(r.run_dir)
    check_snapshots(r.run_dir, args.accept_changed_snapshot, "reacquire")
    print(f"reacquiring point(s) {', '.join(str(i + 1) for i in wanted)} of {r.run_dir}")
    reason = continue_run(r.run_dir, [i for i in planned if i in set(wanted)], fast=args.fast)
    report_choices(r.run_dir, wanted)
    return 0 if reason == "complete" else 1


def report_choices(run_dir, points: list[int]) -> None:
    """Which attempt each re-acquired point now uses and why, then the run's counts."""
    from ..storage.export import counts, describe_counts, point_rows
    from ..storage.reader import open_run

    run = open_run(run_dir, verify=False)
    rows = {row["point"] - 1: row for row in point_rows(run)}
    for i in sorted(set(points)):
        row = rows.get(i)
        if row is None or row["status"] != "accepted":
            print(f"point {i + 1}: no accepted attempt (see 'flamebode review {run.run_dir} --attempts')")
            continue
        a = run.attempt(row["attempt_id"])
        why = a.get("decision_reason") or ""
        flags = f"flagged: {row['flags'].replace(';', ', ')}" if row["flagged"] else "no flags"
        print(f"point {i + 1}: uses attempt {row['used']} of {row['n_attempts']} ({flags}; "
              f"{'chosen by a person' if row['chosen_by'] == 'user' else why or 'acceptance rule'})")
    print(describe_counts(counts(list(rows.values()))))
