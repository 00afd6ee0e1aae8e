"""End to end: simulated records through the measurement core give back the simulator's truth.

The simulator synthesises time series from its own transfer-matrix network; the core
sees only volts and the rig file. The truth module is read here, in the test, never by
the core. Convention x(t) = Re{x̂ e^{+iωt}} for every phase below.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from app.core.response import evaluate_point
from app.rig import Rig, load_rig, rig_from_dict
from drivers.simulated import SimulatedBurner, truth

RIG = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"


def calibrated(rig: Rig, sim: SimulatedBurner) -> Rig:
    """The rig file after a relative sensor calibration (here read from the simulator's truth).

    At a real rig this factor comes from the calibration procedure (all sensors at one
    plane, C_i = G_ref,ref / G_ref,i; common practice); the simulator's true sensor
    factors stand in for that measurement so the test isolates the core.
    """
    data = rig.model_dump()
    data.pop("source_path")
    factors = truth.true_sensor_factors(sim)
    for s in data["pressure_sensors"]:
        c = s["sensitivity"] / factors[s["channel"]]
        # the simulator's own factors are exact: their standard uncertainty is zero
        s["calibration"] = [{"frequency": 10.0, "gain": abs(c), "phase_deg": math.degrees(np.angle(c)),
                             "u_gain": 0.0, "u_phase_deg": 0.0}]
    return rig_from_dict(data, "calibrated-demo-rig")


def record(sim: SimulatedBurner, freq_hz: float, ratio: float = 0.05, duration_s: float = 1.0) -> np.ndarray:
    """Drive the simulator to ``ratio`` (peak |û|/ū) at ``freq_hz`` and return a record in volts."""
    per_volt = abs(truth.true_velocity_per_volt(sim, freq_hz, 0.1)) / truth.true_mean_velocity_reference(sim)
    sim.set_drive(freq_hz, min(ratio / per_volt, 0.95 * sim.drive_status().ceiling_v))
    while sim.drive_status().ramping:
        sim.read_block()
    for _ in range(3):  # acoustic settling after the ramp
        sim.read_block()
    n_blocks = round(duration_s / sim.rig.acquisition.block_duration)
    return np.concatenate([sim.read_block().data for _ in range(n_blocks)], axis=1)


@pytest.mark.slow
def test_core_recovers_simulated_ftf_within_its_95_percent_intervals():
    # Statistical check of honest intervals (common practice for an uncertainty estimate):
    # 5 seeds × 20 frequencies, 100–2000 Hz, 1 s records at 5 % forcing; at least 95 % of
    # points must hold the truth inside the core's own 95 % interval, for gain and for phase.
    rig = load_rig(RIG)
    hits_gain = hits_phase = n = 0
    for seed in (1, 2, 3, 4, 5):
        sim = SimulatedBurner(rig, seed=seed)
        sim.start()
        cal = calibrated(rig, sim)
        for f in np.arange(100.0, 2001.0, 100.0):
            pt = evaluate_point(record(sim, f), sim.channels, sim.sample_rate_hz, f, cal)
            true = truth.true_ftf(sim, f, pt.velocity.amplitude_ratio)
            hits_gain += abs(pt.gain - abs(true)) <= pt.gain_ci95
            hits_phase += abs(np.angle(pt.ftf / true)) <= pt.phase_ci95_rad
            n += 1
        sim.stop()
    assert n == 100
    assert hits_gain / n >= 0.95, hits_gain
    assert hits_phase / n >= 0.95, hits_phase


def test_uncalibrated_sensor_shows_in_the_fit():
    # Common practice: a sensor whose sensitivity is off by a few percent shows up as a
    # larger multi-microphone residual; relative calibration removes it.
    rig = load_rig(RIG)
    sim = SimulatedBurner(rig, seed=11)
    sim.start()
    cal = calibrated(rig, sim)
    data = record(sim, 600.0, duration_s=2.0)
    raw = evaluate_point(data, sim.channels, sim.sample_rate_hz, 600.0, rig)
    fixed = evaluate_point(data, sim.channels, sim.sample_rate_hz, 600.0, cal)
    assert raw.quality["mmm_residual"] > 3 * fixed.quality["mmm_residual"]
    sim.stop()


def test_premixed_flame_gain_tends_to_one_at_low_frequency():
    # Trade fact (common practice): a perfectly premixed flame's gain → 1 as f → 0.
    rig = load_rig(RIG)
    sim = SimulatedBurner(rig, seed=3)
    sim.start()
    cal = calibrated(rig, sim)
    # Low frequencies need long records: every sensor pair is far below its usable band.
    pt = evaluate_point(record(sim, 30.0, duration_s=8.0), sim.channels, sim.sample_rate_hz, 30.0, cal)
    assert pt.gain_ci95 < 0.04
    assert abs(pt.gain - 1.0) < 0.05
    # and the gain has fallen well below 1 at high frequency (low-pass)
    hi = evaluate_point(record(sim, 1500.0), sim.channels, sim.sample_rate_hz, 1500.0, cal)
    assert hi.gain + hi.gain_ci95 < 0.5
    sim.stop()
