"""Controller benchmark (plain script, not collected by pytest): tuning windows per point and overhead.

Runs configs/bench-plan.toml (100-2000 Hz in 50 Hz steps, 5 % peak forcing) on the demo
rig with the simulated burner in fast mode:

(a) tuning windows and drive corrections per point for the predictive controller, for the
    plain proportional controller (each point starts at the previous point's voltage), and
    for the predictive controller given the first run's learned table as an earlier run's
    prior; all on the same simulated rig and seed;
(b) sweep overhead = (drive-on time - recording time) / recording time with 10 s records,
    in simulated time (samples), over the whole plan;
(c) soft start: the worst TRUE |u'|/u_mean over every tuning window divided by the target
    (from the simulator's truth, not the engine's estimate; the promise is <= 1.5) and the
    tuning windows per point, from a cold start, on the demo and the resonant scenarios,
    for this controller and for plain proportional control opening at 10 % of the ceiling
    (how every sweep opened before the soft start).

(d) the pre-scan (issue #15), side by side from one run of each, with 10 s records on the
    bench plan, on the demo and the resonant scenarios, cold start: the predictive controller
    without the pre-scan, with it, and with the first run's table as an earlier run's prior:
    first-window hit rate (within tolerance), median and mean windows per point, the worst
    TRUE window amplitude / target (drivers.simulated.truth; the pre-scan's multi-sine counts
    as the sum of its lines' true amplitudes) and the overhead (pre-scan included); and the
    pre-scan with ``settle = "auto"`` (the bench plan's 0.5 s where the decay cannot be told),
    and that with the guard's direct retune (``CeilingGuard(retune="direct")``: no ramp through
    zero between frequencies); and the pre-scan with the scenario's acoustic transients on
    (``[transients] enabled``: the duct rings after every drive change, as a real one does).

Run: python tests/bench/bench_controller.py   (table (d) and the last line; --all: (a)-(d);
--soft-start: table (c) only)
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from app.engine.controller import AmplitudeController, ControllerSettings  # noqa: E402
from app.engine.events import EventBus, TransferMeasured, TuningStep  # noqa: E402
from app.engine.sweep import SweepEngine  # noqa: E402
from app.plan import load_plan, plan_from_dict  # noqa: E402
from app.rig import load_rig, read_toml  # noqa: E402
from drivers.guard import CeilingGuard  # noqa: E402
from drivers.simulated import truth  # noqa: E402
from drivers.simulated.burner import SimulatedBurner  # noqa: E402
from soft_start import forcing_of_sweep  # noqa: E402

SEED = 7


def run(plan, rig, controller=None, prior=()):
    sim = SimulatedBurner(rig, seed=SEED)
    engine = SweepEngine(plan, rig, sim, EventBus(), controller=controller, prior=prior, backend_name="simulated")
    t0 = time.perf_counter()
    reason = engine.run()
    return engine, reason, time.perf_counter() - t0


def settings_for(plan, rig) -> ControllerSettings:
    t = plan.tuning
    return ControllerSettings(ceiling_v=plan.ceiling_v(rig), tolerance=t.tolerance, max_steps=t.max_steps,
                              first_drive_fraction=t.first_drive_fraction, max_step_factor=t.max_step_factor)


def row(name: str, steps: list[int]) -> str:
    later = steps[2:]
    return (f"{name:<34} {steps[0]:>6} {statistics.median(later):>14.1f} {statistics.mean(later):>10.2f} "
            f"{max(later):>6} {statistics.median([s - 1 for s in later]):>16.1f}")


def prescan_plan(record: str = "10 s", prescan: bool = True, settle_auto: bool = False):
    data = read_toml(ROOT / "configs" / "bench-plan.toml")
    data["timing"] = {**data["timing"], "record": record}
    if settle_auto:     # settle = "auto", the bench plan's settle as the fallback
        data["timing"] = {**data["timing"], "settle": "auto", "settle_fallback": data["timing"]["settle"]}
    data["prescan"] = {"enabled": prescan}
    return plan_from_dict(data, str(ROOT / "configs" / "bench-plan.toml"))


def measured_sweep(plan, rig, scenario, prior=(), retune="through-zero"):
    """One sweep with the truth watching every tuning window and every pre-scan level; ``retune``
    the simulated burner's guard mode (its constructor has no option yet: the guard is swapped)."""
    sim = SimulatedBurner(rig, scenario=scenario, seed=SEED)
    if retune != "through-zero":
        sim.guard = CeilingGuard(rig.drive.ceiling, sim.sample_rate_hz, rig.drive.ramp_time, retune=retune)
    bus = EventBus()
    worst, first, transfer = [0.0], {}, []
    points = {p.index: p for p in plan.points()}

    def watch(ev):
        if isinstance(ev, TuningStep):
            p = points[ev.point_index]
            worst[0] = max(worst[0], truth.true_amplitude_ratio(sim, p.freq_hz, ev.drive_v) / p.peak_ratio)
            if ev.step == 1:
                first[ev.point_index] = ev.within_tolerance
        elif isinstance(ev, TransferMeasured):
            transfer.append(ev)
    bus.subscribe(watch)
    engine = SweepEngine(plan, rig, sim, bus, prior=prior, backend_name="simulated")
    original = engine._set_multisine
    target = min(p.peak_ratio for p in points.values())

    def watched(grid, amps, phases):   # the multi-sine: the sum of its lines' TRUE amplitudes
        total = sum(truth.true_amplitude_ratio(sim, f, a) for f, a in zip(grid.freqs_hz, amps))
        worst[0] = max(worst[0], total / target)
        return original(grid, amps, phases)
    engine._set_multisine = watched
    t0 = time.perf_counter()
    reason = engine.run()
    steps = engine.stats.tuning_steps
    return {"reason": reason, "hit": sum(first.values()) / max(1, len(first)), "median": statistics.median(steps),
            "mean": statistics.mean(steps), "worst": worst[0], "overhead": engine.stats.overhead,
            "wall": time.perf_counter() - t0, "engine": engine,
            "prescan_s": transfer[0].duration_s if transfer and not transfer[0].skipped else 0.0}


