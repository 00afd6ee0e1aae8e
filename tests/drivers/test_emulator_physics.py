"""The rig emulator's physics on a received drive, without an audio server (fast).

Checks: the frequency of a received sine from its zero crossings, also across a gap; the
emulator's response to a clean drive is the in-process simulator's physics (the reference
channel carries the drive, the truth file holds ``truth.true_ftf`` at the drive's
frequency); jumps in the received drive (gaps, a cut, repeated chunks: what a dying or
overloaded audio connection delivers) do not blow the simulated flame off; the clock-mismatch
resampler changes the length by the ppm asked. Sources: the FTF and amplitude ratio come from
``drivers.simulated.truth`` (the simulator's own truth); the rest is common practice.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from app.rig import load_rig
from drivers.emulator.files import TruthFile
from drivers.emulator.physics import ReceivedDriveBurner, estimate_frequency
from drivers.simulated import truth
from emulator_rig import RIG

FS, N = 48000, 2048


def test_frequency_from_zero_crossings_also_across_a_gap():
    t = np.arange(9600) / FS
    x = 0.3 * np.sin(2 * np.pi * 437.3 * t + 0.4)
    assert estimate_frequency(x, FS) == pytest.approx(437.3, rel=1e-5)
    x[2000:7000] = 0.0
    assert estimate_frequency(x, FS) == pytest.approx(437.3, rel=1e-4)
    assert estimate_frequency(np.zeros(100), FS) == 0.0


def sine_blocks(freq_hz: float, amp_v: float, n_blocks: int) -> np.ndarray:
    t = np.arange(n_blocks * N) / FS
    return amp_v * np.sin(2 * np.pi * freq_hz * t) * np.minimum(1.0, t / 0.2)


def test_a_clean_drive_gets_the_simulators_physics_and_truth(tmp_path):
    burner = ReceivedDriveBurner(load_rig(RIG), N)
    path = tmp_path / "truth.json"
    file = TruthFile(path, burner.true_point)
    d = sine_blocks(400.0, 0.15, 40)
    ref = burner.channels.index("drv_ref")
    out = []
    for k in range(40):
        data, f, peak = burner.respond(d[k * N:(k + 1) * N])
        file.add(f, peak)
        out.append(data[ref])
    played = np.concatenate(out)
    # one block of look-ahead: the reference is the drive one block later, plus the rig's noise
    assert np.max(np.abs(played[N:] - d[:-N])) < 1e-3
    point = json.loads(path.read_text())["points"][0]
    assert point["freq_hz"] == pytest.approx(400.0, abs=0.01)
    a = truth.true_amplitude_ratio(burner, 400.0, 0.15)
    assert point["amplitude_ratio"] == pytest.approx(a, rel=1e-3)   # at the peak received (sampled)
    assert complex(point["ftf_re"], point["ftf_im"]) == pytest.approx(truth.true_ftf(burner, 400.0, a), rel=1e-6)
    assert burner.flame_on and not burner.rig_events


@pytest.mark.parametrize("kind", ["gaps", "cut", "repeats", "phase-jumps"])
def test_jumps_in_the_received_drive_do_not_blow_the_flame_off(kind):
    rng = np.random.default_rng(3)
    d = sine_blocks(150.0, 0.25, 60)        # 12 % forcing at 150 Hz: far from blow-off
    where = rng.integers(N, d.size - N, size=10)
    if kind == "gaps":
        for j in where:
            d[j:j + rng.integers(1, 800)] = 0.0
    elif kind == "cut":
        d[where[0]:] = 0.0
    elif kind == "repeats":
        for j in where:
            n = int(rng.integers(50, 500))
            d[j:j + n] = d[j - n:j]
    else:
        t = np.arange(d.size) / FS
        phase = np.zeros(d.size)
        for j in where:
            phase[j:] += rng.uniform(0.5, 2 * np.pi)
        d = 0.25 * np.sin(2 * np.pi * 150.0 * t + phase) * np.minimum(1.0, t / 0.2)
    burner = ReceivedDriveBurner(load_rig(RIG), N)
    for k in range(60):
        burner.respond(d[k * N:(k + 1) * N])
    assert burner.rig_events == ()
    assert burner.discontinuities >= 1


def test_clock_mismatch_resamples_by_the_ppm_asked():
    from drivers.emulator.audio import AudioEmulator

    emu = AudioEmulator.__new__(AudioEmulator)        # only the resampler, no audio server
    emu.clock_ratio, emu._resample_pos, emu.n_out = 1.0 + 500e-6, 0.0, 1
    emu._resample_tail = np.zeros((1, 1))
    total = sum(emu._resample(np.ones((N, 1))).shape[0] for _ in range(200))
    assert total == pytest.approx(200 * N / (1.0 + 500e-6), abs=2)
