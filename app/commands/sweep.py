"""``flamebode sweep PLAN``: run a sweep plan headless, with a live progress display.

``--dry-run`` prints the points, the estimated duration and the checks without touching
hardware. Otherwise the plan runs on the chosen back-end (the simulated burner by default;
a plan may name its default rig and scenario relative to itself), storing the run in
``--out RUN_DIR`` through the run writer. Ctrl-C aborts safely: the drive is ramped to
zero (a second Ctrl-C halts at once) and the stored points are kept.

Imports: the engine, plan/rig, storage writer and (through .running) the driver registry, lazily. Never Qt.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import Any

from ..errors import FlamebodeError


class SweepCommandError(FlamebodeError):
    """The sweep command cannot start (missing rig, unknown back-end...)."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("plan", help="sweep plan file (TOML), see docs/plan-file.md")
    p.add_argument("--rig", help="rig file (default: the plan's 'rig' key, relative to the plan)")
    p.add_argument("--out", metavar="RUN_DIR", help="run folder to store the points in")
    p.add_argument("--backend", default="simulated", help="back-end name (default: simulated)")
    p.add_argument("--scenario", help="simulated burner scenario (default: the plan's 'scenario' key)")
    p.add_argument("--fast", action="store_true", help="simulator only: run as fast as the CPU allows")
    p.add_argument("--seed", type=int, default=None, help="simulator only: random seed")
    p.add_argument("--dry-run", action="store_true", help="print the points, duration and checks; touch nothing")


def _rig_path(args: argparse.Namespace, plan_path: Path) -> Path:
    from ..plan import plan_from_dict
    from ..rig import read_toml

    if args.rig:
        return Path(args.rig)
    plan = plan_from_dict(read_toml(plan_path), str(plan_path))
    path = plan.resolve("rig")
    if path is None:
        raise SweepCommandError(f"{plan_path}: no rig given; pass --rig RIG or set 'rig' in the plan")
    return path


def dry_run(plan: Any, rig: Any, out: Any = None) -> None:
    out = out or sys.stdout
    pts = plan.points()
    basis = plan.amplitude.basis
    print(f"plan {plan.source_path}: {plan.name}", file=out)
    print(f"rig  {rig.source_path}: {rig.name}", file=out)
    print(f"{len(pts)} points, amplitude |u'|/u_mean at the reference plane ({basis}), "
          f"{plan.order.major}-major:", file=out)
    for p in pts:
        print(f"  {p.index + 1:>4}  {p.freq_hz:9.2f} Hz  a = {p.amplitude_ratio:.4f} {basis}", file=out)
    est = plan.estimated_duration_s(ramp_time_s=rig.drive.ramp_time)
    print(f"estimated duration: {est / 60:.1f} min ({est:.0f} s, {plan.timing.record:g} s records)", file=out)
    print("checks:", file=out)
    for line in plan.describe_checks(rig):
        print(f"  - {line}", file=out)


def run(args: argparse.Namespace) -> int:
    from ..plan import load_plan
    from ..rig import load_rig

    plan_path = Path(args.plan)
    rig_path = _rig_path(args, plan_path)
    rig = load_rig(rig_path)
    plan = load_plan(plan_path, rig)
    if args.dry_run:
        dry_run(plan, rig)
        return 0
    scenario = Path(args.scenario) if args.scenario else (plan.resolve("scenario") if args.backend == "simulated"
                                                          else None)
    return _run_sweep(args, plan, rig, plan_path, rig_path, scenario)


def _run_sweep(args: argparse.Namespace, plan: Any, rig: Any, plan_path: Path, rig_path: Path,
               scenario: Path | None) -> int:
    from ..engine.events import EventBus
    from ..engine.progress import ProgressDisplay
    from ..engine.sweep import SweepEngine
    from .running import StoppedBySignal, open_device, run_engine

    bus = EventBus()
    device = open_device(args.backend, rig, scenario, args.fast, args.seed)
    writer = None
    if args.out:
        from ..storage.writer import RunWriter

        writer = RunWriter(args.out, rig_path, plan_path, bus, scenario_path=scenario,
                           options={"backend": args.backend, "fast": "1" if args.fast else "0"})
        writer.start()
        bus.subscribe(writer)
    else:
        print("no --out RUN_DIR given: nothing will be stored", file=sys.stderr)
    display = ProgressDisplay(estimated_s=plan.estimated_duration_s(ramp_time_s=rig.drive.ramp_time))
    bus.subscribe(display)
    engine = SweepEngine(plan, rig, device, bus, backend_name=args.backend,
                         run_label=time.strftime("s%Y%m%d-%H%M%S"), wait_for_store=writer is not None)
    display.start()
    try:
        run_engine(engine, device, (display.close,) + ((writer.close,) if writer is not None else ()))
    except StoppedBySignal:
        print(f"run folder: {args.out}" if args.out else "nothing stored (no --out RUN_DIR)")
        raise
    return _report(engine, writer, args.out)


def _report(engine: Any, writer: Any, out: str | None) -> int:
    if engine.error is not None:
        raise SweepCommandError(f"the sweep ended with an internal error: {engine.error!r}; the drive was "
                                f"brought to zero")
    print(f"run folder: {out}" if out else "nothing stored (no --out RUN_DIR)")
    if writer is not None and writer.fault:
        print(f"storage fault: {writer.fault}", file=sys.stderr)
        return 1
    return 0 if engine.finish_reason == "complete" else 1
