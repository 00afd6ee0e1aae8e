"""Quantities with units in configuration files, converted to SI on load.

A value may be a bare number (read in the SI unit of its kind) or a string such as
``"25 mm"``, ``"20 degC"`` or ``"14.5 mV/Pa"``. A unit of the wrong kind is an error
that says which units the key accepts. A value that is not a finite number (``nan``,
``inf``, ``"1e999 Hz"``) is an error. Where a bare number is ambiguous (a temperature in K
or degC, a flow in m3/s or L/min, a duration in s or ms...: :data:`UNIT_REQUIRED`), a
caller reading a file passes ``unit_required=True`` and a bare number is refused with an
example of what to write. Standard library only.
"""

from __future__ import annotations

import math
import re

# kind -> {unit spelling: (scale, offset)}; si = value * scale + offset
_UNITS: dict[str, dict[str, tuple[float, float]]] = {
    "length": {"m": (1.0, 0.0), "cm": (1e-2, 0.0), "mm": (1e-3, 0.0), "in": (0.0254, 0.0)},
    "temperature": {"K": (1.0, 0.0), "degC": (1.0, 273.15), "°C": (1.0, 273.15), "C": (1.0, 273.15),
                    "degF": (5.0 / 9.0, 273.15 - 32.0 * 5.0 / 9.0)},
    "temperature_difference": {"K": (1.0, 0.0), "degC": (1.0, 0.0), "°C": (1.0, 0.0), "C": (1.0, 0.0)},
    "pressure": {"Pa": (1.0, 0.0), "hPa": (100.0, 0.0), "kPa": (1e3, 0.0), "MPa": (1e6, 0.0),
                 "mbar": (100.0, 0.0), "bar": (1e5, 0.0), "atm": (101325.0, 0.0), "psi": (6894.757293168, 0.0)},
    "voltage": {"V": (1.0, 0.0), "mV": (1e-3, 0.0)},
    "sensitivity": {"V/Pa": (1.0, 0.0), "mV/Pa": (1e-3, 0.0), "V/kPa": (1e-3, 0.0), "mV/kPa": (1e-6, 0.0)},
    "frequency": {"Hz": (1.0, 0.0), "kHz": (1e3, 0.0)},
    "time": {"s": (1.0, 0.0), "ms": (1e-3, 0.0), "min": (60.0, 0.0)},
    "volume_flow": {"m3/s": (1.0, 0.0), "L/min": (1e-3 / 60.0, 0.0), "l/min": (1e-3 / 60.0, 0.0),
                    "mL/min": (1e-6 / 60.0, 0.0), "m3/h": (1.0 / 3600.0, 0.0), "L/s": (1e-3, 0.0)},
    "angle": {"rad": (1.0, 0.0), "deg": (3.141592653589793 / 180.0, 0.0)},
    "power": {"W": (1.0, 0.0), "kW": (1e3, 0.0), "MW": (1e6, 0.0)},
}

SI_UNIT = {"length": "m", "temperature": "K", "temperature_difference": "K", "pressure": "Pa", "voltage": "V", "sensitivity": "V/Pa",
           "frequency": "Hz", "time": "s", "volume_flow": "m3/s", "angle": "rad", "power": "W"}

# Kinds whose bare number a person may mean in another unit (K or degC, m3/s or L/min, s or ms,
# m or mm, V/Pa or mV/Pa, rad or deg): in a file they need a unit. Volts, hertz and pascals
# are what people write bare.
UNIT_REQUIRED = frozenset({"temperature", "volume_flow", "time", "length", "sensitivity", "angle", "power"})

# kind -> (what to call it in a message, two examples of what to write)
_EXAMPLES: dict[str, tuple[str, str, str]] = {
    "length": ("a length", '"46 mm"', '"0.046 m"'),
    "temperature": ("a temperature", '"24 degC"', '"297 K"'),
    "temperature_difference": ("a temperature difference", '"1 K"', '"0.5 degC"'),
    "pressure": ("a pressure", '"2 kPa"', '"2000 Pa"'),
    "voltage": ("a voltage", '"2 V"', '"20 mV"'),
    "sensitivity": ("a sensitivity", '"14.5 mV/Pa"', '"0.0145 V/Pa"'),
    "frequency": ("a frequency", '"250 Hz"', '"1.2 kHz"'),
    "time": ("a duration", '"0.5 s"', '"300 ms"'),
    "volume_flow": ("a flow", '"180 L/min"', '"0.003 m3/s"'),
    "angle": ("an angle", '"180 deg"', '"3.1416 rad"'),
    "power": ("a power", '"4 kW"', '"4000 W"'),
}

_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S.*?)?\s*$")


def parse_quantity(value: object, kind: str, unit_required: bool = False) -> float:
    """Return ``value`` in the SI unit of ``kind``; raise ValueError with a plain message.

    With ``unit_required`` (files) a bare number of a kind in :data:`UNIT_REQUIRED` is refused."""
    units = _UNITS[kind]
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise ValueError(f"expected {example(kind)}, got {value!r}")
    if isinstance(value, (int, float)):
        _finite(float(value), value, kind)
        if unit_required and kind in UNIT_REQUIRED:
            raise ValueError(f"{_EXAMPLES[kind][0]} needs a unit, e.g. {_EXAMPLES[kind][1]} or "
                             f"{_EXAMPLES[kind][2]} (a bare {_shown(value)} is ambiguous)")
        return _finite(float(value), value, kind)
    match = _QUANTITY.match(value)
    if match is None:
        raise ValueError(f"cannot read {_shown(value)} as {_EXAMPLES[kind][0]}; write a number and a unit, "
                         f"e.g. {_EXAMPLES[kind][1]}")
    number, unit = float(match.group(1)), (match.group(2) or SI_UNIT[kind])
    if unit not in units:
        raise ValueError(f"wrong unit {unit!r} for {_EXAMPLES[kind][0]}; use one of {', '.join(units)}")
    if match.group(2) is None and unit_required and kind in UNIT_REQUIRED:
        raise ValueError(f"{_EXAMPLES[kind][0]} needs a unit, e.g. {_EXAMPLES[kind][1]} or "
                         f"{_EXAMPLES[kind][2]} (a bare {_shown(value)} is ambiguous)")
    scale, offset = units[unit]
    return _finite(number * scale + offset, value, kind)


def _finite(si: float, value: object, kind: str) -> float:
    if not math.isfinite(si):
        raise ValueError(f"{_shown(value)} is not a finite number; write {example(kind)}")
    return si


def _shown(value: object) -> str:
    return f'"{value}"' if isinstance(value, str) else repr(value)


def example(kind: str) -> str:
    """``'a temperature such as "24 degC"'``: for messages."""
    noun, first, _ = _EXAMPLES[kind]
    return f"{noun} such as {first}"


def unit_scale(kind: str, unit: str) -> float:
    """SI value of one ``unit`` of ``kind`` (no offset: for showing bounds of differences and sizes)."""
    return _UNITS[kind][unit][0]


def _example_unit(kind: str) -> str:
    return next(iter(_UNITS[kind]))
