"""The settle time counts from the start of the drive's final approach at the new frequency
(app/engine/ramp.py): the ramp at the new frequency and the rest of its last block count, the
ramp down at the old frequency does not, and the total is never shorter than the plan asks.
Checked from the samples the guard actually rendered, through zero and with a direct retune,
with the ceiling and the speaker-protection rate kept on every sample."""

from __future__ import annotations

import math

import numpy as np
import pytest

from app.engine import states as S
from app.engine.events import EventBus
from app.engine.ramp import DriveChange, settle_credit
from app.engine.sweep import SweepEngine
from drivers.guard import CeilingGuard
from drivers.simulated.burner import SimulatedBurner
from engine_helpers import short_plan

FS = 10_000.0
RATE = 2.0 / 0.3          # the demo rig's guard: ceiling / ramp_time, volts per second


def test_no_request_or_no_wait_earns_nothing() -> None:
    assert settle_credit(None, 1000, 1000, FS, RATE) == 0
    assert settle_credit(DriveChange(100.0, 0.5, 200.0, 0.5), 0, 0, FS, RATE) == 0


def test_an_amplitude_change_counts_from_the_request() -> None:
    change = DriveChange(300.0, 0.5, 300.0, 0.6)       # 15 ms of ramp at 6.67 V/s
    assert settle_credit(change, 1000, 1000, FS, RATE) == 1000


def test_a_retune_counts_from_the_switch_not_the_ramp_down() -> None:
    change = DriveChange(300.0, 0.6, 350.0, 0.6)       # 90 ms down at 300 Hz, 90 ms up at 350 Hz
    waited = 2000                                      # two blocks of 0.1 s; the ramp ends in the second
    assert settle_credit(change, waited, 1000, FS, RATE) == waited - 900
    # from zero, the new frequency plays from the request
    assert settle_credit(DriveChange(300.0, 0.0, 350.0, 0.6), 1000, 1000, FS, RATE) == 1000


def test_a_short_old_amplitude_still_waits_half_a_period_for_a_direct_switch() -> None:
    change = DriveChange(100.0, 0.001, 150.0, 0.3)     # ramp down 0.15 ms, but a switch may wait 5 ms
    assert settle_credit(change, 1000, 1000, FS, RATE) == 1000 - 50


def test_a_ramp_slower_than_the_guard_rate_earns_nothing() -> None:
    change = DriveChange(300.0, 0.6, 350.0, 0.6)       # 180 ms at the guard's rate
    assert settle_credit(change, 3000, 1000, FS, RATE) == 0    # still ramping after 200 ms: no credit


def _sweep(rig, retune: str, settle_s: float):
    sim = SimulatedBurner(rig, seed=5)
    if retune != "through-zero":
        sim.guard = CeilingGuard(rig.drive.ceiling, sim.sample_rate_hz, rig.drive.ramp_time, retune=retune)
    guard = sim.guard
    freq, amp, samples, ramping = [], [], [], []     # per rendered sample
    render = guard.render

    def rendered(n):
        f0 = guard.status().freq_hz
        out = render(n)
        st = guard.status()
        cut = guard.last_switch_samples if st.freq_hz != f0 and guard.last_switch_samples is not None else 0
        freq.append(np.r_[np.full(cut, f0), np.full(n - cut, st.freq_hz)])
        amp.append(np.full(n, st.amplitude_v))
        ramping.append(np.full(n, st.ramping))
        samples.append(out.copy())
        return out
    guard.render = rendered
    requests = []                                      # (sample index of the request, freq, amplitude)
    set_drive = sim.set_drive

    def requested(f, a):
        requests.append((sum(len(x) for x in samples), f, a))
        return set_drive(f, a)
    sim.set_drive = requested
    plan = short_plan([200.0, 260.0, 330.0, 410.0], [0.15], record_s=0.5,
                      timing={"settle": settle_s, "tuning_discard": 0.05})
    engine = SweepEngine(plan, rig, sim, EventBus(), backend_name="simulated")
    starts = {}                                        # point index -> sample index of its record's start
    take = engine._take

    def taken(n, stage):
        if stage == S.RECORDING and engine._point_index not in starts:
            pending = 0 if engine._pending is None else engine._pending.shape[1]
            starts[engine._point_index] = sum(len(x) for x in samples) - pending
        return take(n, stage)
    engine._take = taken
    assert engine.run() == "complete"
    return (engine, sim, plan, requests, starts, np.concatenate(freq), np.concatenate(amp),
            np.concatenate(ramping), np.concatenate(samples))


@pytest.mark.parametrize("retune", ["through-zero", "direct"])
def test_total_settle_is_never_shorter_than_asked_and_the_ramp_counts(rig, retune) -> None:
    settle_s = 0.8                                     # longer than the discard and a window together
    engine, sim, plan, requests, starts, freq, amp, ramping, samples = _sweep(rig, retune, settle_s)
    fs = engine._fs
    block_n = int(round(rig.acquisition.block_duration * fs))
    assert len(starts) == len(plan.points())
    shortened = 0
    for point in plan.points():
        start = starts[point.index]
        r_idx, f, a = [r for r in requests if r[0] <= start][-1]     # the last drive change before the record
        assert math.isclose(f, point.freq_hz) and a > 0
        at_new = r_idx + int(np.argmax(freq[r_idx:] == point.freq_hz))   # first sample at the new frequency
        assert start - at_new >= round(settle_s * fs) - 1, point.freq_hz     # the whole settle, from the data
        last_block = at_new + int(np.argmax(~ramping[at_new:]))          # the block in which the ramp ended
        assert np.all(amp[last_block:start + 1] == amp[start])            # no drive change in the settle
        if start - (last_block + block_n) < round(settle_s * fs):
            shortened += 1                             # the ramp and its last block counted as settling
    assert shortened >= 1
    assert sim.guard.clip_events == 0 and np.max(np.abs(samples)) <= engine.ceiling_v
