"""Tests of the voltage-ceiling guard (drivers.guard).

No phase against an external reference is checked here except the sine itself, written
as x[k] = A sin(phi0 + 2 pi f k / fs); the project's e^{+i omega t} convention does not
enter (a drive sample is the imaginary part of A e^{+i(omega t + phi0)}).

Sources: the refusal-not-clip rule, the linear amplitude ramp at ceiling/ramp_time and the
ramp-through-zero frequency change are common practice for protecting loudspeakers driven
by a power amplifier. |sin a - sin b| <= |a - b| (mean value theorem) gives the bound on
the sample-to-sample jump of a phase-continuous sine.
"""

from __future__ import annotations

import math
import threading
import time

import numpy as np
import pytest
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

from drivers.errors import CeilingExceeded, DriveHalted, DriverError
from drivers.guard import CeilingGuard, InvalidDriveRequest
from drivers.protocols import DriveStatus

EPS = 1e-9
# No "explain" phase: it imports modules that warn, and warnings are errors in this suite,
# which would bury a real counterexample under an internal error.
PHASES = (Phase.explicit, Phase.reuse, Phase.generate, Phase.target, Phase.shrink)


# --------------------------------------------------------------------------- strategies
def _amplitude_choice():
    """Amplitude as a fraction of the ceiling, or a special value to be refused."""
    return st.one_of(
        st.floats(0.0, 1.0),
        st.floats(1.0, 2.0, exclude_min=True),      # above the ceiling: refused
        st.sampled_from(["ceiling", "just_above", "nan", "inf", "negative", "zero"]),
    )


def _freq_choice():
    """Frequency as a fraction of the sample rate; a few repeat often, a few are invalid."""
    return st.one_of(
        st.sampled_from([0.002, 0.01, 0.05, 0.13, 0.25, 0.49]),
        st.floats(0.0005, 0.499),
        st.sampled_from(["zero", "nyquist", "negative", "nan"]),
    )


OPS = st.one_of(
    st.tuples(st.just("request"), _freq_choice(), _amplitude_choice()),
    st.tuples(st.just("render"), st.integers(0, 160), st.integers(0, 160)),
    st.tuples(st.just("render"), st.integers(0, 160), st.integers(0, 160)),
    st.tuples(st.just("ramp_down")),
    st.tuples(st.just("halt")),
    st.tuples(st.just("arm")),
)


def _amplitude_value(choice, ceiling_v: float) -> float:
    named = {"ceiling": ceiling_v, "just_above": float(np.nextafter(ceiling_v, np.inf)),
             "nan": math.nan, "inf": math.inf, "negative": -0.1 * ceiling_v, "zero": 0.0}
    return named[choice] if isinstance(choice, str) else choice * ceiling_v


def _freq_value(choice, fs_hz: float) -> float:
    named = {"zero": 0.0, "nyquist": fs_hz / 2.0, "negative": -10.0, "nan": math.nan}
    return named[choice] if isinstance(choice, str) else choice * fs_hz


def _expected_error(freq_hz: float, amplitude_v: float, ceiling_v: float, fs_hz: float):
    if not math.isfinite(amplitude_v) or amplitude_v < 0 or amplitude_v > ceiling_v:
        return CeilingExceeded
    if not math.isfinite(freq_hz) or freq_hz <= 0 or freq_hz >= fs_hz / 2:
        return InvalidDriveRequest
    return None


