"""Storage benchmark (plain script, not collected by pytest).

A 200-point sweep with 2 s records at the demo rig's 25.6 kHz on 6 channels (float64,
about 2.5 MB per record) is stored by the RunWriter. Reports the resident memory growth
(psutil RSS) from point 1 to point 200 (target: < 50 MB) and the store time per point
(publish -> acknowledgement) as a fraction of the record time.

The engine's PointSettled events are synthesised here (same size and content type as a
real sweep: sines at the drive frequency plus noise), so the figures are the writer's
alone. Run: ``python tests/bench/bench_storage.py [--points 200] [--seconds 2]``.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import psutil

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests" / "storage"))

from app.engine.events import EventBus, PointSettled, SweepFinished, SweepStarted  # noqa: E402
from app.storage.writer import RunWriter  # noqa: E402
from storage_synth import CHANNELS, make_result, plan_of  # noqa: E402


def record(freq_hz: float, fs: float, seconds: float, rng: np.random.Generator) -> np.ndarray:
    t = np.arange(int(fs * seconds)) / fs
    x = 0.1 * np.cos(2 * np.pi * freq_hz * t + np.linspace(0, -2, len(CHANNELS))[:, None])
    x[4] += 1.0
    return x + 0.003 * rng.standard_normal(x.shape)


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--points", type=int, default=200)
    ap.add_argument("--seconds", type=float, default=2.0)
    ap.add_argument("--fs", type=float, default=25600.0)
    args = ap.parse_args()
    proc = psutil.Process()
    rng = np.random.default_rng(1)
    freqs = list(np.linspace(100.0, 2000.0, args.points))
    plan = plan_of(freqs)
    with tempfile.TemporaryDirectory() as tmp:
        plan_file = Path(tmp) / "plan.toml"
        plan_file.write_text('name = "storage benchmark"\n')
        bus = EventBus()
        writer = RunWriter(Path(tmp) / "run", ROOT / "configs" / "demo-rig.toml", plan_file, bus).start()
        bus.subscribe(writer)
        bus.publish(SweepStarted(run_label="bench", n_points=args.points, backend="synthetic",
                                 identity={}, plan=plan, rig=None))
        store_s, rss = [], []
        for p in plan.points:
            rec = record(p.freq_hz, args.fs, args.seconds, rng)
            ev = PointSettled(attempt_id=f"a{p.index:04d}", point_index=p.index, freq_hz=p.freq_hz,
                              target_ratio=0.05, drive_v=0.5, record=rec, channels=CHANNELS,
                              sample_rate_hz=args.fs, result=make_result(rec, p.freq_hz, 0.05, args.fs),
                              tuning=((0.3, 0.04, 0.3), (0.5, 0.05, 0.3)), flags=(), overflows=0,
                              identity={"backend": "synthetic"}, started_wall_s=time.time())
            del rec
            t0 = time.perf_counter()
            bus.publish(ev)
            ok, err = bus.wait_ack(ev.attempt_id, 60.0)
            store_s.append(time.perf_counter() - t0)
            del ev
            if not ok or err:
                print(f"point {p.index}: not stored: {err}")
                return 1
            rss.append(proc.memory_info().rss)
        bus.publish(SweepFinished(reason="complete", n_settled=args.points, n_points=args.points))
        writer.close()
        size_mb = sum(f.stat().st_size for f in (Path(tmp) / "run" / "records").iterdir()) / 1e6
    st = np.array(store_s)
    raw_mb = len(CHANNELS) * args.fs * args.seconds * 8 / 1e6
    rows = [
        ("source of events", "synthetic PointSettled (engine not used)"),
        ("points x record", f"{args.points} x {args.seconds:g} s, {len(CHANNELS)} ch @ {args.fs:g} Hz "
                            f"({raw_mb:.2f} MB raw float64)"),
        ("RSS after point 1", f"{rss[0] / 1e6:.1f} MB"),
        (f"RSS after point {args.points}", f"{rss[-1] / 1e6:.1f} MB"),
        ("RSS growth 1 -> last", f"{(rss[-1] - rss[0]) / 1e6:+.1f} MB (limit 50 MB)"),
        ("store time median / p95 / max", f"{np.median(st) * 1e3:.0f} / {np.percentile(st, 95) * 1e3:.0f} / "
                                          f"{st.max() * 1e3:.0f} ms"),
        ("store time / record time", f"{np.median(st) / args.seconds:.3f} median, "
                                     f"{st.max() / args.seconds:.3f} max"),
        ("on disk", f"{size_mb:.0f} MB ({size_mb / (raw_mb * args.points):.2f} of raw)"),
    ]
    width = max(len(k) for k, _ in rows)
    for k, v in rows:
        print(f"{k:<{width}}  {v}")
    return 0 if rss[-1] - rss[0] < 50e6 else 1


if __name__ == "__main__":
    sys.exit(main())
