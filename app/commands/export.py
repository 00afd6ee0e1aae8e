"""``flamebode export RUN_DIR [--out DIR]``: CSV, JSON summary and gain/phase plots.

Uses each point's accepted attempt (the acceptance rule, or a person's choice) and its newest
analysis, and names it in every file (``used``: point/attempt, e.g. ``7/2``); phases in degrees,
unwrapped along frequency per forcing amplitude (app.core.phase). Must not import Qt.
"""

from __future__ import annotations

import argparse


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder written by 'flamebode sweep'")
    p.add_argument("--out", default=None, help="output folder (default: RUN_DIR/export)")
    p.add_argument("--no-plots", action="store_true", help="write only the CSV and the JSON summary")


def run(args: argparse.Namespace) -> int:
    from ..storage import index
    from ..storage.export import export_run

    from ..storage.export import counts, describe_counts, point_rows
    from ..storage.reader import open_run

    index.require_run_folder(args.run_dir)
    for path in export_run(args.run_dir, args.out, plots=not args.no_plots):
        print(f"wrote {path}")
    print(describe_counts(counts(point_rows(open_run(args.run_dir, verify=False)))))   # what the files hold
    return 0
