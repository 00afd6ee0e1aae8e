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

Run: python tests/bench/bench_controller.py   (--soft-start: table (c) only)
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
from app.engine.events import EventBus  # noqa: E402
from app.engine.sweep import SweepEngine  # noqa: E402
from app.plan import load_plan, plan_from_dict  # noqa: E402
from app.rig import load_rig, read_toml  # noqa: E402
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


def main() -> None:
    rig = load_rig(ROOT / "configs" / "demo-rig.toml")
    if "--soft-start" in sys.argv:
        soft_start_table(rig)
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


if __name__ == "__main__":
    main()
