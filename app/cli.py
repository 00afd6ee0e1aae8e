"""Command line: ``flamebode <command>``; every user error becomes a plain message.

Each command lives in its own module under ``app.commands`` and is imported only when
run, so ``flamebode --help`` stays fast and a missing optional library breaks only the
command that needs it. Must not import Qt at module level.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from . import __version__
from .errors import FlamebodeError

# command name -> (module under app.commands, one-line help)
COMMANDS: dict[str, tuple[str, str]] = {
    "sweep": ("sweep", "run a sweep plan headless (or --dry-run to print its points and checks)"),
    "reprocess": ("reprocess", "compute an FTF point from one recorded file (HDF5 or CSV)"),
    "review": ("review", "list a run's points, attempts, decisions and quality flags"),
    "accept": ("accept", "accept or reject attempts of a run (exports use the accepted attempt)"),
    "export": ("export", "write a run's points as CSV, JSON, .mat and HDF5 and gain/phase plots"),
    "reprocess-run": ("reprocess_run", "recompute a run's points from their raw records with a changed rig file"),
    "resume": ("resume", "continue an interrupted sweep from its first point without an accepted attempt"),
    "reacquire": ("reacquire", "measure chosen or flagged points of a run again (new attempts, old ones kept)"),
    "runs": ("runs", "list the run folders under a folder with their metadata"),
    "compare": ("compare", "draw several runs' gain and phase on one figure"),
    "report": ("report", "write a run's report (PDF and PNG pages): rig, curves, points, fits, quality"),
    "fit": ("fit", "fit flame models (n-tau, conical, Gaussian delays, rational) to runs' points, with intervals"),
    "calibrate": ("calibrate", "relative calibration of the pressure sensors in a holder (writes a calibration file)"),
    "commission": ("commission", "commissioning checks: dark offset, light-chain linearity and uniformity, hot-wire, "
                                 "status"),
    "backends": ("backends", "list hardware back-ends and whether they can be used here"),
    "window": ("window", "open the desktop window (the simulated burner unless told otherwise)"),
}


def seed_type(text: str) -> int:
    """A simulator seed: a whole number from 0 (what numpy's generators take)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if not 0 <= value < 2 ** 63:
        raise argparse.ArgumentTypeError(f"{value} is outside 0 to 2**63 - 1")
    return value


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="flamebode", description=(
        "Flame transfer and describing function sweeps: tune the drive under a voltage ceiling, "
        "record, and compute gain and phase at the reference plane."))
    parser.add_argument("--version", action="version", version=f"flamebode {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (module, help_text) in COMMANDS.items():
        mod = importlib.import_module(f"app.commands.{module}")
        p = sub.add_parser(name, help=help_text, description=help_text)
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    argv = sys.argv[1:] if argv is None else argv
    if not argv:   # a newcomer's first command: the window on the simulator, or a headless demo
        argv = ["window", "--first-run"]
    args = parser.parse_args(argv)
    if getattr(args, "_run", None) is None:
        parser.print_help()
        return 0
    try:
        code = int(args._run(args) or 0)
        sys.stdout.flush()         # a closed pipe shows here, not at interpreter exit
        return code
    except BrokenPipeError:
        return _pipe_closed()
    except FlamebodeError as exc:
        print(f"flamebode {args.command}: {exc}", file=sys.stderr)
        return int(getattr(exc, "exit_code", 2))
    except KeyboardInterrupt:
        print(f"flamebode {args.command}: interrupted", file=sys.stderr)
        return 130


def _pipe_closed() -> int:
    """The reader of our output went away (``flamebode review RUN | head -1``): stop quietly.

    Python's own advice for SIGPIPE: point stdout at devnull so the flush at exit cannot
    fail again, and exit as a process killed by SIGPIPE would (128 + 13)."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass
    return EXIT_PIPE_CLOSED


EXIT_PIPE_CLOSED = 141


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