# --------------------------------------------------------------------------- property test
class _Checker:
    """Runs one op sequence on a guard and on a twin that renders every block in two pieces."""

    def __init__(self, ceiling_v: float, fs_hz: float, ramp_time_s: float):
        self.guard = CeilingGuard(ceiling_v, fs_hz, ramp_time_s)
        self.twin = CeilingGuard(ceiling_v, fs_hz, ramp_time_s)
        self.ceiling_v, self.fs_hz = ceiling_v, fs_hz
        self.step_v = ceiling_v / ramp_time_s / fs_hz   # allowed envelope change per sample
        self.last_sample: float | None = None
        self.halted_since_request = False
        self.latched = False                             # halted and not re-armed: requests refused
        self.freq_seen_hz = 0.0                          # highest frequency that can be playing

    def request(self, freq_choice, amp_choice) -> None:
        freq_hz = _freq_value(freq_choice, self.fs_hz)
        amplitude_v = _amplitude_value(amp_choice, self.ceiling_v)
        expected = _expected_error(freq_hz, amplitude_v, self.ceiling_v, self.fs_hz)
        before = self.guard.status()
        if expected is None and self.latched:
            # a halt latches: nothing above the guard can bring the drive back before arm()
            if amplitude_v == 0.0:
                self.guard.request(freq_hz, amplitude_v)
                self.twin.request(freq_hz, amplitude_v)
            else:
                with pytest.raises(DriveHalted):
                    self.guard.request(freq_hz, amplitude_v)
            assert self.guard.status() == before, "a request after a halt changed the guard"
            return
        if expected is None:
            self.guard.request(freq_hz, amplitude_v)
            self.twin.request(freq_hz, amplitude_v)
            if before.amplitude_v > 0.0:   # never switch frequency while the output is non-zero
                assert self.guard.status().freq_hz == before.freq_hz
            self.halted_since_request = False
            self.freq_seen_hz = max(self.freq_seen_hz, freq_hz)
            return
        with pytest.raises(expected) as info:
            self.guard.request(freq_hz, amplitude_v)
        assert isinstance(info.value, DriverError)
        assert self.guard.status() == before, "a refused request changed the guard"
        if expected is CeilingExceeded:
            assert f"{self.ceiling_v:g} V" in str(info.value)

    def halt(self) -> None:
        self.guard.halt()
        self.twin.halt()
        self.halted_since_request = True
        self.latched = True
        self.last_sample = None   # a halt may jump to zero: no continuity across it

    def arm(self) -> None:
        if self.guard.status().amplitude_v > 0.0:
            return                  # arm() is for the start of a sweep, with the output at zero
        self.guard.arm(self.ceiling_v)
        self.twin.arm(self.ceiling_v)
        self.latched = False

    def ramp_down(self) -> None:
        self.guard.ramp_down()
        self.twin.ramp_down()

    def render(self, n: int, split: int) -> None:
        before = self.guard.status()
        x = self.guard.render(n)
        split = min(split, n)
        y = np.concatenate([self.twin.render(split), self.twin.render(n - split)])
        after = self.guard.status()
        assert x.dtype == np.float64 and x.shape == (n,)
        # the ceiling holds on every sample, without the belt-and-braces clip
        assert np.all(np.abs(x) <= self.ceiling_v)
        assert self.guard.clip_events == 0 and self.twin.clip_events == 0
        # block boundaries change nothing: same samples however the block is cut
        np.testing.assert_allclose(y, x, rtol=0, atol=1e-9 * self.ceiling_v)
        if self.halted_since_request:
            assert np.all(x == 0.0), "output not exactly zero after halt"
        if after.freq_hz != before.freq_hz and before.amplitude_v > 0.0:
            assert np.any(x == 0.0), "frequency switched without passing through zero"
        self._check_envelope(x, before, after)
        self._check_continuity(x, before, after)
        if n:
            self.last_sample = float(x[-1])

    def _check_envelope(self, x, before: DriveStatus, after: DriveStatus) -> None:
        n = x.size
        k = np.arange(1, n + 1)
        tol = EPS * self.ceiling_v
        # the envelope rises no faster than the ramp rate...
        assert np.all(np.abs(x) <= before.amplitude_v + k * self.step_v + tol)
        # ...and, when the final target is zero, only falls (at most at the ramp rate)
        if before.target_amplitude_v == 0.0:
            assert np.all(np.abs(x) <= np.maximum(before.amplitude_v - k * self.step_v, 0.0) + tol)
        assert abs(after.amplitude_v - before.amplitude_v) <= n * self.step_v + tol
        assert 0.0 <= after.amplitude_v <= self.ceiling_v

    def _check_continuity(self, x, before: DriveStatus, after: DriveStatus) -> None:
        # |a1 sin p1 - a0 sin p0| <= a1 |p1 - p0| + |a1 - a0|: bounded jump between neighbours
        seq = x if self.last_sample is None else np.concatenate([[self.last_sample], x])
        if seq.size < 2:
            return
        amp_bound = min(self.ceiling_v, before.amplitude_v + x.size * self.step_v)
        dphi = 2 * math.pi * max(before.freq_hz, after.freq_hz) / self.fs_hz
        jump_bound = amp_bound * dphi + self.step_v + EPS * self.ceiling_v
        assert np.max(np.abs(np.diff(seq))) <= jump_bound


