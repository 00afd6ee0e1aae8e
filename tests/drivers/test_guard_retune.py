"""The guard's direct retune (``retune="direct"``): a sine's frequency changed at the next peak,
phase-continuous, the amplitude ramped straight from old to new under the same rate limit.

Safety properties checked sample by sample: the envelope never above the larger of the old and
new amplitudes nor the ceiling, never faster than ceiling / ramp_time, the samples and their
slope continuous at the switch (common practice for stepped-sine generators: a
phase-continuous switch where the slope is zero); multi-sine changes still pass through zero;
a halt still zeroes at once and latches; amplitude schedules (instruments) refuse it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from drivers.errors import DriveHalted
from drivers.guard import CeilingGuard, InvalidDriveRequest

FS = 25600.0
CEILING = 2.0
RAMP = 0.3
STEP = CEILING / RAMP / FS


def _guard(mode: str = "direct") -> CeilingGuard:
    g = CeilingGuard(CEILING, FS, RAMP, retune=mode)
    g.request(300.0, 0.8)
    g.render(int(FS * 0.2))          # up to 0.8 V
    assert g.settled()
    return g


@pytest.mark.parametrize("new_f,new_a", [(350.0, 0.5), (250.0, 1.2), (1000.0, 0.8), (100.0, 0.3)])
def test_direct_retune_keeps_the_envelope_rate_and_continuity(new_f, new_a) -> None:
    g = _guard()
    before = g.render(256)
    g.request(new_f, new_a)
    after = g.render(int(FS * 0.2))
    x = np.concatenate([before, after])
    cut = g.last_switch_samples
    assert cut is not None and 1 <= cut <= FS / 300.0 / 2 + 1          # within half a period of 300 Hz
    # no sample above the larger amplitude (nor the ceiling), no clip ever needed
    assert np.max(np.abs(x)) <= max(0.8, new_a) + 1e-12 and g.clip_events == 0
    # the envelope moves at most one rate step per sample: |x| can exceed the old envelope only by that
    n = np.arange(1, after.size + 1)
    bound = np.minimum(max(0.8, new_a), 0.8 + n * STEP) if new_a > 0.8 else np.full(after.size, 0.8)
    assert np.all(np.abs(after) <= bound + 1e-12)
    # continuity at the switch: the step between samples no larger than the faster sine's largest step
    dmax = max(0.8, new_a) * 2 * math.pi * max(300.0, new_f) / FS
    assert np.max(np.abs(np.diff(x))) <= dmax * 1.001
    # at the switch the old sine was at a peak (slope zero): its sample near +-0.8 V
    assert abs(abs(after[cut - 1]) - 0.8) <= 0.8 * (2 * math.pi * 300.0 / FS) ** 2 + cut * STEP + 1e-9
    assert g.settled() and g.status().freq_hz == new_f and g.status().amplitude_v == pytest.approx(new_a)


def test_direct_retune_is_faster_than_through_zero() -> None:
    direct, zero = _guard("direct"), _guard("through-zero")
    for g in (direct, zero):
        g.request(350.0, 0.9)
    assert direct.time_to_settle_s() < 0.5 * zero.time_to_settle_s()
    assert zero.time_to_settle_s() == pytest.approx((0.8 + 0.9) / (CEILING / RAMP))
    direct.render(int(FS * 0.05))
    assert direct.settled()


def test_multisine_changes_still_pass_through_zero_in_direct_mode() -> None:
    g = _guard()
    g.request_multisine(256, (3, 5), (0.2, 0.2), (0.0, 1.0))
    out = g.render(int(FS * 0.3))
    assert np.any(out == 0.0) and g.status().freq_hz == FS / 256
    g.request(400.0, 0.3)                 # from a multi-sine back to a sine: through zero too
    out = g.render(int(FS * 0.3))
    assert np.any(out == 0.0) and g.status().freq_hz == 400.0


def test_halt_during_a_direct_retune_zeroes_and_latches() -> None:
    g = _guard()
    g.request(320.0, 1.5)
    g.render(10)
    g.halt()
    assert np.all(g.render(512) == 0.0)
    with pytest.raises(DriveHalted):
        g.request(320.0, 0.5)


def test_amplitude_schedules_refuse_a_direct_retune_and_bad_modes_are_refused() -> None:
    g = _guard()
    g.request(900.0, 0.5)
    with pytest.raises(InvalidDriveRequest):
        g.amplitude_schedule(0.1, 0.01)
    with pytest.raises(InvalidDriveRequest):
        CeilingGuard(CEILING, FS, RAMP, retune="sideways")


def test_the_default_still_ramps_through_zero() -> None:
    g = _guard("through-zero")
    assert g.retune == "through-zero"
    g.request(350.0, 0.8)
    out = g.render(int(FS * 0.6))
    assert np.any(out == 0.0) and g.last_switch_samples is not None
