"""When a stored attempt of a point counts as flagged: the one rule for every count of flagged points.

An attempt is flagged when it carries any attempt flag (tuning, faults, quality limits,
``refined``, ``multisine``...) or any analysis warning of its result. The acceptance rule takes,
for each point, the newest attempt that is not flagged (else the newest), never one with a flag
in :data:`NEVER_ACCEPTED`; so a point counts as flagged when every acceptable attempt of it is.
The progress display (engine) and the run's index and export (storage) count with these
functions, so the finish line of a sweep and ``review``/``export`` say the same number.

Imports: standard library only. Never Qt, never storage, never the engine.
"""

from __future__ import annotations

from typing import Iterable

NEVER_ACCEPTED = frozenset({"interrupted"})   # attempt flags that keep an attempt out of every result


def attempt_flagged(flags: Iterable[str] = (), warnings: Iterable[str] = ()) -> bool:
    """An attempt with attempt flags or analysis warnings."""
    return bool(tuple(flags or ()) or tuple(warnings or ()))


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