@pytest.mark.slow
@settings(max_examples=10_000, deadline=None, phases=PHASES, suppress_health_check=[HealthCheck.too_slow])
@given(ceiling_v=st.floats(0.01, 10.0),
       fs_hz=st.sampled_from([1000.0, 8000.0, 44100.0, 51200.0]) | st.floats(200.0, 2e5),
       ramp_samples=st.floats(1.0, 600.0),
       ops=st.lists(OPS, max_size=14))
def test_guard_invariants_hold_for_random_operation_sequences(ceiling_v, fs_hz, ramp_samples, ops):
    checker = _Checker(ceiling_v, fs_hz, ramp_samples / fs_hz)
    for op in ops:
        getattr(checker, op[0])(*op[1:])


# --------------------------------------------------------------------------- deterministic tests
def test_ramp_is_linear_at_ceiling_over_ramp_time():
    # at f = fs/4 the phase of sample k is k*pi/2, so odd samples show the envelope itself
    fs_hz, ceiling_v, ramp_time_s = 1000.0, 2.0, 0.1
    guard = CeilingGuard(ceiling_v, fs_hz, ramp_time_s)
    guard.request(fs_hz / 4, 1.5)
    x = guard.render(200)
    k = np.arange(1, 201)
    expected_env = np.minimum(k * ceiling_v / ramp_time_s / fs_hz, 1.5)
    odd = k % 2 == 1
    np.testing.assert_allclose(np.abs(x[odd]), expected_env[odd], rtol=0, atol=1e-12)
    assert np.all(np.abs(x[~odd]) < 1e-12)
    assert guard.settled() and guard.status().amplitude_v == 1.5


def test_settled_output_is_the_requested_sine():
    fs_hz, freq_hz = 48000.0, 997.0
    guard = CeilingGuard(1.0, fs_hz, 0.01)
    guard.request(freq_hz, 0.8)
    guard.render(480)                       # ramp of 0.8 * 480 samples: done
    assert guard.settled()
    x = np.concatenate([guard.render(n) for n in (1, 7, 1000, 3, 4096)])
    # fit the phase of the first sample, then compare to A sin(phi0 + 2 pi f k / fs)
    # (the imaginary part of A e^{+i(omega t + phi0)}: the project's e^{+i omega t} convention)
    phi0 = math.asin(x[0] / 0.8) if x[1] > x[0] else math.pi - math.asin(x[0] / 0.8)
    k = np.arange(x.size)
    np.testing.assert_allclose(x, 0.8 * np.sin(phi0 + 2 * math.pi * freq_hz * k / fs_hz), atol=1e-9)


def test_refused_request_names_request_and_ceiling_and_changes_nothing():
    guard = CeilingGuard(2.0, 10000.0, 0.05)
    guard.request(100.0, 1.0)
    guard.render(2000)
    before = guard.status()
    with pytest.raises(CeilingExceeded) as info:
        guard.request(150.0, 2.5)
    msg = str(info.value)
    assert "2.5 V" in msg and "150.0 Hz" in msg and "2 V peak ceiling" in msg
    assert guard.status() == before
    for bad in (math.nan, math.inf, -0.5):
        with pytest.raises(CeilingExceeded):
            guard.request(100.0, bad)
    for bad_freq in (0.0, -1.0, 5000.0, math.inf):
        with pytest.raises(InvalidDriveRequest, match="Hz"):
            guard.request(bad_freq, 1.0)
    assert guard.status() == before


@pytest.mark.parametrize("kwargs", [dict(ceiling_v=0.0), dict(ceiling_v=math.nan), dict(sample_rate_hz=-1.0),
                                    dict(ramp_time_s=0.0), dict(ramp_time_s=math.inf)])
def test_constructor_refuses_nonsense(kwargs):
    args = dict(ceiling_v=1.0, sample_rate_hz=1000.0, ramp_time_s=0.1) | kwargs
    with pytest.raises(InvalidDriveRequest):
        CeilingGuard(**args)


