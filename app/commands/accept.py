"""``flamebode accept RUN_DIR --attempt ID [--reject] [--reason TEXT]``: choose attempts.

Accepting an attempt un-accepts the other attempts of its point; exports use the
accepted attempt. A user's decision is kept when new attempts are added later.
Must not import Qt.
"""

from __future__ import annotations

import argparse
import sqlite3
from pathlib import Path

from ..errors import FlamebodeError


class DecisionError(FlamebodeError):
    """An accept/reject request that cannot be applied."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder")
    p.add_argument("--attempt", required=True, action="append", help="attempt id (repeat for several)")
    p.add_argument("--reject", action="store_true", help="reject instead of accept")
    p.add_argument("--reason", default="", help="why (kept in the index)")


def run(args: argparse.Namespace) -> int:
    from ..storage import index

    path = index.require_run_folder(args.run_dir) / index.INDEX_NAME
    if not path.is_file():
        raise DecisionError(f"{path}: no run index here; is {args.run_dir} a run folder?")
    verb = "rejected" if args.reject else "accepted"
    try:
        conn = index.connect(path, timeout_s=5.0)
        try:
            with conn:
                for attempt_id in args.attempt:
                    try:
                        point = index.decide(conn, attempt_id, not args.reject, args.reason or f"{verb} by user")
                    except index.NotAcceptable as exc:
                        raise DecisionError(f"{path}: {exc}") from None
                    except KeyError:
                        raise DecisionError(f"{path}: no attempt '{attempt_id}' in this run (see 'flamebode "
                                            f"review {args.run_dir} --attempts')") from None
                    print(f"point {point + 1}: attempt {attempt_id} {verb}")
        finally:
            conn.close()
    except sqlite3.OperationalError as exc:
        raise DecisionError(f"{path}: cannot change the index ({exc}); is a sweep still writing this run?") from None
    return 0
