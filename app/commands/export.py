"""``flamebode export RUN_DIR [--out DIR] [--convention plus|minus]``: CSV, JSON summary, the points
as .mat and HDF5 for network-model codes, and gain/phase plots.

Uses each point's accepted attempt (the acceptance rule, or a person's choice) and its newest
analysis, and names it in every file (``used``: point/attempt, e.g. ``7/2``); phases in degrees,
unwrapped along frequency per forcing amplitude (app.core.phase). The files are written by
``app.services.export.export``, as the window's Export button. Must not import Qt.
"""

from __future__ import annotations

import argparse
from pathlib import Path


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder written by 'flamebode sweep'")
    p.add_argument("--out", default=None, help="output folder (default: RUN_DIR/export)")
    p.add_argument("--no-plots", action="store_true", help="no plots: the CSV, JSON, .mat and HDF5 files only")
    p.add_argument("--convention", choices=("plus", "minus"), default="plus",
                   help="time convention of points.mat/points.h5: plus = e^{+iwt} (flamebode's), minus = e^{-iwt} "
                        "(conjugated, for codes written that way)")


def run(args: argparse.Namespace) -> int:
    from ..services.export import export
    from ..services.types import ExportRequest

    result = export(ExportRequest(run_dir=Path(args.run_dir), out_dir=Path(args.out) if args.out else None,
                                  plots=not args.no_plots, convention=args.convention))
    for path in result.paths:
        print(f"wrote {path}")
    print(result.counts_text)        # what the files hold
    return 0
