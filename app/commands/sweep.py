"""``flamebode sweep PLAN``: run a sweep plan headless, with a live progress display.

``--dry-run`` prints the points, the estimated duration, the settle rule and the checks without
touching hardware. ``--prescan``/``--no-prescan``, ``--survey`` and ``--refine`` override the
plan's ``[prescan]``, ``[survey]`` and ``[refinement]`` sections (``--prescan`` makes the pre-scan
even with a fresh earlier table). The engine is given the age of the earlier run's table
(``[tuning] prior``) from ``[prescan] table_measured``; a table of unknown age is never fresh. Before any sweep (and in the dry run) a record is checked against the machine's
memory: one that would need more than half the RAM is refused with the numbers. The dry
run also asks the chosen back-end (its ``probe()``, nothing is opened) whether it can give
the rig's sample rate: a back-end that knows its limits states them in its
``Availability.details`` as ``sample_rate_min_hz`` / ``sample_rate_max_hz`` (numbers as
text) or ``sample_rates_hz`` (a comma-separated list); one that states none (the simulated
burner has no limit but the rig file's bounds) is named as not checked. On the simulated
burner the dry run also loads the scenario (bounds, a file cut short, channels) and prints
its warnings. A sweep that keeps no point exits non-zero.

Otherwise the plan runs on the chosen back-end (the simulated burner by default; a plan may
name its default rig and scenario relative to itself), storing the run in ``--out RUN_DIR``
through the run writer. Ctrl-C aborts safely: the drive is ramped to zero (a second Ctrl-C
halts at once) and the stored points are kept.

Imports: the engine, plan/rig, storage writer, the simulated burner's scenario loader and (through
.running) the driver registry, lazily. Never Qt.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
from pathlib import Path
from typing import Any

from ..errors import FlamebodeError


class SweepCommandError(FlamebodeError):
    """The sweep command cannot start (missing rig, unknown back-end...)."""


def _seed(text: str) -> int:
    from ..cli import seed_type

    return seed_type(text)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("plan", help="sweep plan file (TOML), see docs/plan-file.md")
    p.add_argument("--rig", help="rig file (default: the plan's 'rig' key, relative to the plan)")
    p.add_argument("--out", metavar="RUN_DIR", help="run folder to store the points in")
    p.add_argument("--backend", default="simulated", help="back-end name (default: simulated)")
    p.add_argument("--scenario", help="simulated burner scenario (default: the plan's 'scenario' key)")
    p.add_argument("--fast", action="store_true", help="simulator only: run as fast as the CPU allows")
    p.add_argument("--seed", type=_seed, default=None, help="simulator only: random seed (0 or more)")
    p.add_argument("--dry-run", action="store_true", help="print the points, duration and checks; touch nothing")
    pre = p.add_mutually_exclusive_group()
    pre.add_argument("--prescan", dest="prescan", action="store_const", const=True, default=None,
                     help="make the transfer pre-scan ([prescan] enabled = true), even with a fresh earlier table")
    pre.add_argument("--no-prescan", dest="prescan", action="store_const", const=False,
                     help="no transfer pre-scan ([prescan] enabled = false)")
    p.add_argument("--survey", action="store_true", default=None,
                   help="multi-sine survey of the LINEAR FTF first ([survey] enabled = true)")
    p.add_argument("--refine", action="store_true", default=None,
                   help="adaptive refinement after the plan's points ([refinement] enabled = true)")


def with_overrides(plan: Any, args: argparse.Namespace) -> tuple[Any, list[str]]:
    """The plan with the command line's --prescan/--no-prescan/--survey/--refine applied (validated
    again: the refinement's worst case counts towards the run-time limit); and what was changed."""
    from ..configfile import model_from_dict
    from ..plan import PLAN_DOC

    changes: dict[str, dict[str, Any]] = {}
    said = []
    if getattr(args, "prescan", None) is not None:
        changes["prescan"] = {"enabled": bool(args.prescan)}
        if args.prescan:
            changes["prescan"]["table_fresh"] = 0.0     # asked for: made even with a fresh table
        said.append("--prescan" if args.prescan else "--no-prescan")
    if getattr(args, "survey", None):
        changes["survey"] = {"enabled": True}
        said.append("--survey")
    if getattr(args, "refine", None):
        changes["refinement"] = {"enabled": True}
        said.append("--refine")
    if not changes:
        return plan, []
    data = plan.model_dump(exclude={"source_path"})
    for section, values in changes.items():
        data[section] = {**data[section], **values}
    updated = model_from_dict(type(plan), data, plan.source_path or "<plan>", PLAN_DOC)
    return updated, said


