"""The simulated burner's acoustic transients (scenario ``[transients] enabled = true``).

Checks against outside references:
* a band-pass second-order resonator H = (iω/(Qω0)) / (1 − (ω/ω0)² + iω/(Qω0)) put through
  ``Transients`` answers a sine switched on and off as scipy.signal.lsim answers the same
  continuous system, and its free decay has the rate σ = ω0/(2Q) (a linear-systems fact, from
  memory);
* on the resonant scenario, the pressure's ring-down after the drive stops at 267 Hz decays at
  the rate of the rig's slowest mode from the simulator's eigenfrequency search
  (``truth.true_stability``: zeros of the network's characteristic function, a computation
  independent of the impulse response the transients come from);
* in the steady state the transients change nothing: the same seed with and without them gives
  the same samples once the modes have decayed.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from app.rig import load_rig
from drivers.simulated import SimulatedBurner, truth
from drivers.simulated.scenario import load_scenario
from drivers.simulated.transients import Transients

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
FS, BLOCK = 25600.0, 2560
F0, Q = 300.0, 10.0


class _Resonator:
    """A stand-in for the burner model: one 'sensor' answering as the band-pass resonator, no flame."""

    sensor_positions_m = (0.0,)

    def response(self, freq_hz, drive_v, state, flame):
        w = 1j * freq_hz / F0
        h = (w / Q) / (1.0 + w * w + w / Q)

        class R:
            pressure_per_v = np.array([h])
            flame_linear = 0.0
            velocity_per_v = 1.0
            velocity_reference_m_s = 1.0
        return R()


def _decay_rate(x: np.ndarray, fs: float, start_s: float, stop_s: float) -> float:
    """σ from a straight line through the log of the analytic envelope between two times."""
    env = np.abs(signal.hilbert(x))
    t = np.arange(x.size) / fs
    sel = (t >= start_s) & (t <= stop_s)
    slope = np.polyfit(t[sel], np.log(env[sel]), 1)[0]
    return -slope


def test_a_resonator_answers_a_switched_sine_as_scipy_lsim_does():
    tr = Transients(_Resonator(), None, FS, BLOCK, length_s=1.0, max_frequency_hz=5000.0)
    n_on, n_off = 8 * BLOCK, 8 * BLOCK
    t = np.arange(n_on + n_off) / FS
    z = np.where(t < n_on / FS, np.exp(2j * np.pi * F0 * t), 0.0)      # a sine switched on, then off
    out = []
    for i in range(0, t.size, BLOCK):
        zb = z[i:i + BLOCK]
        quasi = np.real(tr.steady(F0)[0] * zb)
        out.append(quasi + tr.correction([(np.full(BLOCK, F0), zb)])[0])
    ours = np.concatenate(out)
    w0 = 2 * np.pi * F0
    system = signal.lti([w0 / Q, 0.0], [1.0, w0 / Q, w0 * w0])          # the same H(s), s = iω
    _, ref, _ = signal.lsim(system, z.real, t)
    assert np.max(np.abs(ours - ref)) <= 0.01 * np.max(np.abs(ref))
    # its free decay: σ = ω0/(2Q)
    sigma = _decay_rate(ours[n_on:], FS, 0.01, 0.05)   # 0.4 to 0.01 of the level at the switch
    assert sigma == pytest.approx(w0 / (2 * Q), rel=0.02)


@pytest.fixture(scope="module")
def resonant():
    rig = load_rig(CONFIGS / "demo-rig.toml")
    base = load_scenario(CONFIGS / "resonant-scenario.toml")
    ringing = base.model_copy(update={"transients": base.transients.model_copy(update={"enabled": True})})
    return rig, base, ringing


def _drive(sim, freq_hz, volts, blocks_on, blocks_off):
    sim.start()
    sim.set_drive(freq_hz, volts)
    data = [sim.read_block().data for _ in range(blocks_on)]
    sim.set_drive(freq_hz, 0.0)
    data += [sim.read_block().data for _ in range(blocks_off)]
    return np.concatenate(data, axis=1)


def test_the_ring_down_decays_at_the_rate_of_the_rigs_slowest_mode(resonant):
    rig, _, ringing = resonant
    sim = SimulatedBurner(rig, scenario=ringing, seed=3)
    slowest = min((m for m in truth.true_stability(sim).modes if 200.0 < m.freq_hz < 350.0),
                  key=lambda m: -m.growth_rate_per_s)
    assert slowest.freq_hz == pytest.approx(267.0, abs=3.0)
    data = _drive(sim, 267.0, 0.2, blocks_on=30, blocks_off=10)
    fs = sim.sample_rate_hz
    off = 30 * int(round(rig.acquisition.block_duration * fs)) / fs
    ramp = rig.drive.ramp_time
    p = data[0] - np.mean(data[0])
    sigma = _decay_rate(p, fs, off + ramp + 0.02, off + ramp + 0.2)   # after the ramp, above the noise
    assert sigma == pytest.approx(-slowest.growth_rate_per_s, rel=0.1)


def test_in_the_steady_state_the_transients_change_nothing(resonant):
    rig, base, ringing = resonant
    a = _drive(SimulatedBurner(rig, scenario=base, seed=5), 430.0, 0.2, blocks_on=40, blocks_off=0)
    b = _drive(SimulatedBurner(rig, scenario=ringing, seed=5), 430.0, 0.2, blocks_on=40, blocks_off=0)
    n_p = len(rig.pressure_sensors)
    first = np.abs(b[:n_p, :BLOCK] - a[:n_p, :BLOCK]).max() / np.abs(a[:n_p]).max()
    late = np.abs(b[:, -4 * BLOCK:] - a[:, -4 * BLOCK:]).max() / np.abs(a[:n_p]).max()
    assert first > 0.01              # the switch-on rings (the answer is not quasi-steady there) ...
    assert late < 1e-4               # ... and after the modes decayed the samples are the same