def ringing(path: Path):
    """The scenario with its acoustic transients on ([transients] enabled = true): the modes ring
    down after every drive change, so a window taken before they decayed is seen to be off."""
    from drivers.simulated.scenario import load_scenario

    sc = load_scenario(path)
    return sc.model_copy(update={"transients": sc.transients.model_copy(update={"enabled": True})})


def prescan_table(rig) -> float:
    """Table (d); returns the median windows per point, cold start with the pre-scan (the larger of
    the two scenarios)."""
    print("(d) pre-scan, bench plan 100-2000 Hz / 50 Hz, 10 s records, cold start; worst = TRUE amplitude / target")
    print(f"{'scenario':<20} {'controller':<34} {'first hit':>9} {'median':>7} {'mean':>6} {'worst':>6} "
          f"{'overhead':>9} {'pre-scan':>9}")
    result = None
    for scenario in ("demo-scenario.toml", "resonant-scenario.toml"):
        path = ROOT / "configs" / scenario
        cold = measured_sweep(prescan_plan(prescan=False), rig, path)
        table = cold["engine"].controller.memory.table(0.05)
        rows = (("predictive, no pre-scan", cold),
                ("predictive + pre-scan", measured_sweep(prescan_plan(), rig, path)),
                ("predictive + pre-scan, settle auto", measured_sweep(prescan_plan(settle_auto=True), rig, path)),
                ("pre-scan + auto settle + direct", measured_sweep(prescan_plan(settle_auto=True), rig, path,
                                                                       retune="direct")),
                ("predictive + earlier run's table", measured_sweep(prescan_plan(prescan=False), rig, path,
                                                                  prior=table)),
                ("pre-scan, the rig ringing", measured_sweep(prescan_plan(), rig, ringing(path))))
        for label, r in rows:
            print(f"{scenario[:-5]:<20} {label:<34} {r['hit']:>9.0%} {r['median']:>7.1f} {r['mean']:>6.2f} "
                  f"{r['worst']:>6.2f} {r['overhead']:>9.1%} {r['prescan_s']:>7.1f} s   ({r['reason']}, "
                  f"{r['wall']:.0f} s wall)")
            auto = r["engine"].auto_settle
            if auto is not None:
                print(f"{'':<20} {'':<34} {auto.summary()}")
            if label == "predictive + pre-scan":
                result = r["median"] if result is None else max(result, r["median"])
    return float(result)


