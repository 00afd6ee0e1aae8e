"""The multi-sine survey: the FTF of the linear flame equals the stepped-sine FTF within the
uncertainties; points are stored marked ``multisine``; the sum of the lines stays within the
ceiling (drive log) and within [survey] total_max; FDF plans and sine-only back-ends fall back
to sines with the reason said.

Convention: x(t) = Re{x̂ e^{+iωt}}; amplitudes are peak |u'|/u_mean at the reference plane. The
demo flame saturates at Q'/Q = 0.30; at 5 % forcing with gain about 1.3 it stays linear.
"""

from __future__ import annotations

import math

import numpy as np

from app.engine.events import EventBus, Notice, PointSettled
from app.engine.survey import groups
from app.engine.sweep import SweepEngine
from drivers import drive_log
from drivers.simulated.burner import SimulatedBurner
from engine_helpers import Recorder, short_plan

FREQS = [150.0, 300.0, 450.0, 600.0, 900.0, 1200.0, 1500.0]


def _run(rig, plan, sim, **kw):
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated", **kw)
    return engine, rec, engine.run()


def test_multisine_ftf_equals_the_stepped_sine_ftf_within_the_uncertainties(rig, tmp_path):
    log_path = tmp_path / "drive.csv"
    drive_log.open_log(log_path)
    try:
        sim = SimulatedBurner(rig, seed=12)
        survey, rec_s, reason = _run(rig, short_plan(FREQS, [0.05], record_s=2.0, survey={"enabled": True}), sim)
        drive_log.flush()
    finally:
        drive_log.open_log(None)
    assert reason == "complete"
    assert any(n.name == "survey-linear-only" for n in rec_s.of(Notice))
    sine, rec_t, reason_t = _run(rig, short_plan(FREQS, [0.05], record_s=2.0), SimulatedBurner(rig, seed=12,
                                                                                                noise_seed=13))
    assert reason_t == "complete"
    multi = {e.freq_hz: e for e in rec_s.of(PointSettled)}
    stepped = {e.freq_hz: e for e in rec_t.of(PointSettled)}
    assert sum("multisine" in e.flags for e in multi.values()) >= len(FREQS) // 2
    compared = 0
    for f, ev in multi.items():
        if "multisine" not in ev.flags:
            continue                      # a line that left its group was measured with a sine
        a, b = ev.result, stepped[f].result
        # 95 % half-widths → standard uncertainties (coverage factors about 2); 4 combined sigmas
        # (14 comparisons per run: a 3-sigma band would fail now and then by chance alone)
        s_gain = math.hypot(a.gain_ci95 / 2.0, b.gain_ci95 / 2.0)
        s_phase = math.hypot(a.phase_ci95_rad / 2.0, b.phase_ci95_rad / 2.0)
        assert abs(a.gain - b.gain) <= 4.0 * s_gain + 0.01, (f, a.gain, b.gain, s_gain)
        dphi = float(np.angle(a.ftf / b.ftf))
        assert abs(dphi) <= 4.0 * s_phase + 0.01, (f, dphi, s_phase)
        compared += 1
    assert compared >= 3
    log = drive_log.read_log(log_path)
    assert np.all(log["peak_v"] <= log["ceiling_v"] + 1e-12) and sim.guard.clip_events == 0
    assert sim.drive_status().amplitude_v == 0.0
    # the survey is faster: fewer tuning windows and records than one per point
    assert survey.stats.recorded_samples < sine.stats.recorded_samples


def test_groups_keep_the_sum_of_targets_within_the_bound():
    from app.plan import PlanPoint

    pts = [PlanPoint(i, 100.0 + 50 * i, 0.05, 0.05) for i in range(13)]
    out = groups(pts, 0.25, 0)
    assert [len(g) for g in out] == [5, 5, 3]
    assert [len(g) for g in groups(pts, 0.25, 2)] == [2] * 6 + [1]


def test_an_fdf_plan_is_measured_with_sines_and_says_why(rig):
    plan = short_plan([300.0, 600.0], [0.03, 0.05], record_s=0.2, survey={"enabled": True})
    engine, rec, reason = _run(rig, plan, SimulatedBurner(rig, seed=3))
    assert reason == "complete"
    (notice,) = [n for n in rec.of(Notice) if n.name == "survey-unavailable"]
    assert "linear FTF only" in notice.message
    assert not any("multisine" in e.flags for e in rec.of(PointSettled))
    assert len(rec.of(PointSettled)) == 4


def test_an_abort_during_a_survey_record_keeps_it_as_interrupted_evidence(rig):
    sim = SimulatedBurner(rig, seed=3)
    plan = short_plan([300.0, 450.0, 600.0], [0.05], record_s=2.0, survey={"enabled": True})
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")
    blocks = []

    def abort_mid_record(ev):
        if type(ev).__name__ == "BlockAcquired" and ev.stage == "recording":
            blocks.append(1)
            if len(blocks) == 5:
                engine.abort()
    rec.hooks.append(abort_mid_record)
    assert engine.run() == "aborted"
    (kept,) = rec.of(PointSettled)
    assert "interrupted" in kept.flags
    assert sim.drive_status().amplitude_v == 0.0
