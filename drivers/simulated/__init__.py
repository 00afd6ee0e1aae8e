"""The simulated burner back-end (rehearsal and tests). See ``burner`` for how to use it.

Imports nothing heavy at package import beyond numpy/scipy/pydantic; never Qt, the
engine, storage or the core's estimators.
"""

from __future__ import annotations

from .burner import SimulatedBurner
from .scenario import Scenario, load_scenario

__all__ = ["SimulatedBurner", "Scenario", "load_scenario"]
