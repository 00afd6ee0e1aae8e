"""``timing.record_from_window``: a point's first tuning window, taken after the whole settle time,
begins the record when it is accepted and the drive is left unchanged. Checked from the rendered
drive and the recorded drive reference: the record is the asked length, contiguous from the
window's first sample, at one constant drive, its settle never shorter than asked, the ceiling
and the speaker-protection rate kept on every sample; and it saves drive-on time."""

from __future__ import annotations

import numpy as np
import pytest

from app.engine import states as S
from app.engine.events import EventBus, PointSettled, TuningStep
from app.engine.sweep import SweepEngine, integer_period_samples
from app.errors import FlamebodeError
from drivers.simulated.burner import SimulatedBurner
from engine_helpers import Recorder, short_plan

FREQS = [200.0, 260.0, 330.0, 410.0, 520.0]
SETTLE_S = 0.15          # shorter than the discard and a window together: the window can begin the record


def _sweep(rig, from_window: bool):
    sim = SimulatedBurner(rig, seed=5)
    guard = sim.guard
    amp, samples = [], []                              # per rendered sample: the envelope, the samples
    render = guard.render

    def rendered(n):
        out = render(n)
        amp.append(np.full(n, guard.status().amplitude_v))
        samples.append(out.copy())
        return out
    guard.render = rendered
    requests = []                                      # sample index of each sine drive request
    set_drive = sim.set_drive

    def requested(f, a):
        requests.append(sum(len(x) for x in samples))
        return set_drive(f, a)
    sim.set_drive = requested
    plan = short_plan(FREQS, [0.05], record_s=1.0, prescan={"enabled": True},
                      timing={"settle": SETTLE_S, "tuning_discard": 0.05, "record_from_window": from_window})
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated")
    takes = []                                         # (point index, stage, first sample index, n)
    take = engine._take

    def taken(n, stage):
        pending = 0 if engine._pending is None else engine._pending.shape[1]
        takes.append((engine._point_index, stage, sum(len(x) for x in samples) - pending, n))
        return take(n, stage)
    engine._take = taken
    assert engine.run() == "complete"
    return engine, rec, sim, requests, takes, np.concatenate(amp), np.concatenate(samples)


def test_an_accepted_first_window_begins_the_record_at_one_drive(rig) -> None:
    engine, rec, sim, requests, takes, amp, samples = _sweep(rig, True)
    fs = engine._fs
    settled = {e.point_index: e for e in rec.of(PointSettled)}
    assert sorted(settled) == list(range(len(FREQS)))
    first_hits = {e.point_index for e in rec.of(TuningStep) if e.step == 1 and e.within_tolerance}
    assert first_hits, "no point was accepted at its first window"
    for i, ev in settled.items():
        point = engine.points[i]
        _, n_record = integer_period_samples(point.freq_hz, fs, engine.plan.timing.record, max_extra=0.01)
        assert ev.record.shape[1] == n_record                       # the asked length, whatever it began with
        windows = [t for t in takes if t[0] == i and t[1] == S.TUNING and t[3] == round(ev.tuning[-1][2] * fs)]
        rest = [t for t in takes if t[0] == i and t[1] == S.RECORDING]
        start = windows[-1][2] if ev.from_window_s > 0 else rest[0][2]
        if ev.from_window_s > 0:
            assert i in first_hits and len(ev.tuning) == 1
            n_window = windows[-1][3]
            assert ev.from_window_s == n_window / fs == ev.tuning[-1][2]
            assert rest[0][2] == start + n_window                   # contiguous: the rest follows the window
            assert rest[0][3] == n_record - n_window
        # one drive over the whole record, requested before the settle began; the whole settle before it
        last = max(r for r in requests if r <= start)
        assert np.all(amp[start:start + n_record] == ev.drive_v)
        assert start - last >= round(SETTLE_S * fs) - 1
        # the recorded drive reference says the same: the same amplitude in each tenth of the record
        ref = ev.record[ev.channels.index(rig.drive.reference_channel)]
        t = np.arange(ref.size) / fs
        tenths = np.array_split(np.arange(ref.size), 10)
        a = [abs(2 * np.mean(ref[s] * np.exp(-2j * np.pi * point.freq_hz * t[s]))) for s in tenths]
        assert max(a) - min(a) <= 0.02 * np.mean(a), (point.freq_hz, a)
    assert any(e.from_window_s > 0 for e in settled.values())
    assert sim.guard.clip_events == 0 and np.max(np.abs(samples)) <= engine.ceiling_v


def test_a_record_from_the_window_saves_drive_on_time(rig) -> None:
    on, rec_on, *_ = _sweep(rig, True)
    off, rec_off, *_ = _sweep(rig, False)
    assert all(e.from_window_s == 0 for e in rec_off.of(PointSettled))
    assert on.stats.recorded_samples == off.stats.recorded_samples
    assert on.stats.drive_on_samples < off.stats.drive_on_samples


def test_a_long_settle_does_not_hold_the_first_window_back(rig) -> None:
    """With a settle longer than the discard and half a window nothing changes: the settle after
    the window covers it anyway, and a missed window would have waited for nothing."""
    plan = short_plan(FREQS[:2], [0.05], record_s=0.5,
                      timing={"settle": 0.8, "tuning_discard": 0.05, "record_from_window": True})
    bus = EventBus()
    rec = Recorder()
    bus.subscribe(rec)
    engine = SweepEngine(plan, rig, SimulatedBurner(rig, seed=5), bus, backend_name="simulated")
    assert engine.run() == "complete"
    assert all(e.from_window_s == 0 for e in rec.of(PointSettled))


def test_a_bad_value_is_refused_with_its_key() -> None:
    with pytest.raises(FlamebodeError, match=r"timing\.record_from_window: Input should be a valid boolean"):
        short_plan([200.0], [0.05], timing={"record_from_window": "sometimes"})
