"""Drift of a pressure sensor between two relative calibrations: the false alarm per sensor at its
stated 1 % (two-sided Monte Carlo on calibrations with independent noise at their stated
uncertainties) and a real 2 % gain change detected. The Bonferroni bound on the normal tail is
textbook (e.g. Casella & Berger, Statistical Inference, from memory); the normal quantile from
scipy.stats.
"""

from __future__ import annotations

import numpy as np
import pytest

from app.core.calibration import Calibration
from app.core.sensor_drift import drift_limit, sensor_drift

SENSORS = ("p1", "p2", "p3", "p4")
FREQS = np.linspace(100, 2000, 20)


def _cal(true: np.ndarray, u: float, rng, reference: str = "p1") -> Calibration:
    n_f, n_s = FREQS.size, len(SENSORS)
    r = SENSORS.index(reference)
    noise = np.exp(u * rng.standard_normal((n_f, n_s)) + 1j * u * rng.standard_normal((n_f, n_s)))
    noise[:, r] = 1.0                      # each factor's error is its own (the reference's is 1 exactly)
    factor = true / true[r] * noise
    uu = np.full((n_f, n_s), u)
    uu[:, r] = 0.0
    return Calibration(SENSORS, reference, FREQS, factor, uu, uu.copy(), np.ones((n_f, n_s)))


def test_the_false_alarm_per_sensor_is_near_its_stated_one_percent():
    rng = np.random.default_rng(20261204)
    true = np.exp(1j * np.array([0.0, 0.02, -0.01, 0.03])) * np.array([1.0, 1.03, 0.98, 1.01])
    alarms, trials = 0, 1500
    for _ in range(trials):
        a, b = _cal(true, 0.004, rng), _cal(true, 0.004, rng)
        alarms += sum(d.drifted for d in sensor_drift(a, b))
    rate = alarms / (3 * trials)          # three non-reference sensors per trial
    # Bonferroni is conservative (correlated comparisons make it more so): at most the stated 1 %
    # (+ 3 binomial sd of 0.15 %) and not a test that never fires
    assert 0.002 <= rate <= 0.0145, rate
    assert drift_limit(20) == pytest.approx(3.662, abs=0.001)     # upper normal tail 1.25e-4 (normal tables)


def test_a_two_percent_gain_change_of_one_sensor_is_detected_and_named():
    rng = np.random.default_rng(3)
    true = np.ones(4, dtype=complex)
    a = _cal(true, 0.002, rng)
    moved = true.copy()
    moved[2] *= 1.02
    b = _cal(moved, 0.002, rng)
    drift = {d.sensor: d for d in sensor_drift(a, b)}
    assert drift["p3"].drifted and drift["p3"].part == "gain" and drift["p3"].change == pytest.approx(0.02, abs=0.006)
    assert not drift["p2"].drifted and not drift["p4"].drifted
    # against another reference the change is still seen (both are re-referenced to the current one)
    c = _cal(moved, 0.002, rng, reference="p2")
    assert {d.sensor for d in sensor_drift(a, c) if d.drifted} == {"p3"}
