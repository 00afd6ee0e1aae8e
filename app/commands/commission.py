"""``flamebode commission ACTION RIG``: commissioning checks of a rig's light chain and hot-wire,
kept in the rig's commissioning record (app.commissioning_record, docs/commissioning.md).

Actions:

* ``dark``: records the light channel with the drive at zero and the flame off, and stores its
  offset, noise and the offset's standard uncertainty; with ``--update-rig`` also writes them,
  dated, into the rig file's ``[light]`` table (``dark_offset``, ``dark_offset_uncertainty``),
  where every sweep reads them.
* ``light-step --power P``: records the mean light at the thermal power the operator has set
  (flame lit, drive at zero); ``linearity`` fits proportionality through the dark-corrected origin
  over the steps since the newest dark offset and stores the deviation.
* ``lamp --position LABEL``: records the response to a small lamp at one position in the flame
  region; ``uniformity`` reports the spread over the positions since the newest dark offset.
* ``hot-wire --table FILE.csv``: fits King's law to a calibration table (``voltage_v``,
  ``velocity_m_s``) and stores it with its residual.
* ``status``: what was checked when, and what is missing or older than ``--max-age``.

Nothing here forces the flow: the drive is never asked for anything but zero. The estimates
are ``app.core.commissioning``. Must not import Qt.
"""

from __future__ import annotations

import argparse
import csv
import math
import re
import sys
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import FlamebodeError

ACTIONS = ("dark", "light-step", "linearity", "lamp", "uniformity", "hot-wire", "status")