def test_frequency_change_ramps_through_zero():
    fs_hz = 1000.0
    guard = CeilingGuard(1.0, fs_hz, 0.02)    # 20 samples for a full-scale ramp
    guard.request(50.0, 1.0)
    guard.render(100)
    guard.request(120.0, 0.5)
    status = guard.status()
    assert status.freq_hz == 50.0 and status.target_amplitude_v == 0.5 and status.ramping
    amps, freqs = [], []
    for _ in range(60):                       # one sample at a time: watch the switch
        guard.render(1)
        s = guard.status()
        amps.append(s.amplitude_v)
        freqs.append(s.freq_hz)
    switch = freqs.index(120.0)
    assert amps[switch] == 0.0                   # the switch happens exactly at zero
    assert all(f == 50.0 for f in freqs[:switch])
    assert np.all(np.diff(amps[:switch + 1]) < 0)  # monotonic ramp down, then up
    assert amps[switch + 10] == pytest.approx(0.5) and guard.settled()


def test_return_to_current_frequency_cancels_pending_change():
    guard = CeilingGuard(1.0, 1000.0, 0.1)
    guard.request(50.0, 1.0)
    guard.render(200)
    guard.request(80.0, 1.0)
    guard.render(10)
    guard.request(50.0, 0.9)
    s = guard.status()
    assert s.freq_hz == 50.0 and s.target_amplitude_v == 0.9
    guard.render(200)
    assert guard.status().freq_hz == 50.0 and guard.status().amplitude_v == 0.9


def test_halt_latches_until_armed_then_ramps_up_again_from_zero():
    guard = CeilingGuard(1.0, 1000.0, 0.1)
    guard.request(50.0, 1.0)
    guard.render(300)
    guard.halt()
    assert np.all(guard.render(64) == 0.0)
    assert guard.status().amplitude_v == 0.0 and guard.status().target_amplitude_v == 0.0
    with pytest.raises(DriveHalted, match="halted"):
        guard.request(50.0, 0.5)          # whatever still runs above cannot bring the drive back
    guard.request(50.0, 0.0)              # asking for zero is harmless
    assert np.all(guard.render(64) == 0.0) and guard.latched
    guard.arm(1.0)                         # a new sweep
    guard.request(50.0, 1.0)
    x = guard.render(5)
    assert np.all(np.abs(x) <= np.arange(1, 6) * 0.01 + 1e-15)


def test_halt_from_another_thread_zeroes_every_block_started_afterwards():
    guard = CeilingGuard(1.0, 50000.0, 0.01)
    guard.request(1000.0, 1.0)
    halted = threading.Event()
    stop = threading.Event()
    late_blocks: list[np.ndarray] = []

    def worker():
        while not stop.is_set():
            started_after_halt = halted.is_set()
            block = guard.render(512)
            if started_after_halt:
                late_blocks.append(block)

    thread = threading.Thread(target=worker)
    thread.start()
    try:
        time.sleep(0.05)
        guard.halt()
        halted.set()
        time.sleep(0.05)
    finally:
        stop.set()
        thread.join(timeout=10)
    assert not thread.is_alive()
    assert late_blocks and all(np.all(b == 0.0) for b in late_blocks)


def test_ramp_down_reaches_zero_and_stays():
    guard = CeilingGuard(3.0, 2000.0, 0.05)
    guard.request(100.0, 3.0)
    guard.render(500)
    guard.ramp_down()
    assert guard.time_to_settle_s() == pytest.approx(0.05)
    x = guard.render(150)                   # 3 V at 3 V / 0.05 s and 2 kHz: zero at sample 100
    k = np.arange(1, 151)
    assert np.all(np.abs(x) <= np.maximum(3.0 - k * 3.0 / 100, 0.0) + 1e-12)
    assert np.any(np.abs(x[:99]) > 0.0) and np.all(x[99:] == 0.0)
    assert guard.settled() and guard.status().amplitude_v == 0.0
    assert np.all(guard.render(50) == 0.0)


# --------------------------------------------------------------------------- amplitude schedules
@settings(max_examples=400, deadline=None, phases=PHASES)
@given(ceiling_v=st.floats(0.05, 10.0), ramp_time_s=st.floats(0.01, 3.0), step_s=st.floats(0.001, 0.5),
       first=st.floats(0.0, 1.0), second=st.floats(0.0, 1.0), change_freq=st.booleans())
