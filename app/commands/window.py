"""``flamebode window [--rig R] [--plan P] [--run RUN_DIR]``: the desktop window.

Opens on the simulated burner (clearly marked) with the demo rig and plan unless told
otherwise; ``--run`` opens a stored run for review. ``flamebode`` with no arguments comes
here with ``--first-run``: the window when a display is available, else the headless demo
sweep (demo plan and rig, fast, into ./runs/<timestamp>) and where it was stored.

Qt is imported only inside :func:`run` (through ``app.ui.app``), never at module level.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from ..errors import FlamebodeError

ROOT = Path(__file__).resolve().parents[2]
DEMO_RIG = ROOT / "configs" / "demo-rig.toml"
DEMO_PLAN = ROOT / "configs" / "demo-ftf-plan.toml"


class NoDisplay(FlamebodeError):
    """A window was asked for where none can be shown."""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--rig", help="rig file to open (default: configs/demo-rig.toml)")
    p.add_argument("--plan", help="plan file to open (default: configs/demo-ftf-plan.toml)")
    p.add_argument("--run", metavar="RUN_DIR", help="open a stored run for review")
    p.add_argument("--runs-root", default="runs", help="where new runs are stored (default: ./runs)")
    p.add_argument("--backend", default="simulated", help="back-end to select (default: simulated)")
    p.add_argument("--fast", action="store_true", help="simulator only: run faster than real time")
    p.add_argument("--first-run", action="store_true", help=argparse.SUPPRESS)
    # press Start once the window runs (tests, scripted rehearsals); same refusals as the button
    p.add_argument("--start", action="store_true", help=argparse.SUPPRESS)


def have_display() -> bool:
    """A window can be shown: an X or Wayland display, or an explicit Qt platform."""
    import os

    return any(os.environ.get(k) for k in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM"))


def headless_demo(runs_root: str | Path = "runs") -> int:
    """The demo sweep on the simulated burner, stored in runs_root/<timestamp>."""
    from ..cli import main as cli_main

    out = Path(runs_root) / time.strftime("%Y%m%d-%H%M%S")
    print("flamebode: no display here, so running the demo sweep headless on the simulated burner "
          "(no hardware is driven).")
    code = cli_main(["sweep", str(DEMO_PLAN), "--rig", str(DEMO_RIG), "--fast", "--out", str(out)])
    print(f"flamebode: the demo run is in {out}\n"
          f"  list its points:  flamebode review {out}\n"
          f"  export it:        flamebode export {out}\n"
          f"  see it:           flamebode window --run {out}   (needs a display)")
    return code


def run(args: argparse.Namespace) -> int:
    if not have_display():
        if args.first_run:
            return headless_demo(args.runs_root)
        raise NoDisplay("no display: set DISPLAY (X11) or WAYLAND_DISPLAY, or QT_QPA_PLATFORM=offscreen; "
                        "for a headless sweep use 'flamebode sweep PLAN'")
    try:
        from ..ui.app import run_window
    except ImportError as exc:   # Qt's runtime libraries are missing (e.g. libEGL.so.1)
        message = (f"the window cannot start: {exc}. On Debian/Ubuntu install Qt's runtime libraries "
                   "(apt-get install libegl1 libgl1 libfontconfig1 libxkbcommon0 libxkbcommon-x11-0 "
                   "libxcb-cursor0 libdbus-1-3)")
        if args.first_run:
            print(f"flamebode: {message}")
            return headless_demo(args.runs_root)
        raise NoDisplay(message) from None
    return run_window(args.rig or DEMO_RIG, args.plan or DEMO_PLAN, run_dir=args.run, runs_root=args.runs_root,
                      fast=args.fast, backend=args.backend, start=args.start)
