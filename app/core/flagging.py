"""When a stored attempt of a point counts as flagged: the one rule for every count of flagged points.

An attempt is flagged when it carries any attempt flag (tuning, faults, quality limits...) or any
analysis warning of its result. Marks that only say how a point was made (:data:`MARKS`: inserted
by refinement, measured in a multi-sine survey) are stored and shown with the flags but flag
nothing: a survey is not a fault. The acceptance rule takes,
for each point, the newest attempt that is not flagged (else the newest), never one with a flag
in :data:`NEVER_ACCEPTED`; so a point counts as flagged when every acceptable attempt of it is.
The progress display (engine) and the run's index and export (storage) count with these
functions, so the finish line of a sweep and ``review``/``export`` say the same number.

Imports: standard library only. Never Qt, never storage, never the engine.
"""

from __future__ import annotations

from typing import Iterable

NEVER_ACCEPTED = frozenset({"interrupted"})   # attempt flags that keep an attempt out of every result
MARKS = frozenset({"refined", "multisine"})     # how the point was made, not what is wrong with it


def attempt_flagged(flags: Iterable[str] = (), warnings: Iterable[str] = ()) -> bool:
    """An attempt with attempt flags (other than :data:`MARKS`) or analysis warnings."""
    return bool([f for f in (flags or ()) if f not in MARKS] or tuple(warnings or ()))


def acceptable(flags: Iterable[str] = ()) -> bool:
    """False for an attempt the acceptance rule never takes (e.g. a record cut short)."""
    return not (NEVER_ACCEPTED & set(flags or ()))


def point_flagged(attempts: Iterable[tuple[Iterable[str], Iterable[str]]]) -> bool | None:
    """Whether the attempt the rule takes for a point is flagged, from its attempts' (flags, warnings);
    None when no attempt is acceptable (the point has no result)."""
    usable = [(tuple(f or ()), tuple(w or ())) for f, w in attempts if acceptable(f)]
    if not usable:
        return None
    return all(attempt_flagged(f, w) for f, w in usable)
