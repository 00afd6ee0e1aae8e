"""Decide which attempt a point uses: accept or reject by point and attempt number or by id.

All decisions of one request are written in one transaction: a bad name leaves every
decision as it was. A person's choice outlives later attempts (the acceptance rule:
docs/run-layout.md). Must not import Qt, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

import re
import sqlite3
from pathlib import Path

from app.errors import FlamebodeError
from app.storage import index

from .types import Choice, DecideRequest, Decision


class DecisionError(FlamebodeError):
    """An accept/reject request that cannot be applied."""


def parse_choices(tokens: list[str]) -> tuple[Choice, ...]:
    """Choices from ``['7', '2']`` or ``['7/2', '9/1']`` (numbers from 1, as review shows them)."""
    if not tokens:
        return ()
    pair = re.compile(r"^\s*(\d+)\s*/\s*(\d+)\s*$")
    if all(pair.match(t) for t in tokens):
        return tuple(Choice(int(m.group(1)), int(m.group(2))) for m in map(pair.match, tokens) if m)
    if len(tokens) == 2 and all(t.strip().isdigit() for t in tokens):
        return (Choice(int(tokens[0]), int(tokens[1])),)
    raise DecisionError(f"cannot read {' '.join(tokens)!r} as a point and an attempt: give "
                        f"'POINT ATTEMPT' (e.g. 7 2) or POINT/ATTEMPT for each (e.g. 7/2 9/1), numbers from 1 "
                        f"as 'flamebode review' shows them")


def decide(req: DecideRequest) -> tuple[Decision, ...]:
    """Write the decisions of ``req``; returns one ``Decision`` per attempt named."""
    run_dir = index.require_run_folder(req.run_dir)
    path = run_dir / index.INDEX_NAME
    shown = str(req.run_dir)
    if not req.choices and not req.attempt_ids:
        raise DecisionError("name the attempt: POINT ATTEMPT (e.g. 7 2), POINT/ATTEMPT or --attempt ID "
                            f"(see 'flamebode review {shown} --attempts')")
    if any(c.point < 1 or c.attempt < 1 for c in req.choices):
        raise DecisionError("point and attempt numbers start at 1")
    if not path.is_file():
        raise DecisionError(f"{path}: no run index here; is {shown} a run folder?")
    verb = "accepted" if req.accept else "rejected"
    out: list[Decision] = []
    try:
        conn = index.connect(path, timeout_s=5.0)
        try:
            with conn:
                wanted = [(c.label, _by_numbers(conn, path, shown, c)) for c in req.choices]
                wanted += [("", a) for a in req.attempt_ids]
                for label, attempt_id in wanted:
                    try:
                        point = index.decide(conn, attempt_id, req.accept, req.reason or f"{verb} by user")
                    except index.NotAcceptable as exc:
                        raise DecisionError(f"{path}: {exc}") from None
                    except KeyError:
                        raise DecisionError(f"{path}: no attempt '{attempt_id}' in this run (see 'flamebode "
                                            f"review {shown} --attempts')") from None
                    seq = conn.execute("SELECT seq FROM attempts WHERE attempt_id = ?", (attempt_id,)).fetchone()
                    label = label or index.attempt_label(point, seq["seq"] if seq else None)
                    out.append(Decision(point=point + 1, label=label, attempt_id=attempt_id, accepted=req.accept))
        finally:
            conn.close()
    except sqlite3.OperationalError as exc:
        raise DecisionError(f"{path}: cannot change the index ({exc}); is a sweep still writing this run?") from None
    return tuple(out)


def _by_numbers(conn: sqlite3.Connection, path: Path, shown: str, c: Choice) -> str:
    try:
        return index.find_attempt(conn, c.point, c.attempt)
    except LookupError as exc:
        raise DecisionError(f"{path}: {exc.args[0]} (see 'flamebode review {shown} --attempts')") from None
