"""Benchmark: processing one FTF point of 10 s × 8 channels × 51.2 kS/s.

Run with ``python tests/bench/bench_point.py`` (not collected by pytest). Measured side
by side in one run on the same simulated record:

- ours: ``app.core.response.evaluate_point`` — harmonic fit of every channel with 2f/3f,
  the full noise cross-spectral covariance of all channels near f with its degrees of
  freedom, generalised least-squares multi-microphone fit, FTF with Student-t 95 % intervals
  (light-velocity cross term, systematic directions) and every quality figure (including the
  half-record drift figures);
- baseline: a Welch/CSD H1 estimate from scipy.signal (cross-spectrum of every channel
  against the drive reference, auto-spectrum of the reference, 1 s Hann segments with
  50 % overlap), followed by the same multi-microphone fit and FTF arithmetic.

Targets: ours ≥ 10× faster than the baseline and under 1 % of the record's duration;
estimate_frequency (for records without a stored frequency) under 10 % of a point. Each repeat
runs all three in turn, so a load that comes and goes falls on them alike.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from scipy import signal

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_simulator import eight_channel_rig  # noqa: E402

from app.core import gas  # noqa: E402
from app.core.harmonic import estimate_frequency  # noqa: E402
from app.core.multimic import decompose, velocity_at_reference  # noqa: E402
from app.core.response import evaluate_point, medium_from  # noqa: E402
from drivers.simulated import SimulatedBurner  # noqa: E402

REPEATS = 11
FREQ_HZ = 430.0


def simulated_record(rig) -> tuple[np.ndarray, tuple[str, ...], float]:
    sim = SimulatedBurner(rig, seed=4)
    sim.start()
    sim.set_drive(FREQ_HZ, 0.3)
    while sim.drive_status().ramping:
        sim.read_block()
    data = np.concatenate([sim.read_block().data for _ in range(100)], axis=1)
    return data, sim.channels, sim.sample_rate_hz


def baseline_h1(data, channels, fs, rig, mean) -> complex:
    ref = data[channels.index(rig.drive.reference_channel)]
    f, gxy = signal.csd(ref[None, :], data, fs=fs, nperseg=int(fs), axis=-1)
    _, gxx = signal.welch(ref, fs=fs, nperseg=int(fs))
    k = int(np.argmin(abs(f - FREQ_HZ)))
    h = gxy[:, k] / gxx[k]                          # each channel per volt of drive
    rows = [channels.index(s.channel) for s in rig.pressure_sensors]
    p = h[rows] / np.array([s.sensitivity for s in rig.pressure_sensors])
    wf = decompose(p, np.array([s.position for s in rig.pressure_sensors]), FREQ_HZ, rig.duct.radius_m,
                   medium_from(mean))
    u, _ = velocity_at_reference(wf, rig.duct.reference_plane, rig.duct.area_ratio)
    light = data[channels.index(rig.light.channel)]
    return (h[channels.index(rig.light.channel)] / (light.mean() - rig.light.dark_offset)) / (u / mean.velocity_reference_m_s)


def timed_side_by_side(*fns) -> list[float]:
    """Median time of each function, run in turn within every repeat (so a load that comes
    and goes on the machine falls on all of them alike)."""
    for fn in fns:
        fn()
    times: list[list[float]] = [[] for _ in fns]
    for _ in range(REPEATS):
        for fn, out in zip(fns, times):
            t0 = time.perf_counter()
            fn()
            out.append(time.perf_counter() - t0)
    return [float(np.median(t)) for t in times]


def main() -> None:
    rig = eight_channel_rig()
    data, channels, fs = simulated_record(rig)
    mean = gas.mean_flow(rig)
    duration = data.shape[1] / fs
    ours = evaluate_point(data, channels, fs, FREQ_HZ, rig, mean)
    theirs = baseline_h1(data, channels, fs, rig, mean)
    ref = data[channels.index(rig.drive.reference_channel)]
    t_ours, t_base, t_freq = timed_side_by_side(lambda: evaluate_point(data, channels, fs, FREQ_HZ, rig, mean),
                                                lambda: baseline_h1(data, channels, fs, rig, mean),
                                                lambda: estimate_frequency(ref, fs))
    print(f"one point: {data.shape[0]} channels × {data.shape[1]} samples ({duration:g} s at {fs / 1e3:g} kS/s), "
          f"median of {REPEATS}")
    print(f"{'estimator':<36}{'time ms':>10}{'vs baseline':>14}{'% of record':>14}{'gain':>9}{'phase rad':>11}")
    print(f"{'core evaluate_point (all figures)':<36}{t_ours * 1e3:>10.1f}{t_base / t_ours:>13.1f}×"
          f"{100 * t_ours / duration:>13.2f}%{ours.gain:>9.4f}{ours.phase_rad:>11.4f}")
    print(f"{'scipy Welch/CSD H1 + same MMM':<36}{t_base * 1e3:>10.1f}{1.0:>13.1f}×"
          f"{100 * t_base / duration:>13.2f}%{abs(theirs):>9.4f}{np.angle(theirs):>11.4f}")
    print(f"{'estimate_frequency (1 channel)':<36}{t_freq * 1e3:>10.1f}{t_base / t_freq:>13.1f}×"
          f"{100 * t_freq / duration:>13.2f}%   {100 * t_freq / t_ours:.1f} % of one point")
    q = ours.quality
    print(f"ours: gain ±{ours.gain_ci95:.4f}, phase ±{ours.phase_ci95_rad:.4f} rad (95 %), "
          f"dof {q['dof_gain']:.0f}, k {q['coverage_factor_gain']:.3f}, GLS {ours.velocity.wave_fit.generalised}")
    print("targets: ≥ 10× faster than the baseline, < 1 % of the record; estimate_frequency < 10 % of a point")


if __name__ == "__main__":
    main()
