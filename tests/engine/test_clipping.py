"""Clipping found from the data, whatever input range the rig declares.

A channel whose amplifier or ADC saturates below the declared ``input_range`` shows flat
tops: runs of identical extreme values and a pile-up at the edge of its histogram (common
practice when screening records). Before this check, records with tens of thousands of
samples pinned at one value were stored as good, because only the declared range was
compared.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from app.engine.events import PointSettled
from app.engine.faults import flat_top
from drivers.protocols import Block
from drivers.simulated.burner import SimulatedBurner

from engine_helpers import make_engine, short_plan

FS = 25600.0


def _sine(freq_hz, amp_v, noise_v, lsb_v, n=25600, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / FS
    x = amp_v * np.sin(2 * np.pi * freq_hz * t + 0.3) + noise_v * rng.standard_normal(n)
    return np.round(x / lsb_v) * lsb_v if lsb_v > 0 else x


@settings(max_examples=300, deadline=None)
@given(freq_hz=st.floats(40.0, 3000.0) | st.sampled_from([40.0, 400.0, 1000.0, 2000.0, 3200.0, 6400.0]),
       amp_v=st.floats(1e-3, 5.0), noise_rel=st.floats(0.0, 0.05) | st.just(0.0),
       bits=st.sampled_from([0, 12, 16, 24]), seed=st.integers(0, 1000))
def test_a_clean_quantised_sine_is_never_called_clipped(freq_hz, amp_v, noise_rel, bits, seed):
    lsb = 20.0 / 2**bits if bits else 0.0          # a +-10 V converter
    x = _sine(freq_hz, amp_v, noise_rel * amp_v, lsb, seed=seed)
    if np.ptp(x) < 20 * lsb:
        return                                       # a few codes only: not a signal to judge
    assert flat_top(x) is None


@settings(max_examples=300, deadline=None)
@given(freq_hz=st.floats(40.0, 3000.0), amp_v=st.floats(1e-2, 5.0), rail_rel=st.floats(0.3, 0.97),
       noise_rel=st.floats(0.0, 0.01), bits=st.sampled_from([0, 16, 24]), seed=st.integers(0, 1000))
def test_a_sine_clipped_at_a_rail_is_found(freq_hz, amp_v, rail_rel, noise_rel, bits, seed):
    lsb = 20.0 / 2**bits if bits else 0.0
    # a converter's own noise is about a code: real records are dithered at least that much
    x = _sine(freq_hz, amp_v, max(noise_rel * amp_v, lsb), lsb, seed=seed)
    rail = rail_rel * amp_v
    # a flat top needs at least two samples on it per period
    assume(np.arccos(rail_rel) / np.pi * FS / freq_hz >= 2.0)
    clipped = np.clip(x, -10.0, rail)               # one-sided: an amplifier stage saturating
    found = flat_top(clipped)
    assert found is not None and found[0] == pytest.approx(clipped.max())


class _RailedChannel:
    """The simulated burner behind a channel amplifier that saturates at +-rail_v (a test double
    of a real fault: the rail is below the rig's declared 10 V input range)."""

    def __init__(self, sim: SimulatedBurner, channel: str, rail_v: float):
        self.sim, self.channel, self.rail_v = sim, channel, rail_v

    def __getattr__(self, name):
        return getattr(self.sim, name)

    def read_block(self, timeout_s: float = 2.0) -> Block:
        block = self.sim.read_block(timeout_s)
        data = block.data.copy()
        row = block.channels.index(self.channel)
        np.clip(data[row], -self.rail_v, self.rail_v, out=data[row])
        return Block(data=data, channels=block.channels, sample_rate_hz=block.sample_rate_hz,
                     start_index=block.start_index, overflows=block.overflows,
                     drive_freq_hz=block.drive_freq_hz, drive_amplitude_v=block.drive_amplitude_v)


def test_records_clipped_below_the_declared_range_are_flagged(rig):
    plan = short_plan([200.0, 300.0, 400.0], [0.05], record_s=0.5)
    clean_sim = SimulatedBurner(rig, seed=41)
    engine, rec = make_engine(rig, plan, clean_sim)
    assert engine.run() == "complete"
    row = rec.of(PointSettled)[0].channels.index("p2")
    peaks = [float(np.abs(p.record[row]).max()) for p in rec.of(PointSettled)]
    assert not any("input-clipping" in p.flags for p in rec.of(PointSettled))
    rail_v = 0.6 * min(peaks)                        # every point's p2 signal reaches it
    railed = _RailedChannel(SimulatedBurner(rig, seed=41), "p2", rail_v)
    engine, rec = make_engine(rig, plan, railed)
    engine.run()
    settled = rec.of(PointSettled)
    assert settled and all("input-clipping" in p.flags for p in settled)
