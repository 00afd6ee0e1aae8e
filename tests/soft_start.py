"""Test helper (not a test module): how hard a sweep forces in its tuning windows, from the truth.

For every tuning window of a sweep on the simulated burner, the TRUE peak |u'|/u_mean the
drive of that window gives (``drivers.simulated.truth``, never the engine's own estimate)
divided by the point's target. The soft-start promise is that its maximum stays at or below
1.5 from a cold start.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from app.engine.events import EventBus, TuningStep
from app.engine.sweep import SweepEngine
from drivers.simulated import truth
from drivers.simulated.burner import SimulatedBurner


@dataclass(frozen=True)
class Forcing:
    worst_ratio: float            # max over windows of true achieved / target
    worst_at_hz: float
    windows: int                  # tuning windows in the whole sweep
    points: int
    reason: str

    @property
    def windows_per_point(self) -> float:
        return self.windows / max(1, self.points)


def forcing_of_sweep(plan: Any, rig: Any, scenario: Any = None, seed: int = 7, **engine_kw: Any) -> Forcing:
    sim = SimulatedBurner(rig, scenario=scenario, seed=seed)
    bus = EventBus()
    worst: list[tuple[float, float]] = []
    count = [0]

    def watch(event: Any) -> None:
        if isinstance(event, TuningStep):
            count[0] += 1
            point = next(p for p in plan.points() if p.index == event.point_index)
            achieved = truth.true_amplitude_ratio(sim, point.freq_hz, event.drive_v)
            worst.append((achieved / point.peak_ratio, point.freq_hz))
    bus.subscribe(watch)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated", **engine_kw)
    reason = engine.run()
    ratio, freq = max(worst) if worst else (0.0, 0.0)
    return Forcing(ratio, freq, count[0], len(plan.points()), reason)
