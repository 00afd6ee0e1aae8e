"""The ceiling guard's multi-sine mode: the peak of the SUM within the ceiling, ramped envelope."""

from __future__ import annotations

import numpy as np
import pytest

from drivers import drive_log
from drivers.errors import CeilingExceeded, DriveHalted
from drivers.guard import CeilingGuard

FS = 10000.0
N = 200                      # 50 Hz grid
HARM = (2, 3, 5, 8, 13)


def _phases(k):
    i = np.arange(1, k + 1)
    return -np.pi * i * (i - 1) / k


def test_peak_of_the_sum_is_checked_not_each_line():
    guard = CeilingGuard(1.0, FS, ramp_time_s=0.05)
    with pytest.raises(CeilingExceeded, match="peak"):
        guard.request_multisine(N, HARM, [0.5] * 5, _phases(5))       # every line is below 1 V, the sum is not
    assert guard.status().target_amplitude_v == 0.0                   # nothing changed
    peak = guard.request_multisine(N, HARM, [0.2] * 5, _phases(5))
    assert 0.2 < peak <= 1.0
    out = np.concatenate([guard.render(500) for _ in range(20)])
    assert np.max(np.abs(out)) <= peak + 1e-12 and guard.clip_events == 0
    # the output after the ramp is the requested sum
    tail = out[-4 * N:]
    fit = np.fft.rfft(tail)[np.array(HARM) * 4] * 2 / tail.size
    assert np.allclose(np.abs(fit), 0.2, rtol=1e-9)


def test_envelope_ramps_like_a_sine_and_a_change_passes_through_zero():
    guard = CeilingGuard(1.0, FS, ramp_time_s=0.1)
    peak = guard.request_multisine(N, HARM, [0.15] * 5, _phases(5))
    out = guard.render(int(FS * 0.2))
    rate = 1.0 / 0.1 / FS                                             # volts per sample
    envelope_bound = np.minimum(np.arange(1, out.size + 1) * rate, peak)
    assert np.all(np.abs(out) <= envelope_bound + 1e-12)              # soft start of the whole sum
    guard.request(300.0, 0.4)                                          # back to a sine: through zero
    out2 = np.concatenate([guard.render(200) for _ in range(30)])
    assert np.any(out2 == 0.0)
    assert guard.multisine is None and guard.status().freq_hz == 300.0 and not guard.status().ramping


def test_halt_zeroes_a_multisine_and_the_drive_log_shows_its_peak(tmp_path):
    path = tmp_path / "drive.csv"
    drive_log.open_log(path)
    try:
        guard = CeilingGuard(0.5, FS, ramp_time_s=0.01)
        peak = guard.request_multisine(N, HARM, [0.08] * 5, _phases(5))
        for _ in range(10):
            guard.render(500)
        guard.halt()
        assert not np.any(guard.render(500))
        with pytest.raises(DriveHalted):
            guard.request_multisine(N, HARM, [0.01] * 5, _phases(5))
        drive_log.flush()
    finally:
        drive_log.open_log(None)
    log = drive_log.read_log(path)
    assert np.max(log["peak_v"]) <= peak + 1e-12 <= 0.5
    assert np.all(log["peak_v"] <= log["ceiling_v"])
