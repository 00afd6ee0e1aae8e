"""A point whose 3rd harmonic lies above half the sample rate still evaluates.

At 4.3 kHz on the demo rig's 25.6 kS/s the 3rd harmonic (12.9 kHz) is above the 12.8 kHz
Nyquist frequency: the record holds no such harmonic, so the velocity's distortion figure is
made from the 2nd alone (found by a new user: every point from about 4.27 kHz up failed with
"pressures and sensor positions must be finite numbers" and was not stored). The gain is checked
against the simulator's truth within the point's own interval (the simulator's truth module).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from app.core.response import evaluate_point
from app.rig import load_rig
from drivers.simulated import SimulatedBurner, truth

RIG = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"


def test_a_point_with_its_third_harmonic_above_nyquist_evaluates():
    rig = load_rig(RIG)
    sim = SimulatedBurner(rig, seed=2)
    sim.start()
    sim.set_drive(4300.0, 0.5)
    while sim.drive_status().ramping:
        sim.read_block()
    data = np.concatenate([sim.read_block().data for _ in range(20)], axis=1)
    assert 3 * 4300.0 > sim.sample_rate_hz / 2 > 2 * 4300.0
    point = evaluate_point(data, sim.channels, sim.sample_rate_hz, 4300.0, rig)
    assert np.isfinite(point.quality["distortion_velocity"])
    true = truth.true_ftf(sim, 4300.0, point.velocity.amplitude_ratio)
    assert abs(point.gain - abs(true)) <= point.gain_ci95, (point.gain, abs(true), point.gain_ci95)
