"""Adaptive refinement: points inserted where the FTF bends (near its gain peak), none on smooth
stretches or within the noise; inserted points marked ``refined``; the budget's worst case in
the dry run's description and the estimated duration.

Convention: x(t) = Re{x̂ e^{+iωt}}; the true FTF comes from drivers.simulated.truth.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from app.engine.events import EventBus, PointSettled
from app.engine.refine import Measured, candidates
from app.engine.sweep import SweepEngine
from app.plan import Refinement
from drivers.simulated import truth
from drivers.simulated.burner import SimulatedBurner
from engine_helpers import Recorder, short_plan

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
COARSE = np.arange(100.0, 2001.0, 100.0)


def _true_points(sim, freqs, rel_sigma=0.01):
    out = []
    for f in freqs:
        F = truth.true_ftf(sim, f, 0.05)
        out.append(Measured(float(f), abs(F), float(np.angle(F)), rel_sigma * abs(F), rel_sigma))
    return out


def test_inserts_near_the_gain_peak_and_not_on_the_smooth_tail(rig):
    sim = SimulatedBurner(rig, seed=7)                  # demo flame: a gain peak near 325 Hz
    fine = np.arange(50.0, 2001.0, 5.0)
    peak_hz = fine[np.argmax([abs(truth.true_ftf(sim, f, 0.05)) for f in fine])]
    inserted = candidates(_true_points(sim, COARSE), Refinement(enabled=True, budget=6))
    assert inserted and all(abs(f - peak_hz) <= 150.0 for f in inserted), (inserted, peak_hz)
    assert not [f for f in inserted if f > 800.0]      # the low-pass tail and the pure delay are smooth


def test_a_smooth_low_pass_gets_nothing_and_noise_is_no_reason(rig):
    sim = SimulatedBurner(rig, scenario=CONFIGS / "resonant-scenario.toml", seed=7)
    assert candidates(_true_points(sim, COARSE), Refinement(enabled=True, budget=6)) == []
    rng = np.random.default_rng(3)
    flat = [Measured(f, 1.0 + 0.02 * rng.standard_normal(), -0.002 * f + 0.02 * rng.standard_normal(), 0.02, 0.02)
            for f in COARSE]
    assert candidates(flat, Refinement(enabled=True, budget=6, gain_change=0.02, phase_change=0.02)) == []


def test_budget_and_spacing_are_kept(rig):
    sim = SimulatedBurner(rig, seed=7)
    pts = _true_points(sim, COARSE)
    assert len(candidates(pts, Refinement(enabled=True, budget=1))) == 1
    taken = candidates(pts, Refinement(enabled=True, budget=6))
    again = candidates(pts, Refinement(enabled=True, budget=6, min_spacing=10.0), taken_hz=taken)
    assert not set(again) & set(taken)


def test_the_sweep_inserts_marked_points_within_the_budget(rig):
    freqs = [100.0, 200.0, 400.0, 600.0, 800.0]     # coarse around the gain peak near 325 Hz
    plan = short_plan(freqs, [0.05], record_s=2.0, refinement={"enabled": True, "budget": 3, "gain_change": 0.1})
    sim = SimulatedBurner(rig, seed=7)
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")
    assert engine.run() == "complete"
    settled = rec.of(PointSettled)
    refined = [e for e in settled if "refined" in e.flags]
    assert 1 <= len(refined) <= 3
    assert all(e.point_index >= len(freqs) and e.freq_hz not in freqs for e in refined)
    assert all(200.0 < e.freq_hz < 800.0 for e in refined), [e.freq_hz for e in refined]
    assert sim.drive_status().amplitude_v == 0.0


def test_dry_run_shows_the_budgets_worst_case():
    plain = short_plan([200.0, 400.0], [0.05], record_s=1.0)
    refined = short_plan([200.0, 400.0], [0.05], record_s=1.0, refinement={"enabled": True, "budget": 5})
    extra = refined.refinement_worst_case_s()
    assert extra > 5 * 1.0 and plain.refinement_worst_case_s() == 0.0
    assert refined.estimated_duration_s() - plain.estimated_duration_s() == extra
    assert any("refinement: up to 5 inserted points" in line and "worst case" in line
               for line in refined.describe_checks())
