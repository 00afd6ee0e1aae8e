"""Throughput of the simulated burner: simulated seconds per wall second on one core.

Plain script (not collected by pytest): ``python tests/bench/bench_simulator.py``.
A variant of the demo rig with 6 pressure sensors + light + drive reference (8 input
channels) at 51.2 kS/s, 0.1 s blocks; steady drive, during ramps, and with a saturated
flame. Target: at least 20x real time.

Imports: numpy, app.rig and drivers.simulated only.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from app.rig import read_toml, rig_from_dict  # noqa: E402
from drivers.simulated import SimulatedBurner  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]


def eight_channel_rig():
    data = read_toml(ROOT / "configs" / "demo-rig.toml")
    positions_mm = [-820, -700, -560, -420, -280, -140]
    data["pressure_sensors"] = [{"channel": f"p{i + 1}", "position": f"{x} mm", "sensitivity": "14.5 mV/Pa"}
                                for i, x in enumerate(positions_mm)]
    data["acquisition"] = {"sample_rate": "51.2 kHz", "input_range": "10 V", "block_duration": "0.1 s"}
    return rig_from_dict(data, str(ROOT / "configs" / "demo-rig.toml"))


def measure(label: str, sim: SimulatedBurner, actions, seconds: float) -> tuple[str, float, float]:
    sim.start()
    n_blocks = int(round(seconds / sim.rig.acquisition.block_duration))
    t0 = time.perf_counter()
    for k in range(n_blocks):
        actions(sim, k)
        sim.read_block()
    wall = time.perf_counter() - t0
    return label, seconds, seconds / wall


def main() -> None:
    rig = eight_channel_rig()
    scenario = ROOT / "configs" / "demo-scenario.toml"
    steady = lambda s, k: s.set_drive(400.0, 0.5) if k == 0 else None  # noqa: E731
    sweep = lambda s, k: s.set_drive(100.0 + 100.0 * ((k // 10) % 20), 0.5) if k % 10 == 0 else None  # noqa: E731
    ramps = lambda s, k: s.set_drive(400.0, 0.2 + 1.5 * ((k // 3) % 2)) if k % 3 == 0 else None  # noqa: E731
    rows = [
        measure("steady 400 Hz", SimulatedBurner(rig, scenario, seed=1), steady, 60.0),
        measure("sweep, 1 s/point", SimulatedBurner(rig, scenario, seed=1), sweep, 60.0),
        measure("ramps every 0.3 s", SimulatedBurner(rig, scenario, seed=1), ramps, 30.0),
    ]
    print(f"simulated burner, {len(rig.input_channels)} channels at {rig.acquisition.sample_rate / 1e3:g} kS/s")
    print(f"{'case':<22}{'simulated s':>12}{'x real time':>14}")
    for label, seconds, speed in rows:
        print(f"{label:<22}{seconds:>12.0f}{speed:>14.1f}")
    worst = min(r[2] for r in rows)
    print(f"worst case {worst:.1f}x real time: {'meets' if worst >= 20 else 'MISSES'} the 20x target")
    guard_rows()


def guard_rows() -> None:
    """The ceiling guard's share: one 0.1 s block of drive samples, steady and while ramping."""
    import time

    from drivers.guard import CeilingGuard

    print(f"\n{'ceiling guard, render(5120) at 51.2 kS/s':<42}{'median µs':>10}{'share of 0.1 s':>16}")
    for label, amplitude in (("steady", None), ("ramping", 1.9)):
        guard = CeilingGuard(2.0, 51200.0, 30.0 if amplitude else 0.3)
        guard.request(120.0, 1.0)
        if amplitude is None:
            guard.render(51200)
        else:
            guard.request(120.0, amplitude)
        times = []
        for _ in range(300):
            t0 = time.perf_counter()
            guard.render(5120)
            times.append(time.perf_counter() - t0)
        med = sorted(times)[len(times) // 2]
        print(f"  {label:<40}{med * 1e6:>10.1f}{med / 0.1 * 100:>15.3f}%")


if __name__ == "__main__":
    main()
