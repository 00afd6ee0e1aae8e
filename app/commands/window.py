"""``flamebode window [--rig R] [--plan P] [--run RUN_DIR]``: the desktop window.

Opens on the simulated burner (clearly marked) with the demo rig and plan unless told
otherwise; ``--run`` opens a stored run for review. ``flamebode`` with no arguments comes
here with ``--first-run``: the window when a display is available, else the headless demo
sweep (demo plan and rig, fast, into ./runs/<timestamp>) and where it was stored.

Before Qt creates its application, a child process checks that it can (``app.ui.preflight``):
Qt aborts the whole process (exit 134) when its platform plugin cannot load its libraries
or reach the display. The check runs while the window code is being imported. When the
window cannot start, the message names what is missing (libraries and the apt packages that
provide them, or the display) and the first-run path falls back to the headless demo.

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
    p.add_argument("--backend", default=None,
                   help="back-end to select (default: the one used last time if available, else simulated)")
    p.add_argument("--fast", action="store_true", default=None,
                   help="simulator only: run faster than real time (default: as last time)")
    p.add_argument("--first-run", action="store_true", help=argparse.SUPPRESS)
    # press Start once the window runs (tests, scripted rehearsals); same refusals as the button
    p.add_argument("--start", action="store_true", help=argparse.SUPPRESS)


def have_display() -> bool:
    """A window can be shown: an X or Wayland display, or an explicit Qt platform."""
    import os

    return any(os.environ.get(k) for k in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM"))


def headless_demo(runs_root: str | Path = "runs", why: str = "no display here") -> int:
    """The demo sweep on the simulated burner, stored in runs_root/<timestamp>."""
    from ..cli import main as cli_main

    out = Path(runs_root) / time.strftime("%Y%m%d-%H%M%S")
    print(f"flamebode: {why}, so running the demo sweep headless on the simulated burner "
          "(no hardware is driven).")
    code = cli_main(["sweep", str(DEMO_PLAN), "--rig", str(DEMO_RIG), "--fast", "--out", str(out)])
    print(f"flamebode: the demo run is in {out}\n"
          f"  list its points:  flamebode review {out}\n"
          f"  export it:        flamebode export {out}\n"
          f"  see it:           flamebode window --run {out}   (needs a display)")
    return code


def cannot_start(args: argparse.Namespace, message: str) -> int:
    """The window cannot start: the first run falls back to the headless demo, else a plain error."""
    if args.first_run:
        print(f"flamebode: {message}", flush=True)
        return headless_demo(args.runs_root, why="the window cannot start here")
    raise NoDisplay(message)


def import_error_message(exc: ImportError) -> str:
    from ..ui.preflight import missing_from_output, package_for

    missing = missing_from_output(str(exc))
    packages = [p for p in (package_for(lib) for lib in missing) if p]
    hint = (f"On Debian/Ubuntu: sudo apt-get install {' '.join(dict.fromkeys(packages))}" if packages else
            "See the README for Qt's runtime libraries")
    return f"the window cannot start: {exc}. {hint}"


def run(args: argparse.Namespace) -> int:
    if not have_display():
        if args.first_run:
            return headless_demo(args.runs_root)
        raise NoDisplay("no display: set DISPLAY (X11) or WAYLAND_DISPLAY, or QT_QPA_PLATFORM=offscreen; "
                        "for a headless sweep use 'flamebode sweep PLAN'")
    from ..ui import app as ui_app          # Qt-free until load_window_code()
    from ..ui.preflight import Probe

    probe = None if ui_app.application_exists() else Probe()   # runs during the imports below
    import_error: ImportError | None = None
    try:
        ui_app.load_window_code()
    except ImportError as exc:   # e.g. libEGL.so.1 missing: PySide6 itself cannot load
        import_error = exc
    verdict = probe.verdict() if probe is not None else None
    if verdict is not None and not verdict.ok:
        return cannot_start(args, verdict.message())
    if import_error is not None:
        return cannot_start(args, import_error_message(import_error))
    return ui_app.run_window(args.rig or DEMO_RIG, args.plan or DEMO_PLAN, run_dir=args.run,
                             runs_root=args.runs_root, fast=args.fast, backend=args.backend, start=args.start)
