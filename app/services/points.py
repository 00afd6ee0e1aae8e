"""Point numbers as people write them (from 1, with ranges) to the plan's indices (from 0).

Light on purpose (the command line imports it while parsing). Must not import Qt, ``app.ui``,
``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

from app.errors import FlamebodeError


def parse_points(text: str | None) -> list[int] | None:
    """Point numbers as users see them (from 1) to plan indices (from 0):
    '3,7,10-12' -> [2, 6, 9, 10, 11]; None -> None (all points)."""
    if not text:
        return None
    out: list[int] = []
    try:
        for part in text.split(","):
            part = part.strip()
            if "-" in part:
                a, b = part.split("-", 1)
                out.extend(range(int(a), int(b) + 1))
            elif part:
                out.append(int(part))
    except ValueError:
        raise FlamebodeError(f"--points: '{text}' is not a list of point numbers such as 3,7 or 10-12") from None
    if any(n < 1 for n in out):
        raise FlamebodeError(f"--points: point numbers start at 1, got '{text}'")
    return [n - 1 for n in out]