def main() -> None:
    rig = load_rig(ROOT / "configs" / "demo-rig.toml")
    if "--soft-start" in sys.argv:
        soft_start_table(rig)
        return
    if "--all" not in sys.argv:
        median = prescan_table(rig)
        print(f"median tuning windows per point (cold start, pre-scan): {median:g}")
        return
    plan_path = ROOT / "configs" / "bench-plan.toml"
    plan = load_plan(plan_path, rig)
    n = len(plan.points())
    predictive, r1, w1 = run(plan, rig)
    proportional, r2, w2 = run(plan, rig, AmplitudeController(settings_for(plan, rig), proportional=True))
    table = predictive.controller.memory.table(plan.points()[0].peak_ratio)
    with_prior, r3, w3 = run(plan, rig, prior=table)
    print(f"(a) tuning windows per point, {n} points 100-2000 Hz / 50 Hz, tolerance {plan.tuning.tolerance:.0%}")
    print(f"{'controller':<34} {'first':>6} {'median 3..N':>14} {'mean':>10} {'max':>6} {'median corr.':>16}")
    print(row("predictive (this run only)", predictive.stats.tuning_steps))
    print(row("plain proportional", proportional.stats.tuning_steps))
    print(row("predictive + earlier run's table", with_prior.stats.tuning_steps))
    print(f"    finish: {r1}, {r2}, {r3}; wall time {w1:.1f} s, {w2:.1f} s, {w3:.1f} s")
    print("    (a window = one tuning measurement; 'corr.' = drive corrections after the first window)")

    data = read_toml(plan_path)
    data["timing"] = {**data["timing"], "record": "10 s"}
    plan10 = plan_from_dict({k: v for k, v in data.items()}, str(plan_path))
    plan10.check_against(rig)
    for label, prior in (("predictive (this run only)", ()), ("predictive + earlier run's table", table)):
        eng, reason, wall = run(plan10, rig, prior=prior)
        s = eng.stats
        print(f"(b) overhead, 10 s records, {len(plan10.points())} points 100-2000 Hz / 50 Hz, {label}: "
              f"drive-on {s.drive_on_samples / s.sample_rate_hz:.1f} s, recording "
              f"{s.recorded_samples / s.sample_rate_hz:.1f} s -> overhead {s.overhead:.1%} ({reason}, {wall:.1f} s wall)")
    soft_start_table(rig)


def soft_start_table(rig) -> None:
    print("(c) soft start, cold start, worst true |u'|/u over all tuning windows / target (promise <= 1.5)")
    print(f"{'plan':<16} {'scenario':<20} {'controller':<30} {'worst':>7} {'at Hz':>7} {'windows/pt':>11}")
    for plan_name in ("demo-ftf-plan.toml", "bench-plan.toml"):
        plan = load_plan(ROOT / "configs" / plan_name, rig)
        for scenario in ("demo-scenario.toml", "resonant-scenario.toml"):
            old = ControllerSettings(ceiling_v=plan.ceiling_v(rig), tolerance=plan.tuning.tolerance,
                                     max_steps=plan.tuning.max_steps, first_drive_fraction=0.1)
            for label, ctrl in (("soft start (this controller)", None),
                                ("proportional from 10 % ceiling", AmplitudeController(old, proportional=True))):
                f = forcing_of_sweep(plan, rig, ROOT / "configs" / scenario, seed=SEED, controller=ctrl)
                print(f"{plan_name[:-5]:<16} {scenario[:-5]:<20} {label:<30} {f.worst_ratio:>7.2f} "
                      f"{f.worst_at_hz:>7.0f} {f.windows_per_point:>11.2f}")
    if "--all" in sys.argv:
        median = prescan_table(rig)
        print(f"median tuning windows per point (cold start, pre-scan): {median:g}")


if __name__ == "__main__":
    main()
