"""Storage benchmark (plain script, not collected by pytest).

A 200-point sweep with 2 s records at the demo rig's 25.6 kHz on 6 channels (float64,
about 2.5 MB per record) is stored by the RunWriter. Reports the resident memory growth
(psutil RSS) from point 1 to point 200 (target: < 50 MB) and the store time per point
(publish -> acknowledgement) as a fraction of the record time.

Two runs side by side: (1) the real thing — the sweep engine on the simulated burner
(fast) with the run writer subscribed, a 200-point plan 100–2000 Hz; (2) the writer alone,
fed synthetic PointSettled events of the same size (sines plus noise), so the writer's
share can be told from the engine's. Run:
``python tests/bench/bench_storage.py [--points 200] [--seconds 2]``.
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


class _TimedBus(EventBus):
    """An EventBus that notes when each PointSettled was published and acknowledged."""

    def __init__(self) -> None:
        super().__init__()
        self.published: dict[str, float] = {}
        self.store_s: list[float] = []
        self.rss: list[int] = []
        self._proc = psutil.Process()

    def publish(self, event) -> None:
        if isinstance(event, PointSettled):
            self.published[event.attempt_id] = time.perf_counter()
        super().publish(event)

    def acknowledge(self, attempt_id: str, error: str | None = None) -> None:
        if attempt_id in self.published:
            self.store_s.append(time.perf_counter() - self.published.pop(attempt_id))
            self.rss.append(self._proc.memory_info().rss)
        super().acknowledge(attempt_id, error)


def engine_run(args: argparse.Namespace) -> dict[str, object]:
    """The real sweep: engine + simulated burner (fast) + run writer."""
    from app.engine.sweep import SweepEngine
    from app.plan import load_plan
    from app.rig import load_rig
    from drivers.simulated import SimulatedBurner

    with tempfile.TemporaryDirectory() as tmp:
        plan_file = Path(tmp) / "plan.toml"
        plan_file.write_text(
            f'name = "storage benchmark"\n[frequencies]\nlog = {{ start = "100 Hz", stop = "2000 Hz", '
            f'count = {args.points} }}\n[amplitude]\nvalues = [0.05]\nbasis = "peak"\n'
            f'[timing]\nrecord = "{args.seconds} s"\nsettle = "0.2 s"\ntuning_window = "0.2 s"\n')
        rig = load_rig(ROOT / "configs" / "demo-rig.toml")
        plan = load_plan(plan_file, rig)
        bus = _TimedBus()
        writer = RunWriter(Path(tmp) / "run", ROOT / "configs" / "demo-rig.toml", plan_file, bus,
                           options={"backend": "simulated", "fast": "1"}).start()
        bus.subscribe(writer)
        sim = SimulatedBurner(rig, seed=5)
        engine = SweepEngine(plan, rig, sim, bus, backend_name="simulated", wait_for_store=True)
        t0 = time.perf_counter()
        reason = engine.run()
        wall = time.perf_counter() - t0
        writer.close()
        sim.stop()
        size_mb = sum(f.stat().st_size for f in (Path(tmp) / "run" / "records").iterdir()) / 1e6
        n_ch = len(sim.channels)
    return {"source": f"sweep engine + simulated burner ({reason}, {wall:.0f} s wall)", "store_s": bus.store_s,
            "rss": bus.rss, "size_mb": size_mb, "n_ch": n_ch, "fs": rig.acquisition.sample_rate}


def synthetic_run(args: argparse.Namespace) -> dict[str, object]:
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
                raise SystemExit(f"point {p.index}: not stored: {err}")
            rss.append(proc.memory_info().rss)
        bus.publish(SweepFinished(reason="complete", n_settled=args.points, n_points=args.points))
        writer.close()
        size_mb = sum(f.stat().st_size for f in (Path(tmp) / "run" / "records").iterdir()) / 1e6
    return {"source": "writer alone, synthetic events", "store_s": store_s, "rss": rss, "size_mb": size_mb,
            "n_ch": len(CHANNELS), "fs": args.fs}


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--points", type=int, default=200)
    ap.add_argument("--seconds", type=float, default=2.0)
    ap.add_argument("--fs", type=float, default=25600.0, help="sample rate of the synthetic run")
    args = ap.parse_args()
    runs = [engine_run(args), synthetic_run(args)]
    print(f"{args.points} points x {args.seconds:g} s records; memory is the process RSS (psutil)")
    for r in runs:
        st, rss = np.array(r["store_s"]), np.array(r["rss"])
        raw_mb = r["n_ch"] * r["fs"] * args.seconds * 8 / 1e6
        print(f"\n{r['source']}: {r['n_ch']} ch @ {r['fs']:g} Hz ({raw_mb:.2f} MB raw float64 per record)")
        rows = [
            ("points stored", f"{len(st)}"),
            ("RSS after first / last point", f"{rss[0] / 1e6:.1f} / {rss[-1] / 1e6:.1f} MB"),
            ("RSS growth first -> last", f"{(rss[-1] - rss[0]) / 1e6:+.1f} MB (limit 50 MB)"),
            ("store time median / p95 / max", f"{np.median(st) * 1e3:.0f} / {np.percentile(st, 95) * 1e3:.0f} / "
                                              f"{st.max() * 1e3:.0f} ms"),
            ("store time / record time", f"{np.median(st) / args.seconds:.3f} median, "
                                         f"{st.max() / args.seconds:.3f} max"),
            ("on disk", f"{r['size_mb']:.0f} MB ({r['size_mb'] / (raw_mb * len(st)):.2f} of raw)"),
        ]
        width = max(len(k) for k, _ in rows)
        for k, v in rows:
            print(f"  {k:<{width}}  {v}")
    return 0 if all(np.array(r["rss"])[-1] - np.array(r["rss"])[0] < 50e6 for r in runs) else 1


if __name__ == "__main__":
    sys.exit(main())
