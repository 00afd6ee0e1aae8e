"""Soft start: no tuning window forces much harder than the target, from a cold start.

A careful operator turns the drive up gradually and never forces a flame at several times
the planned amplitude (common practice: on a lean or hydrogen-blend flame that risks
blow-off or flash-back). The promise: over every tuning window of a sweep with no earlier
run, the TRUE peak |u'|/u_mean the window's drive gives (read from the simulator's truth
module, never from the engine's own estimate) stays at or below 1.5 times the target.
Before the soft start the demo sweep opened at 10 % of the ceiling: 9.7 times the target.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from app.plan import load_plan
from app.rig import load_rig, read_toml
from drivers.simulated import truth
from drivers.simulated.burner import SimulatedBurner
from drivers.simulated.scenario import load_scenario, scenario_from_dict
from drivers.simulated.stability import stability
from engine_helpers import short_plan
from soft_start import forcing_of_sweep

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
LIMIT = 1.5


@pytest.fixture(scope="module")
def demo_rig():
    return load_rig(CONFIGS / "demo-rig.toml")


@pytest.mark.slow
@pytest.mark.parametrize("scenario", ["demo-scenario.toml", "resonant-scenario.toml"])
def test_demo_plan_never_forces_above_one_and_a_half_times_the_target(demo_rig, scenario):
    plan = load_plan(CONFIGS / "demo-ftf-plan.toml", demo_rig)
    forcing = forcing_of_sweep(plan, demo_rig, CONFIGS / scenario)
    assert forcing.reason == "complete"
    assert forcing.worst_ratio <= LIMIT, forcing
    assert forcing.windows_per_point <= 3.0, forcing     # and it stays quick


def _scenario(resonance_hz, q, velocity_per_v, plenum_m, chamber_m, reflection, seed):
    data = read_toml(CONFIGS / "demo-scenario.toml")
    data["rig"] = str(CONFIGS / "demo-rig.toml")
    data["seed"] = seed
    data["loudspeaker"] = {**data["loudspeaker"], "resonance": resonance_hz, "q": q,
                           "peak_velocity_per_volt": velocity_per_v}
    data["plenum"] = {**data["plenum"], "length": plenum_m}
    data["chamber"] = {**data["chamber"], "length": chamber_m, "end_reflection_magnitude": reflection}
    data["faults"] = {}
    return scenario_from_dict(data, "<random scenario>")


def _largest_gain_jump(scenario, rig, freqs) -> float:
    """Largest rise of the TRUE drive-to-velocity gain from one plan point to the next, upward.

    The soft start opens a point beyond the learned ones at a sixteenth of a prediction that
    is never below the nearest learned gain, so it can only overshoot where the true gain
    rises more than about sixteen-fold between neighbouring plan points (a resonance sharper
    than the plan's spacing; docs/user-guide.md says so)."""
    sim = SimulatedBurner(rig, scenario=scenario, seed=1)
    gains = [truth.true_amplitude_ratio(sim, f, 1e-3) for f in freqs]
    return max(b / a for a, b in zip(gains, gains[1:]))


PROPERTY_FREQS = [150.0, 250.0, 350.0, 450.0, 600.0, 800.0, 1000.0]


@pytest.mark.slow
@settings(max_examples=12, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(resonance_hz=st.floats(60.0, 900.0), q=st.floats(0.7, 10.0), velocity_per_v=st.floats(0.05, 3.0),
       plenum_m=st.floats(0.15, 0.8), chamber_m=st.floats(0.15, 0.8), reflection=st.floats(0.4, 0.98),
       seed=st.integers(1, 10_000))
def test_soft_start_holds_on_random_speakers_and_ducts(demo_rig, resonance_hz, q, velocity_per_v, plenum_m,
                                                       chamber_m, reflection, seed):
    scenario = _scenario(resonance_hz, q, velocity_per_v, plenum_m, chamber_m, reflection, seed)
    # the promise holds on linearly stable rigs (an unstable one is self-excited, whatever the drive)
    # whose gain does not jump more than ~16-fold between neighbouring plan points
    assume(stability(scenario, demo_rig).stable)
    assume(_largest_gain_jump(scenario, demo_rig, PROPERTY_FREQS) <= 12.0)
    plan = short_plan(PROPERTY_FREQS, [0.05], record_s=0.2)
    forcing = forcing_of_sweep(plan, demo_rig, scenario, seed=seed)
    assert forcing.worst_ratio <= LIMIT, forcing


def test_a_resonance_sharper_than_the_plan_spacing_is_the_known_limit(demo_rig):
    # The example hypothesis once found (CI): a chamber mode 1 Hz from the 600 Hz plan point,
    # decaying at only 15 1/s, makes the gain jump ~26-fold from 450 Hz, beyond what the
    # sixteenth allows for; the first window there forces at about 1.5 times the target, and
    # the user guide states this limit. If the controller learns to see it coming, tighten this.
    scenario = _scenario(338.0, 0.75, 3.0, 0.5859375, 0.5, 0.5, 1)
    assert stability(scenario, demo_rig).stable
    assert _largest_gain_jump(scenario, demo_rig, PROPERTY_FREQS) > 16.0
    forcing = forcing_of_sweep(short_plan(PROPERTY_FREQS, [0.05], record_s=0.2), demo_rig, scenario, seed=1)
    assert forcing.worst_at_hz == 600.0 and forcing.worst_ratio < 2.5, forcing


def test_scenario_helper_reads_the_shipped_demo():
    # the random scenarios above start from the shipped demo: it must load as it is
    assert load_scenario(CONFIGS / "demo-scenario.toml").loudspeaker.q > 0