def prior_age_s(plan: Any) -> float | None:
    """Age of the earlier run's table the engine is given ([tuning] prior, the only source of
    one): from [prescan] table_measured; None (unknown: never counted fresh) without it."""
    if not plan.tuning.prior:
        return None
    return plan.prescan.table_age_s()


def _rig_path(args: argparse.Namespace, plan_path: Path) -> Path:
    from ..plan import plan_from_dict
    from ..rig import read_toml

    if args.rig:
        return Path(args.rig)
    plan = plan_from_dict(read_toml(plan_path), str(plan_path), units_required=True)
    path = plan.resolve("rig")
    if path is None:
        raise SweepCommandError(f"{plan_path}: no rig given; pass --rig RIG or set 'rig' in the plan")
    return path


def machine_memory_bytes() -> int | None:
    """Physical memory of this machine, or None where it cannot be told."""
    try:
        return int(os.sysconf("SC_PHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (AttributeError, ValueError, OSError):
        return None


def _gb(n_bytes: float) -> str:
    return f"{n_bytes / 1e9:.3g} GB" if n_bytes >= 1e9 else f"{n_bytes / 1e6:.3g} MB"


def record_memory(plan: Any, rig: Any) -> tuple[float, str]:
    """Bytes a record (or tuning window) needs in memory while it is assembled, and how that is counted.

    A record of ``timing.record`` (up to 1 % longer, whole periods) of every input channel
    in float64, held twice: the blocks and the joined record (app.engine.sweep)."""
    fs, n_ch = rig.acquisition.sample_rate, len(rig.input_channels)
    period_s = 1.0 / float(plan.frequencies.all_hz().min())    # a record holds at least one period
    longest_s = max(plan.timing.record, plan.timing.tuning_window, period_s) * 1.01 + rig.acquisition.block_duration
    n_bytes = 2.0 * 8.0 * n_ch * math.ceil(longest_s * fs)
    how = (f"a {plan.timing.record:g} s record of {n_ch} channels at {fs:g} Hz is {_gb(n_bytes / 2)} of float64 "
           f"samples, held twice while it is assembled: {_gb(n_bytes)}")
    return n_bytes, how


def check_memory(plan: Any, rig: Any, total_bytes: int | None = None) -> str:
    """Refuse a record that would need more than half the machine's memory; say what it needs."""
    total = machine_memory_bytes() if total_bytes is None else total_bytes
    need, how = record_memory(plan, rig)
    period_s = 1.0 / float(plan.frequencies.all_hz().min())
    if total is None:
        return f"{how}; this machine's memory could not be read, not checked"
    if need > total / 2:
        per_s = need / (max(plan.timing.record, plan.timing.tuning_window, period_s) * 1.01
                        + rig.acquisition.block_duration)
        longest = (total / 2) / per_s
        raise SweepCommandError(
            f"{plan.source_path or '<plan>'}: timing.record: {how}, more than half of this machine's "
            f"{_gb(total)} of memory; at {rig.acquisition.sample_rate:g} Hz (acquisition.sample_rate in "
            f"{rig.source_path or 'the rig file'}) a record of at most about {longest:.3g} s fits")
    return f"{how}, within half of this machine's {_gb(total)}"


def _details_rate(details: dict[str, str], key: str) -> float | None:
    try:
        value = float(details[key])
    except (KeyError, ValueError, TypeError):
        return None
    return value if math.isfinite(value) and value > 0 else None


def check_backend(name: str, rig: Any) -> str:
    """Ask back-end ``name`` (its probe only) whether it can give the rig's sample rate.

    Raises SweepCommandError for an unknown back-end or a rate it states it cannot give;
    returns what was checked, in plain words."""
    from drivers.registry import list_backends

    infos = {b.name: b for b in list_backends()}
    if name not in infos:
        raise SweepCommandError(f"unknown back-end {name!r}; known back-ends: {', '.join(infos) or 'none'}")
    avail = infos[name].availability
    fs = rig.acquisition.sample_rate
    where = f"acquisition.sample_rate in {rig.source_path or 'the rig file'}"
    if not avail.available:
        return (f"back-end {name!r} is not available here ({avail.reason or 'no reason given'}): "
                f"sample rate {fs:g} Hz not checked against the device")
    details = dict(avail.details or {})
    lo, hi = _details_rate(details, "sample_rate_min_hz"), _details_rate(details, "sample_rate_max_hz")
    listed = [r for r in (_details_rate({"r": x.strip()}, "r") for x in details.get("sample_rates_hz", "").split(","))
              if r is not None]
    if (lo is not None and fs < lo) or (hi is not None and fs > hi):
        span = f"{lo or 0:g} Hz to {hi:g} Hz" if hi is not None else f"at least {lo:g} Hz"
        raise SweepCommandError(f"{where}: {fs:g} Hz, but back-end {name!r} can sample at {span}")
    if listed and not any(abs(fs - r) <= 1e-6 * r for r in listed):
        raise SweepCommandError(f"{where}: {fs:g} Hz, but back-end {name!r} can sample only at "
                                f"{', '.join(f'{r:g}' for r in listed)} Hz")
    from drivers.errors import DriverError
    from drivers.registry import check_settings

    try:
        checked = check_settings(name, rig)      # the device itself, where the back-end can ask it
    except DriverError as exc:
        raise SweepCommandError(f"{where}: {exc}") from None
    if checked:
        return checked
    if lo is None and hi is None and not listed:
        return (f"back-end {name!r} states no sample-rate limit: {fs:g} Hz checked against the rig file's "
                f"bounds only")
    return f"back-end {name!r} can sample at {fs:g} Hz"


def check_scenario(path: Path | None, rig: Any) -> list[str]:
    """Load the simulated burner's scenario (bounds, a file cut short, channels against the rig);
    return what the dry run says about it, with the scenario's own warnings (linear stability)."""
    if path is None:
        return ["scenario: none named (the simulator's default for this rig)"]
    from drivers.simulated.scenario import load_scenario

    scenario = load_scenario(path)
    scenario.check_against(rig)
    return [f"scenario {path}"] + [f"  warning: {w}" for w in scenario.warnings(rig)]


def dry_run(plan: Any, rig: Any, out: Any = None, backend: str | None = None, scenario: Path | None = None) -> None:
    out = out or sys.stdout
    memory = check_memory(plan, rig)
    device = check_backend(backend, rig) if backend else None
    simulated = check_scenario(scenario, rig) if backend == "simulated" else []
    pts = plan.points()
    basis = plan.amplitude.basis
    print(f"plan {plan.source_path}: {plan.name}", file=out)
    print(f"rig  {rig.source_path}: {rig.name}", file=out)
    cal = _calibration_line(rig)
    if cal:
        print(cal, file=out)
    print(f"{len(pts)} points, amplitude |u'|/u_mean at the reference plane ({basis}), "
          f"{plan.order.major}-major:", file=out)
    for p in pts:
        print(f"  {p.index + 1:>4}  {p.freq_hz:9.2f} Hz  a = {p.amplitude_ratio:.4f} {basis}", file=out)
    est = plan.estimated_duration_s(ramp_time_s=rig.drive.ramp_time)
    print(f"estimated duration: {est / 60:.1f} min ({est:.0f} s, {plan.timing.record:g} s records)", file=out)
    print(f"settle: {plan.timing.describe_settle()}"
          + ("; the estimate uses the fallback" if plan.timing.settle_auto else ""), file=out)
    if plan.tuning.prior:
        age = prior_age_s(plan)
        print("earlier table ([tuning] prior): " + ("of unknown age ([prescan] table_measured not given): not "
              "counted fresh" if age is None else f"{age:.0f} s old, fresh up to {plan.prescan.table_fresh:g} s"),
              file=out)
    for line in simulated:
        print(line, file=out)
    print(f"memory: {memory}", file=out)
    if device:
        print(f"sample rate: {device}", file=out)
    print("checks:", file=out)
    for line in plan.describe_checks(rig):
        print(f"  - {line}", file=out)


def _calibration_line(rig: Any) -> str:
    """What the dry run says of the pressure sensors' relative calibration."""
    if getattr(rig, "pressure_calibration", None):
        from ..calibration_file import resolve

        pts = rig.pressure_sensors[0].calibration
        band = f", {min(p.frequency for p in pts):g}-{max(p.frequency for p in pts):g} Hz" if pts else ""
        return f"calibration {resolve(rig)} (relative calibration of the pressure sensors{band})"
    if any(s.calibration for s in rig.pressure_sensors):
        return "calibration: per-sensor tables in the rig file"
    return "calibration: none (the sensors' nominal sensitivities; see 'flamebode calibrate')"


def commissioning_notes(rig_path: Path, rig: object, max_age_days: float = 30.0) -> list[str]:
    """What the rig's commissioning record says is missing or old (app.commissioning_record), or
    why it cannot be read; said before forcing on real hardware, never a reason to refuse."""
    from ..calibration_file import rig_identity
    from ..commissioning_record import age_notes, read_record, record_path_for
    from ..errors import FlamebodeError

    try:
        identity = rig_identity(rig) if hasattr(rig, "pressure_sensors") else ""   # type: ignore[arg-type]
        return age_notes(read_record(record_path_for(rig_path), getattr(rig, "name", "")), max_age_days,
                         identity=identity)
    except FlamebodeError as exc:
        return [f"the commissioning record cannot be read: {exc}"]


REAL_HARDWARE_CAUTION = ("caution: real hardware. Forcing is loud: hearing protection on. The ceiling protects the "
                         "speakers only if set from their ratings. Flame, fuel and photomultiplier high voltage "
                         "stay live: flamebode zeroes only the drive. Your lab's checklist and rules come first "
                         "(this command asks for no checklist).")


def run(args: argparse.Namespace) -> int:
    from ..plan import load_plan
    from ..rig import load_rig

    plan_path = Path(args.plan)
    rig_path = _rig_path(args, plan_path)
    rig = load_rig(rig_path)
    plan = load_plan(plan_path, rig)
    plan, said = with_overrides(plan, args)
    if said:
        plan.check_against(rig)
    args.overrides = said
    scenario = Path(args.scenario) if args.scenario else (plan.resolve("scenario") if args.backend == "simulated"
                                                          else None)
    if args.dry_run:
        if said:
            print(f"command line: {' '.join(said)} (over the plan's sections)")
        dry_run(plan, rig, backend=args.backend, scenario=scenario)
        return 0
    check_memory(plan, rig)
    return _run_sweep(args, plan, rig, plan_path, rig_path, scenario)


def _run_sweep(args: argparse.Namespace, plan: Any, rig: Any, plan_path: Path, rig_path: Path,
               scenario: Path | None) -> int:
    from ..engine.events import EventBus
    from ..engine.progress import ProgressDisplay
    from ..engine.sweep import SweepEngine
    from .running import StoppedBySignal, open_device, run_engine

    bus = EventBus()
    if not args.backend.startswith("simulated"):
        print(REAL_HARDWARE_CAUTION, file=sys.stderr)
        for note in commissioning_notes(rig_path, rig):
            print(f"commissioning: {note}", file=sys.stderr)
    device = open_device(args.backend, rig, scenario, args.fast, args.seed)
    writer = None
    if args.out:
        from ..storage.writer import RunWriter

        writer = RunWriter(args.out, rig_path, plan_path, bus, scenario_path=scenario,
                           options={"backend": args.backend, "fast": "1" if args.fast else "0",
                                    "sweep_options": " ".join(getattr(args, "overrides", ()) or ()) or "none",
                                    "settle_rule": plan.timing.describe_settle()})
        writer.start()
        bus.subscribe(writer)
    else:
        print("no --out RUN_DIR given: nothing will be stored", file=sys.stderr)
    display = ProgressDisplay(estimated_s=plan.estimated_duration_s(ramp_time_s=rig.drive.ramp_time))
    bus.subscribe(display)
    engine = SweepEngine(plan, rig, device, bus, backend_name=args.backend,
                         run_label=time.strftime("s%Y%m%d-%H%M%S"), wait_for_store=writer is not None,
                         prior_age_s=prior_age_s(plan))

    def close_writer() -> None:
        try:                      # what settle = "auto" used, once the pre-scan has told it
            if engine.auto_settle is not None:
                writer.note({"settle_used": engine.auto_settle.summary()})
        finally:
            writer.close()
    display.start()
    try:
        run_engine(engine, device, (display.close,) + ((close_writer,) if writer is not None else ()))
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
    kept, total = engine.stats.settled, len(engine.points)
    if kept == 0 and total > 0:
        print(f"no point was kept (0 of {total}): every point failed or was skipped; see the faults above",
              file=sys.stderr)
        return 1
    return 0 if engine.finish_reason == "complete" else 1
