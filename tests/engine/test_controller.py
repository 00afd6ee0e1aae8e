"""The amplitude controller (pure): secant steps, ceiling, early 'unreachable', prediction.

Plants here are honest test doubles: amplitude = g * V**s (a power law; s = 1 is a linear
speaker chain, as in linear acoustics), optionally saturating, optionally noisy. The
secant method on log-log pairs is exact for a power law after two distinct steps
(textbook root finding, e.g. Press et al., Numerical Recipes, ch. 9).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from app.engine.controller import AmplitudeController, ControllerSettings, TransferMemory


def _tune(ctrl: AmplitudeController, plant, freq_hz: float, target: float):
    tuner = ctrl.start_point(freq_hz, target)
    v = tuner.first_drive()
    requested = [v]
    while True:
        a = plant(v)
        ctrl.learn(freq_hz, target, v, a)
        d = tuner.update(v, a, 0.3)
        if d.kind != "measure":
            return d, tuner, requested
        v = d.drive_v
        requested.append(v)


def test_linear_plant_converges_in_two_windows_from_a_low_start() -> None:
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.05))
    d, tuner, req = _tune(ctrl, lambda v: 0.4 * v, 300.0, 0.05)
    assert d.kind == "converged"
    assert req[0] == pytest.approx(0.2)           # the first point starts at 10 % of the ceiling
    assert len(tuner.history) == 2
    assert d.drive_v == pytest.approx(0.125, rel=1e-9)


def test_secant_handles_a_nonlinear_power_law() -> None:
    # a = 0.1 V^1.7: proportional steps alone would oscillate slowly; secant on log-log is exact
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.01))
    d, tuner, _ = _tune(ctrl, lambda v: 0.1 * v**1.7, 300.0, 0.05)
    assert d.kind == "converged" and len(tuner.history) <= 4
    prop = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.01), proportional=True)
    d2, tuner2, _ = _tune(prop, lambda v: 0.1 * v**1.7, 300.0, 0.05)
    assert len(tuner2.history) > len(tuner.history)


def test_unreachable_reported_at_the_ceiling_not_after_max_steps() -> None:
    s = ControllerSettings(ceiling_v=2.0, tolerance=0.05, max_steps=20)
    ctrl = AmplitudeController(s)
    d, tuner, req = _tune(ctrl, lambda v: 0.01 * v, 300.0, 0.05)   # 0.02 at most at 2 V
    assert d.kind == "unreachable" and d.drive_v == 2.0
    assert len(tuner.history) <= 3 and max(req) <= 2.0


def test_unreachable_predicted_early_near_the_ceiling() -> None:
    s = ControllerSettings(ceiling_v=2.0, tolerance=0.05)
    tuner = AmplitudeController(s).start_point(300.0, 0.05)
    d = tuner.update(1.5, 0.02, 0.3)          # linear: would need 3.75 V
    assert d.kind == "unreachable" and "above the ceiling" in d.reason


def test_saturating_plant_is_reported_unreachable_honestly() -> None:
    # amplitude saturates at 0.04 (< target 0.05); the controller must not claim convergence
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.05, max_steps=12))
    d, tuner, req = _tune(ctrl, lambda v: 0.04 * math.tanh(v), 300.0, 0.05)
    assert d.kind in ("unreachable", "not-converged")
    assert all(v <= 2.0 for v in req)


def test_not_converged_after_max_steps_records_the_best_voltage() -> None:
    rng = np.random.default_rng(1)
    s = ControllerSettings(ceiling_v=2.0, tolerance=0.01, max_steps=4)
    ctrl = AmplitudeController(s)
    d, tuner, _ = _tune(ctrl, lambda v: 0.2 * v * (1 + 0.2 * rng.standard_normal()), 300.0, 0.05)
    assert len(tuner.history) <= 4
    if d.kind == "not-converged":
        assert d.drive_v == tuner.best().drive_v


@settings(max_examples=60, deadline=None)
@given(gain=st.floats(1e-3, 10.0), slope=st.floats(0.5, 2.0), target=st.floats(0.01, 0.3),
       ceiling=st.floats(0.5, 10.0))
def test_never_requests_above_the_ceiling(gain: float, slope: float, target: float, ceiling: float) -> None:
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=ceiling, tolerance=0.05, max_steps=10))
    d, tuner, req = _tune(ctrl, lambda v: gain * v**slope, 300.0, target)
    assert max(req) <= ceiling and d.drive_v <= ceiling
    best_at_ceiling = gain * ceiling**slope
    if d.kind == "unreachable":
        assert best_at_ceiling < target * (1 + 0.05)   # never gives up on a reachable target
    if best_at_ceiling < target * (1 - 0.05):          # cannot get within tolerance under the ceiling
        assert d.kind != "converged"


def test_prediction_interpolates_in_log_magnitude() -> None:
    m = TransferMemory()
    m.learn(100.0, 0.05, 1.0, 0.01)
    m.learn(300.0, 0.05, 1.0, 0.04)
    # geometric mean half-way between (linear in log-gain)
    assert m.predict(200.0, 0.05) == pytest.approx(0.02, rel=1e-9)
    assert m.predict(100.0, 0.05) == pytest.approx(0.01)
    # extrapolation is damped and limited to a factor 3 of the nearest point
    assert 0.04 < m.predict(500.0, 0.05) <= 0.12 + 1e-12


def test_prior_table_rescaled_to_this_run() -> None:
    prior = [(100.0, 0.02), (200.0, 0.08), (300.0, 0.02)]
    m = TransferMemory(prior)
    assert m.predict(200.0, 0.05) == pytest.approx(0.08)
    m.learn(100.0, 0.05, 1.0, 0.01)          # this run's chain is half as strong
    assert m.predict(200.0, 0.05) == pytest.approx(0.04)


def test_interpolated_prediction_is_one_window_extrapolated_starts_low() -> None:
    # a flat chain: between learned points the predicted voltage is right at once
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.05))
    _tune(ctrl, lambda v: 0.3 * v, 100.0, 0.05)
    _tune(ctrl, lambda v: 0.3 * v, 300.0, 0.05)
    d, tuner, _ = _tune(ctrl, lambda v: 0.3 * v, 200.0, 0.05)
    assert d.kind == "converged" and len(tuner.history) == 1
    # beyond the learned range the first voltage is below the prediction (a resonance may lie there)
    d, tuner, req = _tune(ctrl, lambda v: 0.3 * v, 320.0, 0.05)
    assert req[0] == pytest.approx(0.5 * 0.05 / 0.3) and d.kind == "converged" and len(tuner.history) == 2
    d, tuner, req = _tune(ctrl, lambda v: 0.3 * v, 1000.0, 0.05)
    assert req[0] == pytest.approx(0.25 * 0.05 / 0.3)
