"""``flamebode accept RUN_DIR POINT ATTEMPT | POINT/ATTEMPT... | --attempt ID [--reject] [--reason TEXT]``.

A person chooses the attempt a point uses, by point number and attempt number (both from
1, as ``review`` shows them: ``accept RUN 7 2`` or ``accept RUN 7/2 9/1``) or by attempt id
(``--attempt``, repeatable). Accepting an attempt un-accepts the other attempts of its
point; ``--reject`` rejects instead. Exports use the accepted attempt. A person's decision
is kept when new attempts are added later (the acceptance rule: docs/run-layout.md).
The decision is ``app.services.decisions.decide``, as the window's Accept/Reject buttons.
Must not import Qt or open the index itself.
"""

from __future__ import annotations

import argparse
from pathlib import Path



def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder")
    p.add_argument("choice", nargs="*", metavar="POINT ATTEMPT",
                   help="point number and attempt number as review shows them: '7 2', or '7/2 9/1' for several")
    p.add_argument("--attempt", action="append", default=[], help="attempt id (repeat for several)")
    p.add_argument("--reject", action="store_true", help="reject instead of accept")
    p.add_argument("--reason", default="", help="why (kept in the index)")


def run(args: argparse.Namespace) -> int:
    from ..services.decisions import decide, parse_choices
    from ..services.runs import check_run_folder
    from ..services.types import DecideRequest

    check_run_folder(args.run_dir)                # a plain error first when it is not a run folder
    req = DecideRequest(run_dir=Path(args.run_dir), choices=parse_choices(args.choice),
                        attempt_ids=tuple(args.attempt), accept=not args.reject, reason=args.reason)
    for d in decide(req):
        print(f"point {d.point}: attempt {d.label} {d.verb} (id {d.attempt_id})")
    return 0