def test_amplitude_schedule_steps_are_bounded(ceiling_v, ramp_time_s, step_s, first, second, change_freq):
    guard = CeilingGuard(ceiling_v, 1000.0, ramp_time_s)
    rate_v_per_s = ceiling_v / ramp_time_s
    guard.request(20.0, first * ceiling_v)
    previous = guard.status().amplitude_v
    sched = guard.amplitude_schedule(ramp_time_s, step_s)
    guard.request(40.0 if change_freq else 20.0, second * ceiling_v)
    mid = guard.status().amplitude_v
    sched2 = guard.amplitude_schedule(2.0 * ramp_time_s + step_s, step_s)
    for start, values in ((previous, sched), (mid, sched2)):
        assert np.all(values <= ceiling_v) and np.all(values >= 0.0)
        steps = np.diff(np.concatenate([[start], values]))
        assert np.all(np.abs(steps) <= rate_v_per_s * step_s * (1 + 1e-9) + 1e-12)
    assert guard.clip_events == 0
    s = guard.status()
    assert s.amplitude_v == pytest.approx(second * ceiling_v) and guard.settled()
    assert s.freq_hz == (40.0 if change_freq else 20.0)
    if change_freq and mid > 0.0:
        assert 0.0 in sched2          # the instrument is sent an exact zero before the switch


def test_amplitude_schedule_advances_like_render():
    # 10 steps of 5 ms at 2 kHz = 100 samples: same state as rendering 100 samples
    a = CeilingGuard(1.0, 2000.0, 0.2)
    b = CeilingGuard(1.0, 2000.0, 0.2)
    for g in (a, b):
        g.request(30.0, 0.8)
    sched = a.amplitude_schedule(0.05, 0.005)
    b.render(100)
    assert sched.size == 10 and sched[-1] == pytest.approx(b.status().amplitude_v)
    assert a.status().amplitude_v == pytest.approx(b.status().amplitude_v)
    np.testing.assert_allclose(sched, np.arange(1, 11) * 0.005 * 1.0 / 0.2)




def test_arm_sets_the_sweep_ceiling_never_above_the_rigs():
    guard = CeilingGuard(2.0, 1000.0, 0.1)
    guard.arm(0.5)                         # the plan's lower ceiling
    assert guard.ceiling_v == 0.5 and guard.hard_ceiling_v == 2.0
    with pytest.raises(CeilingExceeded, match="0.5 V"):
        guard.request(50.0, 0.6)
    with pytest.raises(CeilingExceeded, match="above the rig's ceiling"):
        guard.arm(2.5)
    assert guard.ceiling_v == 0.5
    guard.request(50.0, 0.5)
    x = guard.render(500)
    assert np.max(np.abs(x)) <= 0.5 and guard.clip_events == 0
    # the ramp rate stays the rig's (ceiling / ramp time), not the lowered ceiling's
    assert guard.ramp_rate_v_per_s == pytest.approx(20.0)
    guard.arm(None)
    assert guard.ceiling_v == 2.0


def test_drive_log_notes_every_block_with_its_peak(tmp_path):
    from drivers import drive_log

    path = tmp_path / "drive.csv"
    drive_log.open_log(path)
    try:
        guard = CeilingGuard(1.0, 1000.0, 0.01)
        guard.request(50.0, 0.8)
        guard.render(100)
        guard.render(100)
        guard.halt()
        guard.render(100)
        drive_log.flush()
    finally:
        drive_log.open_log(None)
    log = drive_log.read_log(path)
    assert log.size == 4       # two blocks, the halt taking effect (0 samples), the zero block
    assert log["peak_v"][1] == pytest.approx(0.8, abs=1e-3) and log["peak_v"][2] == 0.0 == log["peak_v"][3]
    assert list(log["latched"]) == [0.0, 0.0, 1.0, 1.0]
    assert list(log["n_samples"]) == [100, 100, 0, 100]
    assert np.all(np.diff(log["wall_time_s"]) >= 0)


def test_the_drive_log_shows_a_halt_even_when_no_block_follows(tmp_path):
    # a back-end that stops rendering after a fault still leaves the zero on record
    from drivers import drive_log

    path = tmp_path / "drive.csv"
    drive_log.open_log(path)
    try:
        guard = CeilingGuard(1.0, 1000.0, 0.01)
        guard.request(50.0, 0.5)
        guard.render(100)
        guard.halt()
        assert guard.status().amplitude_v == 0.0
    finally:
        drive_log.open_log(None)
    log = drive_log.read_log(path)
    assert list(log["peak_v"][-1:]) == [0.0] and log["n_samples"][-1] == 0 and log["latched"][-1] == 1
