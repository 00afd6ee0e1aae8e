"""Bounds of the numbers in the rig, plan and scenario files: finite and physically sensible.

``quantity(kind, lo, hi)`` and ``number(lo, hi)`` build pydantic field types for one key:
the value is read (units through :func:`app.units.parse_quantity`), and refused with a plain
message naming the value and the allowed range when it is not a finite number, is a boolean,
or lies outside the range. The range itself is kept on the type as a :class:`Range` so tests
and the file references can read it (``Range.text()`` is the wording the docs use).

In a file (``context={"units_required": True}``, see ``app.configfile``) a bare number of an
ambiguous kind is refused (``app.units.UNIT_REQUIRED``); programmatic dicts are SI.

Imports: standard library, pydantic and ``app.units`` only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Annotated, Any

from pydantic import BeforeValidator, ValidationInfo

from .units import SI_UNIT, parse_quantity, unit_scale


_SMALLER = {"s": "ms", "V": "mV", "m": "mm"}     # how a bound below one unit is shown
_LARGER = {"ms": "s", "mV": "V", "mm": "m", "Hz": "kHz", "Pa": "kPa"}   # and one of a thousand or more


@dataclass(frozen=True)
class Range:
    """Allowed values of one key, in SI; ``unit`` is how the bounds are shown."""

    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False
    kind: str | None = None     # None: a plain number
    unit: str = ""
    integer: bool = False

    def contains(self, x: float) -> bool:
        if not math.isfinite(x):
            return False
        if self.lo is not None and (x < self.lo or (self.lo_open and x == self.lo)):
            return False
        if self.hi is not None and (x > self.hi or (self.hi_open and x == self.hi)):
            return False
        return True

    def show(self, x: float) -> str:
        if self.kind is None or not self.unit:
            return f"{int(x)}" if self.integer else f"{x:g}"
        unit = self.unit
        if 0 < abs(x) < unit_scale(self.kind, unit) and unit in _SMALLER:
            unit = _SMALLER[unit]
        elif abs(x) >= 1000 * unit_scale(self.kind, unit) and unit in _LARGER:
            unit = _LARGER[unit]
        return f"{x / unit_scale(self.kind, unit):g} {unit}"

    def text(self) -> str:
        """``more than 0 V and at most 20 V``: the wording of messages and of the file references."""
        parts = []
        if self.lo is not None:
            parts.append(f"{'more than' if self.lo_open else 'at least'} {self.show(self.lo)}")
        if self.hi is not None:
            parts.append(f"{'less than' if self.hi_open else 'at most'} {self.show(self.hi)}")
        what = "a whole number, " if self.integer else ""
        return what + (" and ".join(parts) if parts else "any finite number")

    def problem(self, x: float, written: object) -> str | None:
        """Why ``x`` (SI, read from ``written``) is not allowed, or None."""
        if self.contains(x):
            return None
        shown = _written(written)
        if self.lo is not None and (x < self.lo or (self.lo_open and x == self.lo)):
            word = "too short" if self.kind == "time" else "too small"
            return f"{shown} is {word}: allowed {self.text()}"
        return f"{shown} is too {'long' if self.kind == 'time' else 'large'}: allowed {self.text()}"


def _written(value: object) -> str:
    return f'"{value}"' if isinstance(value, str) else f"{value!r}"


def _units_required(info: ValidationInfo | None) -> bool:
    ctx = getattr(info, "context", None)
    return bool(ctx and ctx.get("units_required"))


def _quantity_check(rng: Range):
    def check(value: Any, info: ValidationInfo) -> float:
        try:
            si = parse_quantity(value, rng.kind, unit_required=_units_required(info))  # type: ignore[arg-type]
        except ValueError as exc:
            raise ValueError(f"{exc}; allowed {rng.text()}") from None
        problem = rng.problem(si, value)
        if problem:
            raise ValueError(problem)
        return si
    return check


def _number_check(rng: Range):
    def check(value: Any, info: ValidationInfo) -> float | int:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            kind = "a whole number" if rng.integer else "a plain number (no quotes, no unit)"
            raise ValueError(f"expected {kind}, got {_written(value)}; allowed {rng.text()}")
        if not math.isfinite(value):
            raise ValueError(f"{value!r} is not a finite number; allowed {rng.text()}")
        if rng.integer and value != int(value):
            raise ValueError(f"expected a whole number, got {value!r}; allowed {rng.text()}")
        problem = rng.problem(float(value), value)
        if problem:
            raise ValueError(problem)
        return int(value) if rng.integer else float(value)
    return check


def quantity(kind: str, lo: float | None = None, hi: float | None = None, *, lo_open: bool = False,
             hi_open: bool = False, unit: str | None = None) -> Any:
    """A float field of ``kind`` (SI inside) within ``lo``..``hi`` (SI); ``unit`` shows the bounds."""
    rng = Range(lo, hi, lo_open, hi_open, kind, unit or SI_UNIT[kind])
    return Annotated[float, BeforeValidator(_quantity_check(rng)), rng]


def number(lo: float | None = None, hi: float | None = None, *, lo_open: bool = False,
           hi_open: bool = False, integer: bool = False) -> Any:
    """A plain number (a ratio, a count, decibels) within ``lo``..``hi``; booleans and strings refused."""
    rng = Range(lo, hi, lo_open, hi_open, None, "", integer)
    return Annotated[int if integer else float, BeforeValidator(_number_check(rng)), rng]


def range_of(annotation: Any) -> Range | None:
    """The :class:`Range` attached to a field type built here (through ``X | None`` too)."""
    for meta in getattr(annotation, "__metadata__", ()):
        if isinstance(meta, Range):
            return meta
    for arg in getattr(annotation, "__args__", ()) or ():
        found = range_of(arg)
        if found is not None:
            return found
    return None
