"""Helpers for engine tests (imported by name: tests are not a package): short plans, the simulated burner in fast mode, event capture."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from app.engine.events import EventBus
from app.engine.sweep import SweepEngine
from app.plan import Plan, plan_from_dict
from app.rig import Rig

CONFIGS = Path(__file__).resolve().parents[2] / "configs"


def short_plan(freqs_hz: list[float], amps: list[float], record_s: float = 1.0, **sections: dict) -> Plan:
    data: dict[str, Any] = {
        "name": "test",
        "frequencies": {"values": freqs_hz},
        "amplitude": {"values": amps, "basis": "peak"},
        "timing": {"record": record_s, "settle": 0.3, "tuning_window": 0.3, "tuning_discard": 0.05},
        "tuning": {"tolerance": 0.05, "max_steps": 8},
    }
    for key, value in sections.items():
        data[key] = {**data.get(key, {}), **value}
    return plan_from_dict(data, "<test plan>")


class Recorder:
    """Collects every event; optional hooks run on the engine thread (copy-and-flag only)."""

    def __init__(self) -> None:
        self.events: list[Any] = []
        self.hooks: list[Any] = []

    def __call__(self, event: Any) -> None:
        self.events.append(event)
        for hook in list(self.hooks):
            hook(event)

    def of(self, kind: type) -> list[Any]:
        return [e for e in self.events if isinstance(e, kind)]


def make_engine(rig: Rig, plan: Plan, sim: Any) -> tuple[SweepEngine, Recorder]:
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    return SweepEngine(plan, rig, sim, bus, backend_name="simulated"), rec
