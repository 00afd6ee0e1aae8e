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


def _tune(ctrl: AmplitudeController, plant, freq_hz: float, target: float, sigma: float = 0.0):
    """Tune one point on ``plant``; ``sigma`` is the stated standard deviation of each measurement
    (0: unknown, the controller then steps gently)."""
    tuner = ctrl.start_point(freq_hz, target)
    v = tuner.first_drive()
    requested = [v]
    while True:
        a = plant(v)
        ctrl.learn(freq_hz, target, v, a)
        d = tuner.update(v, a, 0.3, sigma)
        if d.kind != "measure":
            return d, tuner, requested
        v = d.drive_v
        requested.append(v)


def test_linear_plant_converges_from_a_very_low_start_without_overshoot() -> None:
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.05))
    d, tuner, req = _tune(ctrl, lambda v: 0.4 * v, 300.0, 0.05, sigma=1e-5)
    assert d.kind == "converged"
    assert req[0] == pytest.approx(0.004)         # the first point starts at 0.2 % of the ceiling
    assert len(tuner.history) == 2                # clean measurements: steps of up to 50x
    assert d.drive_v == pytest.approx(0.125, rel=1e-9)
    assert max(0.4 * v for v in req) <= 0.05 * 1.05   # never above the target on the way up


def test_unknown_noise_steps_up_gently() -> None:
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.05))
    d, tuner, req = _tune(ctrl, lambda v: 0.4 * v, 300.0, 0.05)
    assert d.kind == "converged"
    assert all(b / a <= 4.0 + 1e-12 for a, b in zip(req, req[1:]))   # max_step_factor


def test_a_window_lost_in_the_noise_steps_only_to_its_noise_bound() -> None:
    # ratio 0.001 measured with sigma 0.002: the truth is below 0.001 + 3 * 0.002 = 0.007,
    # so the next voltage aims the target at that bound and cannot overshoot
    tuner = AmplitudeController(ControllerSettings(ceiling_v=2.0)).start_point(300.0, 0.05)
    d = tuner.update(0.01, 0.001, 0.3, 0.002)
    assert d.kind == "measure"
    assert d.drive_v == pytest.approx(0.01 * 0.05 / 0.007)
    assert not tuner.history[-1].measurable


def test_secant_handles_a_nonlinear_power_law() -> None:
    # a = 0.1 V^1.7: proportional steps alone would oscillate slowly; secant on log-log is exact
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.01))
    d, tuner, _ = _tune(ctrl, lambda v: 0.1 * v**1.7, 300.0, 0.05, sigma=1e-8)
    assert d.kind == "converged" and len(tuner.history) <= 5
    prop = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.01), proportional=True)
    d2, tuner2, _ = _tune(prop, lambda v: 0.1 * v**1.7, 300.0, 0.05, sigma=1e-8)
    assert len(tuner2.history) > len(tuner.history)


def test_unreachable_reported_at_the_ceiling_not_after_max_steps() -> None:
    s = ControllerSettings(ceiling_v=2.0, tolerance=0.05, max_steps=20)
    ctrl = AmplitudeController(s)
    d, tuner, req = _tune(ctrl, lambda v: 0.01 * v, 300.0, 0.05, sigma=1e-6)   # 0.02 at most at 2 V
    assert d.kind == "unreachable" and d.drive_v == 2.0
    assert len(tuner.history) <= 4 and max(req) <= 2.0


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


def test_between_learned_points_opens_just_below_beyond_them_far_below() -> None:
    # a flat chain: between learned points the first voltage is 90 % of the prediction
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=2.0, tolerance=0.05))
    _tune(ctrl, lambda v: 0.3 * v, 100.0, 0.05, sigma=1e-5)
    _tune(ctrl, lambda v: 0.3 * v, 300.0, 0.05, sigma=1e-5)
    d, tuner, req = _tune(ctrl, lambda v: 0.3 * v, 200.0, 0.05, sigma=1e-5)
    assert req[0] == pytest.approx(0.9 * 0.05 / 0.3) and d.kind == "converged" and len(tuner.history) == 2
    # beyond the learned range a resonance may lie: open at 1/16 of the prediction, then land
    d, tuner, req = _tune(ctrl, lambda v: 0.3 * v, 320.0, 0.05, sigma=1e-5)
    assert req[0] == pytest.approx(0.0625 * 0.05 / 0.3) and d.kind == "converged" and len(tuner.history) == 2
    # at a learned frequency and amplitude the prediction is used as it is: one window
    d, tuner, req = _tune(ctrl, lambda v: 0.3 * v, 300.0, 0.05, sigma=1e-5)
    assert len(tuner.history) == 1


@settings(max_examples=200, deadline=None)
@given(gains=st.lists(st.floats(0.05, 20.0), min_size=2, max_size=12), target=st.floats(0.01, 0.2))
def test_no_window_forces_above_one_and_a_half_times_the_target_on_gains_that_jump(gains, target) -> None:
    # a sweep over points whose linear gain jumps by up to 400x between neighbours, within the
    # band the cautious opening covers (gain at most 16x the prediction, or below the strongest
    # gain seen so far): common practice, a careful operator never overdrives a new point
    ctrl = AmplitudeController(ControllerSettings(ceiling_v=50.0, tolerance=0.05))
    seen: list[float] = []
    for i, g in enumerate(gains):
        freq = 100.0 + 50.0 * i
        predicted, _ = ctrl.memory.predict_cautious(freq, target)
        covered = predicted is None or g <= 16.0 * predicted or g <= max(seen, default=0.0)
        d, tuner, req = _tune(ctrl, lambda v, g=g: g * v, freq, target, sigma=1e-3 * target)
        if covered and i > 0:
            assert max(g * v for v in req) <= 1.5 * target
        seen.append(g)


def test_cautious_prediction_errs_on_the_high_gain_side() -> None:
    m = TransferMemory()
    m.learn(100.0, 0.05, 1.0, 0.01)
    m.learn(200.0, 0.05, 1.0, 0.04)
    # rising: the full slope in log-gain (x4 per 100 Hz) is followed, limited to 3x the nearest
    assert m.predict_cautious(250.0, 0.05) == (pytest.approx(0.08), "beyond")
    assert m.predict_cautious(400.0, 0.05) == (pytest.approx(0.12), "beyond")
    # falling: never below the nearest learned gain
    assert m.predict_cautious(50.0, 0.05) == (pytest.approx(0.01), "beyond")
    # between two learned points: the larger of the two (a resonance may lie between)
    assert m.predict_cautious(150.0, 0.05) == (pytest.approx(0.04), "inside")
    assert m.predict_cautious(200.0, 0.05) == (pytest.approx(0.04), "exact")
    assert TransferMemory().predict_cautious(300.0, 0.05) == (None, "none")
