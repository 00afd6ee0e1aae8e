"""A sweep on a back-end whose guard retunes directly (``CeilingGuard(retune="direct")``): the
same points as with the ramp through zero, within their uncertainties, in less drive-on time,
with the soft start, the ceiling and the speaker-protection rate kept on every rendered sample."""

from __future__ import annotations

import math

import numpy as np

from app.engine.events import EventBus, PointSettled, TuningStep
from app.engine.sweep import SweepEngine
from drivers.guard import CeilingGuard
from drivers.simulated import truth
from drivers.simulated.burner import SimulatedBurner
from engine_helpers import Recorder, short_plan

FREQS = [200.0, 250.0, 300.0, 350.0, 400.0, 450.0]


def _sweep(rig, mode: str):
    sim = SimulatedBurner(rig, seed=9)
    if mode == "direct":
        sim.guard = CeilingGuard(rig.drive.ceiling, sim.sample_rate_hz, rig.drive.ramp_time, retune="direct")
    rendered, envelope = [], [(0, 0.0)]
    render = sim.guard.render

    def watched(n):
        out = render(n)
        rendered.append(out.copy())
        envelope.append((n, sim.guard.status().amplitude_v))   # the envelope at the block's end
        return out
    sim.guard.render = watched
    plan = short_plan(FREQS, [0.15], record_s=0.5, prescan={"enabled": True})   # drives of about 1 V
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")
    assert engine.run() == "complete"
    return engine, rec, sim, np.concatenate(rendered), envelope


def test_direct_retune_measures_the_same_points_sooner_and_safely(rig) -> None:
    zero, rec_zero, _, _, _ = _sweep(rig, "through-zero")
    direct, rec_direct, sim, samples, envelope = _sweep(rig, "direct")
    assert direct.stats.drive_on_samples < zero.stats.drive_on_samples
    assert sim.guard.clip_events == 0 and np.max(np.abs(samples)) <= direct.ceiling_v
    # the envelope's rate (speaker protection): block to block, at most ceiling / ramp_time
    step_v = rig.drive.ceiling / rig.drive.ramp_time / sim.sample_rate_hz
    for (_, a0), (n, a1) in zip(envelope, envelope[1:]):
        assert abs(a1 - a0) <= n * step_v * (1 + 1e-9)
    a = {e.freq_hz: e.result for e in rec_zero.of(PointSettled)}
    b = {e.freq_hz: e.result for e in rec_direct.of(PointSettled)}
    assert sorted(a) == sorted(b) == FREQS
    for f in FREQS:
        assert abs(a[f].gain - b[f].gain) <= math.hypot(a[f].gain_ci95, b[f].gain_ci95), f
        dphi = abs(math.remainder(a[f].phase_rad - b[f].phase_rad, 2 * math.pi))
        assert dphi <= math.hypot(a[f].phase_ci95_rad, b[f].phase_ci95_rad), f
    # soft start: no tuning window's TRUE amplitude above 1.5 x its target
    points = {p.index: p for p in direct.points}
    worst = max(truth.true_amplitude_ratio(sim, points[ev.point_index].freq_hz, ev.drive_v)
                / points[ev.point_index].peak_ratio for ev in rec_direct.of(TuningStep))
    assert worst <= 1.5