class CommissionError(FlamebodeError):
    """The commissioning command cannot run as asked; the message names the option or file."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("action", choices=ACTIONS, help="what to check (see 'flamebode commission --help')")
    p.add_argument("rig", help="rig file (TOML), see docs/rig-file.md")
    p.add_argument("--commissioning-record", metavar="FILE", help="commissioning record (default: beside the rig file, "
                                                    "RIG.commissioning.toml)")
    p.add_argument("--duration", default="5 s", help="dark, light-step, lamp: recording length with its unit "
                                                     "(default 5 s)")
    p.add_argument("--power", help="light-step: the thermal power now burning, with its unit (e.g. \"4 kW\")")
    p.add_argument("--position", help="lamp: where the lamp is (a label, e.g. \"r=10 mm z=20 mm\")")
    p.add_argument("--table", help="hot-wire: CSV with columns voltage_v and velocity_m_s")
    p.add_argument("--update-rig", action="store_true", help="dark: write the offset into the rig file's [light]")
    p.add_argument("--max-age", type=float, default=30.0, help="status: days after which a check is old (30)")
    p.add_argument("--backend", default="simulated", help="back-end name (default: simulated)")
    p.add_argument("--scenario", help="simulated burner scenario (default: the demo's for the demo rig)")
    p.add_argument("--fast", action="store_true", help="simulator only: run as fast as the CPU allows")
    p.add_argument("--seed", type=int, default=None, help="simulator only: random seed (0 or more)")


def run(args: argparse.Namespace) -> int:
    from ..commissioning_record import read_record, record_path_for
    from ..rig import load_rig

    rig = load_rig(args.rig)
    path = Path(args.commissioning_record) if args.commissioning_record else record_path_for(args.rig)
    record = read_record(path, rig.name)          # a broken record is named before anything is recorded
    if args.action in ("dark", "light-step", "lamp"):
        _duration(args.duration)                  # a bad option is named before any caution or recording
    action = {"dark": _dark, "light-step": _light_step, "lamp": _lamp, "linearity": _linearity,
              "uniformity": _uniformity, "hot-wire": _hot_wire, "status": _status}[args.action]
    return action(args, rig, record)


# ----------------------------------------------------------------------------- recording
def _duration(text: str) -> float:
    from ..units import parse_quantity

    try:
        value = parse_quantity(text, "time", unit_required=True)
    except (ValueError, TypeError) as exc:
        raise CommissionError(f"--duration {text!r}: {exc}") from None
    if not 0.2 <= value <= 600.0:
        raise CommissionError(f"--duration {text!r}: must be from 0.2 s to 600 s")
    return value


def _record_light(args: argparse.Namespace, rig: Any, flame: bool, **simulated: Any) -> np.ndarray:
    """The light channel's samples (volts) over ``--duration`` with the drive at zero; ``simulated``:
    options for the simulated burner only (``thermal_power`` in W, ``lamp_position``)."""
    from drivers.registry import close_backend, open_backend

    duration = _duration(args.duration)
    if args.backend == "simulated":
        # the simulated rig: flame lit or not (its holder mode has no flame), burning at the stated
        # power, or with the lamp at the stated position
        device = open_backend("simulated", rig, scenario=args.scenario, real_time=not args.fast, seed=args.seed,
                              holder=not flame, **simulated)
    else:
        device = open_backend(args.backend, rig)
    from .running import StopSignals

    samples: list[np.ndarray] = []
    with StopSignals(device) as stops:
        try:
            device.start()
            got = 0.0
            while got < duration and stops.received is None:
                block = device.read_block()
                samples.append(np.asarray(block.channel(rig.light.channel), dtype=float))
                got += block.duration_s
        finally:
            close_backend(device)
    if stops.received is not None:
        import signal

        raise CommissionError(f"{signal.Signals(stops.received).name} received: stopped, nothing recorded")
    return np.concatenate(samples)


def _identity(rig: Any) -> str:
    from ..calibration_file import rig_identity

    return rig_identity(rig)


def _append(record: Any, rig: Any, args: argparse.Namespace, kind: str, result: dict[str, Any]) -> Any:
    from ..commissioning_record import Check, append_check, now_utc

    new = append_check(record.path, rig.name, Check(kind, now_utc(), args.backend, _identity(rig), result))
    print(f"commissioning record: {new.path} ({kind} stored)")
    return new


def _dark(args: argparse.Namespace, rig: Any, record: Any) -> int:
    from ..core.commissioning import dark_offset

    print("caution: the flame must be off and the photomultiplier's high voltage set as for a run; the drive "
          "stays at zero. The laboratory's own rules come first.", file=sys.stderr)
    d = dark_offset(_record_light(args, rig, flame=False))
    print(f"dark offset {d.mean_v * 1e3:.6g} mV ± {d.u_mean_v * 1e3:.3g} mV (standard uncertainty), noise "
          f"{d.noise_rms_v * 1e3:.3g} mV rms over {d.n_samples} samples")
    was = rig.light.dark_offset
    if abs(d.mean_v - was) > 4 * math.hypot(d.u_mean_v, rig.light.dark_offset_uncertainty):
        print(f"note: the rig file states {was * 1e3:.4g} mV ± {rig.light.dark_offset_uncertainty * 1e3:.2g} mV; "
              "the measured offset differs by more than 4 standard uncertainties")
    new = _append(record, rig, args, "dark-offset",
                  {"mean_v": d.mean_v, "u_mean_v": d.u_mean_v, "noise_rms_v": d.noise_rms_v,
                   "n_samples": d.n_samples})
    if args.update_rig:
        written = update_rig_dark_offset(Path(args.rig), d.mean_v, d.u_mean_v, new.checks[-1].date)
        print(f"rig file updated: {written} ([light] dark_offset and dark_offset_uncertainty)")
    return 0


def _power(text: str | None) -> float:
    from ..units import parse_quantity

    if not text:
        raise CommissionError("light-step needs --power, the thermal power now burning (e.g. --power \"4 kW\")")
    try:
        value = parse_quantity(text, "power", unit_required=True)
    except (ValueError, TypeError) as exc:
        raise CommissionError(f"--power {text!r}: {exc}") from None
    if not 0.0 < value <= 1e7:
        raise CommissionError(f"--power {text!r}: must be more than 0 W and at most 10 MW")
    return value


def _light_step(args: argparse.Namespace, rig: Any, record: Any) -> int:
    from ..core.commissioning import dark_offset

    power = _power(args.power)
    print("caution: a lit flame; keep to the rig's operating envelope and the laboratory's rules. The drive stays "
          "at zero.", file=sys.stderr)
    d = dark_offset(_record_light(args, rig, flame=True, thermal_power=power))   # mean and its uncertainty
    print(f"light at {power / 1e3:g} kW: {d.mean_v * 1e3:.5g} mV ± {d.u_mean_v * 1e3:.2g} mV")
    _append(record, rig, args, "light-step", {"power_w": power, "mean_v": d.mean_v, "u_mean_v": d.u_mean_v})
    return 0


def _lamp(args: argparse.Namespace, rig: Any, record: Any) -> int:
    from ..core.commissioning import dark_offset

    if not args.position:
        raise CommissionError("lamp needs --position, a label for where the lamp is (e.g. --position \"r=0 z=10 mm\")")
    print("caution: flame off; the lamp in the flame region only with the burner cold and the fuel shut.",
          file=sys.stderr)
    d = dark_offset(_record_light(args, rig, flame=False, lamp_position=args.position))
    print(f"lamp at {args.position}: {d.mean_v * 1e3:.5g} mV ± {d.u_mean_v * 1e3:.2g} mV")
    _append(record, rig, args, "light-uniformity",
            {"stage": "position", "position": args.position, "mean_v": d.mean_v, "u_mean_v": d.u_mean_v})
    return 0


def _dark_in_force(record: Any, rig: Any) -> tuple[float, float, str]:
    dark = record.latest("dark-offset")
    if dark is None:
        return rig.light.dark_offset, rig.light.dark_offset_uncertainty, ""
    return float(dark.result["mean_v"]), float(dark.result["u_mean_v"]), dark.date


def _linearity(args: argparse.Namespace, rig: Any, record: Any) -> int:
    from ..core.commissioning import light_linearity

    dark_v, u_dark, since = _dark_in_force(record, rig)
    steps = record.since("light-step", since) if since else [c for c in record.checks if c.kind == "light-step"]
    if len(steps) < 3:
        raise CommissionError(f"{record.path}: {len(steps)} light step(s) since the newest dark offset; record at "
                              "least 3 with 'flamebode commission light-step RIG --power P' at different powers")
    P = np.array([float(s.result["power_w"]) for s in steps])
    L = np.array([float(s.result["mean_v"]) for s in steps])
    u = np.array([float(s.result["u_mean_v"]) for s in steps])
    lin = light_linearity(P, L, np.maximum(u, 1e-9), dark_v, u_dark)
    print(f"light-chain linearity over {lin.n_steps} steps {P.min() / 1e3:g}-{P.max() / 1e3:g} kW: "
          f"{lin.slope_v_per_w * 1e6:.4g} mV/kW ± {lin.u_slope_v_per_w * 1e6:.2g} mV/kW; largest deviation from "
          f"proportionality {lin.max_deviation_rel * 100:.2f} % (p = {lin.p_value:.2g})")
    for p, dev in zip(P, lin.deviation_rel):
        print(f"  {p / 1e3:8.3g} kW  {dev * 100:+.2f} %")
    if lin.p_value < 0.01:
        print("note: the light is not proportional to the thermal power within its uncertainty (a saturating "
              "photomultiplier, a wrong dark offset or a changing equivalence ratio): check before using the light "
              "as heat release")
    _append(record, rig, args, "light-linearity",
            {"slope_v_per_w": lin.slope_v_per_w, "u_slope_v_per_w": lin.u_slope_v_per_w,
             "max_deviation_rel": lin.max_deviation_rel, "p_value": lin.p_value, "n_steps": lin.n_steps,
             "power_w": [float(x) for x in P], "deviation_rel": [float(x) for x in lin.deviation_rel]})
    return 0


def _uniformity(args: argparse.Namespace, rig: Any, record: Any) -> int:
    from ..core.commissioning import spatial_uniformity

    dark_v, _u, since = _dark_in_force(record, rig)
    steps = [c for c in record.since("light-uniformity", since or "")
             if c.result.get("stage") == "position"]
    if len(steps) < 2:
        raise CommissionError(f"{record.path}: {len(steps)} lamp position(s) since the newest dark offset; record "
                              "at least 2 with 'flamebode commission lamp RIG --position LABEL'")
    r = np.array([float(s.result["mean_v"]) for s in steps]) - dark_v
    u = spatial_uniformity(r)
    print(f"spatial uniformity over {len(steps)} positions: spread {u.spread_rel * 100:.2f} % (standard deviation "
          f"/ mean); furthest from the mean: {steps[u.worst_index].result['position']} "
          f"({u.max_deviation_rel * 100:+.2f} %)")
    _append(record, rig, args, "light-uniformity",
            {"stage": "summary", "spread_rel": u.spread_rel, "max_deviation_rel": u.max_deviation_rel,
             "worst_position": str(steps[u.worst_index].result["position"]), "n_positions": len(steps)})
    return 0


def _hot_wire(args: argparse.Namespace, rig: Any, record: Any) -> int:
    from ..core.commissioning import kings_law

    if not args.table:
        raise CommissionError("hot-wire needs --table FILE.csv with columns voltage_v and velocity_m_s")
    E, U = read_hot_wire_table(Path(args.table))
    k = kings_law(E, U)
    s = np.sqrt(np.clip(np.diag(k.covariance), 0.0, None))
    print(f"King's law E^2 = A + B U^n over {k.n_points} points: A = {k.a_v2:.5g} ± {1.96 * s[0]:.2g} V^2, "
          f"B = {k.b:.5g} ± {1.96 * s[1]:.2g}, n = {k.n:.4g} ± {1.96 * s[2]:.2g} (95 %); velocity residual "
          f"{k.residual_rms_m_s:.3g} m/s rms")
    _append(record, rig, args, "hot-wire", {"a_v2": k.a_v2, "b": k.b, "n": k.n,
                                             "residual_rms_m_s": k.residual_rms_m_s, "n_points": k.n_points,
                                             "table": str(Path(args.table).resolve())})
    return 0


def read_hot_wire_table(path: Path) -> tuple[np.ndarray, np.ndarray]:
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
    except OSError as exc:
        raise CommissionError(f"--table {path}: cannot be read ({exc.strerror or exc})") from None
    if not rows or not {"voltage_v", "velocity_m_s"} <= set(rows[0]):
        raise CommissionError(f"--table {path}: needs a header with the columns voltage_v and velocity_m_s")
    E, U = [], []
    for line, r in enumerate(rows, start=2):
        try:
            E.append(float(r["voltage_v"]))
            U.append(float(r["velocity_m_s"]))
        except (TypeError, ValueError):
            raise CommissionError(f"--table {path}, line {line}: {r.get('voltage_v')!r}, {r.get('velocity_m_s')!r} "
                                  "are not two numbers") from None
    return np.array(E), np.array(U)


def _status(args: argparse.Namespace, rig: Any, record: Any) -> int:
    from ..commissioning_record import age_notes

    print(f"commissioning record of {rig.name}: {record.path}" + ("" if record.path.exists() else " (none yet)"))
    for kind in ("dark-offset", "light-linearity", "light-uniformity", "hot-wire", "pressure-calibration"):
        c = record.latest(kind)
        print(f"  {kind:22s} {c.date if c else 'never'}")
    if rig.pressure_calibration if hasattr(rig, "pressure_calibration") else False:
        print(f"  the rig names the calibration file {rig.pressure_calibration}")
    notes = age_notes(record, args.max_age)
    for n in notes:
        print(f"  to do: {n}")
    return 0


# ----------------------------------------------------------------------------- the rig file
_LIGHT = re.compile(r"^\s*\[light\]\s*(#.*)?$")
_TABLE = re.compile(r"^\s*\[")


def update_rig_dark_offset(rig_path: Path, mean_v: float, u_v: float, date: str) -> Path:
    """Set ``dark_offset`` and ``dark_offset_uncertainty`` in the rig file's ``[light]`` table,
    keeping every other line and comment; the file is rewritten whole and must load afterwards."""
    from ..outputs import write_whole

    lines = rig_path.read_text(encoding="utf-8").splitlines(keepends=True)
    start = next((i for i, line in enumerate(lines) if _LIGHT.match(line)), None)
    if start is None:
        raise CommissionError(f"{rig_path}: no [light] table to write the dark offset into")
    end = next((i for i in range(start + 1, len(lines)) if _TABLE.match(lines[i])), len(lines))
    values = {"dark_offset": f'"{mean_v * 1e3:.6g} mV"', "dark_offset_uncertainty": f'"{u_v * 1e3:.3g} mV"'}
    note = f"# measured by flamebode commission dark, {date}\n"
    out = lines[: start + 1]
    done = set()
    for line in lines[start + 1:end]:
        key = line.split("=", 1)[0].strip() if "=" in line else ""
        if key in values:
            out.append(f"{key} = {values[key]}    {note}")
            done.add(key)
        else:
            out.append(line)
    for key in values:
        if key not in done:
            out.insert(start + 1 + len(done), f"{key} = {values[key]}    {note}")
            done.add(key)
    out += lines[end:]
    text = "".join(out)

    def write(tmp: Path) -> None:
        tmp.write_text(text, encoding="utf-8")

    import tomllib

    from ..rig import rig_from_dict

    try:                                        # never leave a rig file that does not load: check the new text
        rig_from_dict(tomllib.loads(text), str(rig_path), units_required=True)   # as the rig file itself
    except tomllib.TOMLDecodeError as exc:
        raise CommissionError(f"{rig_path}: the dark offset could not be written in place ({exc}); the rig file "
                              "is left as it was: set [light] dark_offset by hand") from None
    return write_whole(rig_path, write)
