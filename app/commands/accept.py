"""``flamebode accept RUN_DIR POINT ATTEMPT | POINT/ATTEMPT... | --attempt ID [--reject] [--reason TEXT]``.

A person chooses the attempt a point uses, by point number and attempt number (both from
1, as ``review`` shows them: ``accept RUN 7 2`` or ``accept RUN 7/2 9/1``) or by attempt id
(``--attempt``, repeatable). Accepting an attempt un-accepts the other attempts of its
point; ``--reject`` rejects instead. Exports use the accepted attempt. A person's decision
is kept when new attempts are added later (the acceptance rule: docs/run-layout.md).
Must not import Qt.
"""

from __future__ import annotations

import argparse
import re
import sqlite3

from ..errors import FlamebodeError


class DecisionError(FlamebodeError):
    """An accept/reject request that cannot be applied."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder")
    p.add_argument("choice", nargs="*", metavar="POINT ATTEMPT",
                   help="point number and attempt number as review shows them: '7 2', or '7/2 9/1' for several")
    p.add_argument("--attempt", action="append", default=[], help="attempt id (repeat for several)")
    p.add_argument("--reject", action="store_true", help="reject instead of accept")
    p.add_argument("--reason", default="", help="why (kept in the index)")


def parse_choices(tokens: list[str]) -> list[tuple[int, int]]:
    """(point number, attempt number) pairs from ``['7', '2']`` or ``['7/2', '9/1']``."""
    if not tokens:
        return []
    pair = re.compile(r"^\s*(\d+)\s*/\s*(\d+)\s*$")
    if all(pair.match(t) for t in tokens):
        return [(int(m.group(1)), int(m.group(2))) for m in map(pair.match, tokens) if m]
    if len(tokens) == 2 and all(t.strip().isdigit() for t in tokens):
        return [(int(tokens[0]), int(tokens[1]))]
    raise DecisionError(f"cannot read {' '.join(tokens)!r} as a point and an attempt: give "
                        f"'POINT ATTEMPT' (e.g. 7 2) or POINT/ATTEMPT for each (e.g. 7/2 9/1), numbers from 1 "
                        f"as 'flamebode review' shows them")


def run(args: argparse.Namespace) -> int:
    from ..storage import index

    path = index.require_run_folder(args.run_dir) / index.INDEX_NAME
    choices = parse_choices(args.choice)
    if not choices and not args.attempt:
        raise DecisionError("name the attempt: POINT ATTEMPT (e.g. 7 2), POINT/ATTEMPT or --attempt ID "
                            f"(see 'flamebode review {args.run_dir} --attempts')")
    if any(n < 1 or k < 1 for n, k in choices):
        raise DecisionError("point and attempt numbers start at 1")
    if not path.is_file():
        raise DecisionError(f"{path}: no run index here; is {args.run_dir} a run folder?")
    verb = "rejected" if args.reject else "accepted"
    try:
        conn = index.connect(path, timeout_s=5.0)
        try:
            with conn:                   # all or nothing: a bad name leaves every decision as it was
                wanted = [(f"{n}/{k}", _by_numbers(conn, path, args.run_dir, n, k)) for n, k in choices]
                wanted += [("", a) for a in args.attempt]
                for label, attempt_id in wanted:
                    try:
                        point = index.decide(conn, attempt_id, not args.reject, args.reason or f"{verb} by user")
                    except index.NotAcceptable as exc:
                        raise DecisionError(f"{path}: {exc}") from None
                    except KeyError:
                        raise DecisionError(f"{path}: no attempt '{attempt_id}' in this run (see 'flamebode "
                                            f"review {args.run_dir} --attempts')") from None
                    seq = conn.execute("SELECT seq FROM attempts WHERE attempt_id = ?", (attempt_id,)).fetchone()
                    label = label or index.attempt_label(point, seq["seq"] if seq else None)
                    print(f"point {point + 1}: attempt {label} {verb} (id {attempt_id})")
        finally:
            conn.close()
    except sqlite3.OperationalError as exc:
        raise DecisionError(f"{path}: cannot change the index ({exc}); is a sweep still writing this run?") from None
    return 0


def _by_numbers(conn: sqlite3.Connection, path: object, run_dir: str, point: int, attempt: int) -> str:
    from ..storage import index

    try:
        return index.find_attempt(conn, point, attempt)
    except LookupError as exc:
        raise DecisionError(f"{path}: {exc.args[0]} (see 'flamebode review {run_dir} --attempts')") from None
