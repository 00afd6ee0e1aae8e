"""``[timing] settle = "auto"``: settle times from the pre-scan's measured decay.

The decay estimate is checked on an exact second-order resonance and against the simulated
resonant rig's own eigenmodes (its complex eigenfrequencies: ``truth.true_stability``); the
recorded point with auto settle is compared with the one after a long settle. The simulator's
response follows the drive envelope without acoustic memory, so that last comparison checks
that auto settle leaves the records and their evaluation intact, not the decay itself; the
mode check is what shows the settle long enough for the rig.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from app.engine.events import EventBus, Notice, PointSettled
from app.engine.settle import auto_settle, decay_time_constants
from app.engine.sweep import SweepEngine
from drivers.simulated import truth
from drivers.simulated.burner import SimulatedBurner
from engine_helpers import CONFIGS, Recorder, short_plan

RESONANT = CONFIGS / "resonant-scenario.toml"
FREQS = [200.0, 250.0, 300.0, 350.0, 550.0, 600.0, 650.0, 700.0, 1000.0, 1050.0]
PRESCAN = {"enabled": True}


def _second_order(f_hz: np.ndarray, f0_hz: float, sigma_per_s: float) -> np.ndarray:
    """H = 1 / (s^2 + 2 sigma s + w0^2): free decay e^(-sigma t), time constant 1/sigma."""
    s = 2j * math.pi * f_hz
    w0 = 2 * math.pi * f0_hz
    return 1.0 / (s * s + 2 * sigma_per_s * s + w0 * w0)


def test_group_delay_at_a_resolved_resonance_is_its_decay_time_constant() -> None:
    # second-order system: group delay at resonance = 2Q/w0 = 1/sigma (from memory, any linear-systems text)
    sigma = 40.0                                   # tau = 25 ms, half-power bandwidth sigma/pi = 12.7 Hz
    f = np.arange(450.0, 551.0, 1.0)
    h = _second_order(f, 500.0, sigma)
    tau = decay_time_constants(f, abs(h), np.angle(h), np.zeros(f.size))
    peak = int(np.argmin(np.abs(f - 500.0)))
    assert tau[peak] == pytest.approx(1.0 / sigma, rel=0.02)
    assert np.nanmax(tau) == pytest.approx(1.0 / sigma, rel=0.02)
    s = auto_settle(f, abs(h), np.angle(h), np.zeros(f.size), fallback_s=0.5)
    assert s.at(500.0) == pytest.approx(5.0 / sigma, rel=0.02)     # k = 5: e^-5 = 0.7 % left


def test_an_unresolved_resonance_keeps_the_plans_settle() -> None:
    sigma = 10.0                                   # bandwidth 3 Hz between lines 50 Hz apart
    f = np.array([350.0, 400.0, 450.0, 500.5, 550.0, 600.0])
    h = _second_order(f, 475.0, sigma)
    s = auto_settle(f, abs(h), np.angle(h), np.full(f.size, 0.01), fallback_s=0.5)
    assert s.at(450.0) is None and s.at(500.5) is None      # the phase steps by about pi across 475 Hz
    assert s.at(350.0) is None and s.at(600.0) is None      # the ends of the band: one side only
    # a weak narrow mode on a pure delay (its share small at the lines): the bend gives it away
    delay = np.exp(-2j * math.pi * f * 2e-3)
    weak = delay * (1.0 + 0.4 * _second_order(f, 475.0, sigma) / abs(_second_order(np.array([450.0]), 475.0, sigma)[0]))
    s = auto_settle(f, abs(weak), np.angle(weak), np.full(f.size, 0.005), fallback_s=0.5)
    assert s.at(450.0) is None and s.at(500.5) is None
    s = auto_settle(f, abs(delay), np.angle(delay), np.full(f.size, 0.005), fallback_s=0.5)
    assert s.at(450.0) == pytest.approx(max(5 * (2e-3 + 2 * math.hypot(0.005, 0.005) / (2 * math.pi * 50)),
                                            3 / 450.0, 0.02), rel=0.05)   # a pure delay: settle from it
    assert s.at(123.0) is None                              # a frequency the pre-scan did not see
    assert np.isnan(decay_time_constants([100.0], [1.0], [0.1], [0.01])).all()   # no neighbour: not told


def _run(rig, timing: dict, seed: int = 11):
    sim = SimulatedBurner(rig, scenario=RESONANT, seed=seed)
    plan = short_plan(FREQS, [0.05], record_s=1.0, prescan=PRESCAN, timing=timing)
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")
    assert engine.run() == "complete"
    return engine, rec, sim


def test_auto_settle_is_never_shorter_than_the_rigs_slowest_nearby_mode(rig) -> None:
    engine, rec, sim = _run(rig, {"settle": "auto", "settle_fallback": 0.5})
    (note,) = [n for n in rec.of(Notice) if n.name == "settle-auto"]
    # at this spacing the rig's transfer bends too much between lines for its decay to be told
    # anywhere (ln H changes by more than 0.2 in second difference): the plan's settle is used
    assert note.message.startswith("settle auto")
    k = engine.plan.timing.settle_k
    modes = [m for m in truth.true_stability(sim).modes if 150.0 < m.freq_hz < 1100.0]
    assert modes
    f = np.array(FREQS)
    for m in modes:
        decay = -m.growth_rate_per_s
        assert decay > 0
        # the plan points on either side of the mode
        near = [float(f[f <= m.freq_hz].max())] if (f <= m.freq_hz).any() else []
        near += [float(f[f >= m.freq_hz].min())] if (f >= m.freq_hz).any() else []
        assert near
        for fp in near:
            measured = engine.auto_settle.at(fp)
            # either the decay was told (then at least k time constants of this mode) or the
            # plan's settle is used
            assert measured is None or measured >= min(k / decay, 0.5) * 0.999, (m.describe(), fp, measured)
            assert engine.settle_time_s(fp) >= min(k / decay, 0.5) * 0.999 or measured is not None


def test_auto_settle_records_the_same_points_as_a_long_settle(rig) -> None:
    auto, rec_auto, _ = _run(rig, {"settle": "auto", "settle_fallback": 0.5})
    long, rec_long, _ = _run(rig, {"settle": 2.0})
    assert auto.stats.drive_on_samples < long.stats.drive_on_samples
    a = {e.freq_hz: e.result for e in rec_auto.of(PointSettled)}
    b = {e.freq_hz: e.result for e in rec_long.of(PointSettled)}
    assert sorted(a) == sorted(b) == FREQS
    # two independent 95 % intervals per point: their difference within the combined half-width,
    # widened from 95 % to 99.9 % each (3.29 / 1.96, normal quantiles) because 20 comparisons are
    # made: at 95 % each, one in 20 fails by chance (common practice: a family-wise bound)
    wide = 3.29 / 1.96
    for fr in FREQS:
        ra, rb = a[fr], b[fr]
        assert abs(ra.gain - rb.gain) <= wide * math.hypot(ra.gain_ci95, rb.gain_ci95), (fr, ra.gain, rb.gain)
        dphi = abs(math.remainder(ra.phase_rad - rb.phase_rad, 2 * math.pi))
        assert dphi <= wide * math.hypot(ra.phase_ci95_rad, rb.phase_ci95_rad), (fr, dphi)


def test_without_a_prescan_auto_falls_back_to_the_plans_settle(rig) -> None:
    sim = SimulatedBurner(rig, seed=2)
    plan = short_plan([300.0, 600.0], [0.05], record_s=0.3, timing={"settle": "auto", "settle_fallback": 0.4})
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")
    assert engine.run() == "complete"
    assert engine.auto_settle.measured == 0
    assert engine.settle_time_s(300.0) == pytest.approx(0.4)
    assert any(n.name == "settle-auto" and "0.4 s" in n.message for n in rec.of(Notice))
