"""``flamebode compare RUN [RUN ...] --out FIGURE``: several runs' gain and phase on one figure.

One curve per run and forcing amplitude, with 95 % bars, flagged points hollow, phase in
degrees unwrapped along frequency (e^{+iωt}). Drawn by ``app.storage.report.compare``. Must
not import Qt.
"""

from __future__ import annotations

import argparse


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("runs", nargs="+", help="run folders to compare")
    p.add_argument("--out", default="compare.png", help="figure to write (.png, .pdf or .svg; default compare.png)")


def run(args: argparse.Namespace) -> int:
    from ..storage.index import require_run_folder
    from ..storage.report import compare

    import sys

    from ..storage.reader import open_run

    for d in args.runs:
        for problem in open_run(require_run_folder(d), verify=False).problems:
            print(f"flamebode compare: {d}: problem: {problem}", file=sys.stderr)
    print(f"wrote {compare(args.runs, args.out)}")
    return 0
