"""Quantities with units in configuration files, converted to SI on load.

A value may be a bare number (read in the SI unit of its kind) or a string such as
``"25 mm"``, ``"20 degC"`` or ``"14.5 mV/Pa"``. A unit of the wrong kind is an error
that says which units the key accepts. Standard library only.
"""

from __future__ import annotations

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
}

SI_UNIT = {"length": "m", "temperature": "K", "temperature_difference": "K", "pressure": "Pa", "voltage": "V", "sensitivity": "V/Pa",
           "frequency": "Hz", "time": "s", "volume_flow": "m3/s", "angle": "rad"}

_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S.*?)?\s*$")


def parse_quantity(value: object, kind: str) -> float:
    """Return ``value`` in the SI unit of ``kind``; raise ValueError with a plain message."""
    units = _UNITS[kind]
    if isinstance(value, bool):
        raise ValueError(f"expected a {kind} such as '1.5 {_example_unit(kind)}', got {value!r}")
    if isinstance(value, (int, float)):
        return float(value)
    if not isinstance(value, str):
        raise ValueError(f"expected a {kind} such as '1.5 {_example_unit(kind)}', got {value!r}")
    match = _QUANTITY.match(value)
    if match is None:
        raise ValueError(f"cannot read {value!r} as a {kind}; write a number and a unit, e.g. '1.5 {_example_unit(kind)}'")
    number, unit = float(match.group(1)), (match.group(2) or SI_UNIT[kind])
    if unit not in units:
        raise ValueError(f"wrong unit {unit!r} for a {kind}; use one of {', '.join(units)}")
    scale, offset = units[unit]
    return number * scale + offset


def _example_unit(kind: str) -> str:
    return next(iter(_UNITS[kind]))
