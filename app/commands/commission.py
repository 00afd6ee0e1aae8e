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

Nothing here forces the flow: the drive is never asked for anything but zero. This module only
parses options, prints the cautions and the results and holds the stop signals around a
recording; every check is ``app.services.commissioning``, which the window calls too (one
operation, one place). Must not import Qt.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from ..services import commissioning as svc

ACTIONS = ("dark", "light-step", "linearity", "lamp", "uniformity", "hot-wire", "status")


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
    target = svc.open_target(args.rig, args.commissioning_record)   # a broken record is named before anything
    if args.action in ("dark", "light-step", "lamp"):
        svc.parse_duration(args.duration)         # a bad option is named before any caution or recording
    action = {"dark": _dark, "light-step": _light_step, "lamp": _lamp, "linearity": _linearity,
              "uniformity": _uniformity, "hot-wire": _hot_wire, "status": _status}[args.action]
    return action(args, target)


def _source(args: argparse.Namespace) -> svc.Source:
    return svc.Source(backend=args.backend, scenario=Path(args.scenario) if args.scenario else None, fast=args.fast,
                      seed=args.seed, duration_s=svc.parse_duration(args.duration))


class _HaltAndStop:
    """What the stop signals halt: the device's outputs at once, and the recording at its next block."""

    def __init__(self, device: Any, stop: svc.StopRequest) -> None:
        self.device, self.stop = device, stop

    def halt(self, why: str = "halted") -> None:
        self.stop.set(why)
        halt = getattr(self.device, "halt", None)
        if callable(halt):
            halt()


def _recording(action: str) -> dict[str, Any]:
    """The caution on stderr and the stop signals held around a recording (SIGINT, SIGTERM, SIGHUP)."""
    from .running import StopSignals

    print(svc.CAUTIONS[action], file=sys.stderr)
    stop = svc.StopRequest()
    return {"stop": stop, "watch": lambda device: StopSignals(_HaltAndStop(device, stop))}


def _say(outcome: Any) -> int:
    for line in outcome.lines:
        print(line)
    return 0


def _dark(args: argparse.Namespace, target: svc.Target) -> int:
    source = _source(args)
    return _say(svc.measure_dark(target, source, update_rig=args.update_rig, **_recording("dark")))


def _light_step(args: argparse.Namespace, target: svc.Target) -> int:
    power = svc.parse_power(args.power)
    source = _source(args)
    return _say(svc.measure_light_step(target, source, power, **_recording("light-step")))


def _lamp(args: argparse.Namespace, target: svc.Target) -> int:
    position = svc.parse_position(args.position)
    source = _source(args)
    return _say(svc.measure_lamp(target, source, position, **_recording("lamp")))


def _linearity(args: argparse.Namespace, target: svc.Target) -> int:
    return _say(svc.fit_linearity(target, args.backend,
                                  hint="with 'flamebode commission light-step RIG --power P'"))


def _uniformity(args: argparse.Namespace, target: svc.Target) -> int:
    return _say(svc.summarise_uniformity(target, args.backend,
                                         hint="with 'flamebode commission lamp RIG --position LABEL'"))


def _hot_wire(args: argparse.Namespace, target: svc.Target) -> int:
    return _say(svc.fit_hot_wire(target, args.table, args.backend))


def _status(args: argparse.Namespace, target: svc.Target) -> int:
    for line in svc.status(target, args.max_age).lines:
        print(line)
    return 0
