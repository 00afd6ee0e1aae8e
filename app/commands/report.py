"""``flamebode report RUN [--out FILE.pdf]``: the run's report (PDF, and a PNG of each page).

Rig and calibration used, how the run was made and ended, the response with intervals
(flagged points hollow), the point table, the fitted flame model, the amplitude dependence
and a quality summary (``app.storage.report.write_report``). Default: RUN/export/report.pdf.
Must not import Qt.
"""

from __future__ import annotations

import argparse


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder written by 'flamebode sweep'")
    p.add_argument("--out", help="PDF to write (default: RUN/export/report.pdf)")


def run(args: argparse.Namespace) -> int:
    from ..storage.index import require_run_folder
    from ..storage.report import write_report

    import sys

    from ..storage.reader import open_run

    for problem in open_run(require_run_folder(args.run_dir), verify=False).problems:
        print(f"flamebode report: problem: {problem} (also on the report's first page)", file=sys.stderr)
    written = write_report(require_run_folder(args.run_dir), args.out)
    print("wrote " + ", ".join(str(p) for p in written))
    return 0
