"""Warnings a back-end has about itself reach the user as a named, non-fatal fault at the start.

The simulated burner finds the modes of its network with the linear flame when it is
opened (drivers.simulated.stability). A rig that is linearly unstable with its flame lit
is self-excited: no steady forced response exists (common practice: a forced-response
measurement assumes a linearly stable system). Taking the demo's burner pressure loss away
makes it so (docs/scenario-file.md); the user must be told, in the window and the CLI alike,
through the engine's fault events.
"""

from __future__ import annotations

from app.engine.events import FaultRaised
from drivers.simulated.burner import SimulatedBurner
from drivers.simulated.scenario import load_scenario

from engine_helpers import CONFIGS, make_engine, short_plan


def _warnings(rig, scenario):
    sim = SimulatedBurner(rig, scenario=scenario, seed=3)
    engine, rec = make_engine(rig, short_plan([300.0], [0.05], record_s=0.3), sim)
    engine.run()
    return [f for f in rec.of(FaultRaised) if f.name == "backend-warning"]


def test_an_unstable_simulated_rig_is_named_at_the_start(rig) -> None:
    demo = load_scenario(CONFIGS / "demo-scenario.toml")
    unstable = demo.model_copy(update={"burner": demo.burner.model_copy(update={"loss_coefficient": 0.0})})
    [warning] = _warnings(rig, unstable)
    assert not warning.fatal
    assert "linearly unstable" in warning.message and " Hz grows at " in warning.message


def test_the_shipped_demo_rig_gives_no_warning(rig) -> None:
    assert _warnings(rig, load_scenario(CONFIGS / "demo-scenario.toml")) == []
