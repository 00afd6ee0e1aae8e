"""``flamebode reprocess-run RUN_DIR --rig NEW.toml [--points 3,7]``: new analyses, same records.

Every usable attempt of the chosen points (default: all) is evaluated again from its
stored raw record with the given rig file; each result is added as a new row of the
``analyses`` table naming the rig file (path and sha256) and tool version. Raw records
are only read. A copy of the rig file is kept in RUN_DIR/rigs/<sha256[:12]>.toml. A record
that cannot be read or evaluated is named with the reason and skipped; the exit code is
then 1. The work is ``app.services.reprocess.reprocess``, as the window's Reprocess button.
Must not import Qt or open the index itself.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from ..services.types import ReprocessOutcome


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder")
    p.add_argument("--rig", required=True, help="the changed rig file (TOML)")
    p.add_argument("--points", default=None, help="point numbers, e.g. 3,7 or 10-12 (default: all)")


def run(args: argparse.Namespace) -> int:
    from ..services.points import parse_points
    from ..services.reprocess import reprocess
    from ..services.types import ReprocessRequest

    wanted = parse_points(args.points)
    req = ReprocessRequest(run_dir=Path(args.run_dir), rig_path=Path(args.rig),
                           point_indices=None if wanted is None else tuple(wanted))
    result = reprocess(req, on_opened=_print_problems, on_outcome=_print_outcome)     # printed as they come
    print(f"{result.n_done} attempt(s) reprocessed with {args.rig} (sha256 {result.rig_sha256[:12]}, "
          f"copy in {result.rig_copy})")
    if result.not_done:
        print(f"{len(result.not_done)} attempt(s) not reprocessed ({', '.join(o.where for o in result.not_done)}); "
              f"their records are unchanged")
        return 1
    return 0


def _print_problems(problems: tuple[str, ...]) -> None:
    for prob in problems:
        print(f"problem: {prob}")


def _print_outcome(o: "ReprocessOutcome") -> None:
    if o.problem is None:
        print(f"{o.where}: analysis {o.analysis_id}: gain {o.gain:.4f}, phase {o.phase_rad:+.4f} rad")
    else:
        print(f"{o.where}: not reprocessed: {o.problem}")
