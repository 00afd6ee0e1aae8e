"""``flamebode report RUN [--out FILE.pdf]``: the run's report (PDF, and a PNG of each page).

Rig and calibration used, how the run was made and ended, the response with intervals
(flagged points hollow), the point table, the fitted flame model, the amplitude dependence
and a quality summary (through ``app.services.export.write_report``). Default: RUN/export/report.pdf.
Must not import Qt.
"""

from __future__ import annotations

import argparse
import sys


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder written by 'flamebode sweep'")
    p.add_argument("--out", help="PDF to write (default: RUN/export/report.pdf)")


def run(args: argparse.Namespace) -> int:
    from ..services.export import write_report
    from ..services.runs import opening_problems

    for problem in opening_problems(args.run_dir):
        print(f"flamebode report: problem: {problem} (also on the report's first page)", file=sys.stderr)
    written = write_report(args.run_dir, args.out)
    print("wrote " + ", ".join(str(p) for p in written))
    return 0
