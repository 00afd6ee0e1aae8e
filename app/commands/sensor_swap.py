"""``flamebode calibrate RIG --method sensor-swap``: relative calibration in the duct by swapping.

The sensors stay in the duct at their positions. A first stepped-sine pass records them as
mounted; then, for each sensor other than the reference, the operator exchanges it with the
reference sensor (each keeps its cable and channel) and a pass records again; the core turns the
pairs of transfers into factors (app.core.sensor_swap, Chung & Blaser 1980). On real hardware
the tool waits for Enter before each swapped pass, with the drive at zero; on the simulated
burner the swap is made for the operator (the rig with the two positions exchanged, the
sensors' true errors staying with their channels). The file, the commissioning note and the
stop paths are those of the common-plane method (app.commands.calibrate).

Imports: the core's calibration, the driver registry (lazily) and app.commands.calibrate. Never Qt.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from .calibrate import CalibrateCommandError, coherence_text, drift_since_last, drive_pass, finish


def swapped_rig(rig: Any, a: str, b: str) -> Any:
    """``rig`` with the axial positions of pressure sensors ``a`` and ``b`` exchanged."""
    pos = {s.channel: s.position for s in rig.pressure_sensors}
    sensors = [s.model_copy(update={"position": pos[b] if s.channel == a else pos[a] if s.channel == b
                                    else s.position}) for s in rig.pressure_sensors]
    return rig.model_copy(update={"pressure_sensors": tuple(sensors)})


def _open(args: argparse.Namespace, rig: Any) -> Any:
    from drivers.registry import open_backend

    if args.backend == "simulated":
        return open_backend("simulated", rig, scenario=args.scenario, real_time=not args.fast, seed=args.seed)
    return open_backend(args.backend, rig)


def _wait_for_swap(args: argparse.Namespace, reference: str, other: str, undo: str | None) -> None:
    if args.backend == "simulated":
        print(f"(simulated) {undo + ' back, then ' if undo else ''}{other} and {reference} exchanged", flush=True)
        return
    what = (f"put {undo} back in its place, then " if undo else "") + f"exchange the sensors on {reference} and {other}"
    print(f"the drive is at zero: {what} (each keeps its cable), seal them, then press Enter "
          "(Ctrl-C stops; nothing is written)", flush=True)
    try:
        input()
    except EOFError:
        raise CalibrateCommandError("no answer on the terminal before a swapped pass (stdin closed); nothing "
                                    "written. Run the sensor swap from a terminal") from None


def run_swap(args: argparse.Namespace, rig: Any, reference: str, freqs: list[float], cut_on: float,
             target_pa: float, record_s: float, out: Path) -> int:
    from ..core import calibration as core
    from ..core.sensor_swap import swap_factors
    from .calibrate import _write
    from .holder_run import DriveSettings, HolderRun

    sensors = [s.channel for s in rig.pressure_sensors]
    sens = [s.sensitivity for s in rig.pressure_sensors]
    r = sensors.index(reference)
    others = [n for n in sensors if n != reference]
    settings = DriveSettings(target_pa=target_pa, ceiling_v=rig.drive.ceiling)
    if args.backend != "simulated":
        print("caution: the speaker will be driven loud in the duct (hearing protection), within the rig's drive "
              "ceiling; the flame should be off for a calibration; the laboratory's own rules come first",
              file=sys.stderr)
    print(f"calibrating {len(sensors)} sensors of {rig.name} by swapping each with {reference}: {len(freqs)} "
          f"frequencies {freqs[0]:g}-{freqs[-1]:g} Hz at {target_pa:g} Pa, cut-on {cut_on:.0f} Hz, "
          f"{len(others) + 1} passes")
    phasors: dict[str | None, dict[float, Any]] = {}
    undo = None
    for swapped in [None, *others]:
        if swapped is not None:
            _wait_for_swap(args, reference, swapped, undo)
            undo = swapped
        layout = rig if swapped is None or args.backend != "simulated" else swapped_rig(rig, reference, swapped)
        device = _open(args, layout)
        holder = HolderRun(device, sensors, sens, reference, settings, record_s, rig.acquisition.block_duration)
        got: dict[float, Any] = {}

        def on_record(rec: Any, got: dict = got, device: Any = device) -> None:
            got[rec.freq_hz] = core.segment_phasors(rec.pressures, device.sample_rate_hz, rec.freq_hz, args.segments)
            print(f"  {'as mounted' if swapped is None else reference + '<->' + swapped:>12s} {rec.freq_hz:8.1f} Hz  "
                  f"drive {rec.drive_v * 1e3:8.2f} mV  {rec.pressure_pa:7.2f} Pa", flush=True)

        drive_pass(holder, device, freqs, on_record, out)
        phasors[swapped] = got
    if args.backend != "simulated" and undo:
        print(f"put {undo} back in its place before measuring", flush=True)
    points = []
    for f in freqs:
        q = swap_factors(phasors[None][f], {sensors.index(o): phasors[o][f] for o in others}, r, f)
        points.append(q)
    cal = core.assemble(points, sensors, reference, method="sensor-swap")
    worst = float(cal.coherence[:, [sensors.index(o) for o in others]].min())
    print(f"lowest {coherence_text(worst)}; largest u(gain) {cal.u_gain_rel.max() * 100:.3f} %")
    drifted = drift_since_last(args, cal)
    written = _write(out, cal, rig, args, target_pa, record_s, cut_on, None)
    return finish(args, rig, written, reference, freqs, None, drifted)
