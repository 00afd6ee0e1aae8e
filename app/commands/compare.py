"""``flamebode compare RUN [RUN ...] --out FIGURE``: several runs' gain and phase on one figure.

One curve per run and forcing amplitude, with 95 % bars, flagged points hollow, phase in
degrees unwrapped along frequency (e^{+iωt}). Drawn through ``app.services.export.compare``.
Must not import Qt.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("runs", nargs="+", help="run folders to compare")
    p.add_argument("--out", default="compare.png", help="figure to write (.png, .pdf or .svg; default compare.png)")


def run(args: argparse.Namespace) -> int:
    from ..services.export import compare
    from ..services.runs import opening_problems
    from ..services.types import CompareRequest

    for d in args.runs:
        for problem in opening_problems(d):
            print(f"flamebode compare: {d}: problem: {problem}", file=sys.stderr)
    result = compare(CompareRequest(run_dirs=tuple(Path(d) for d in args.runs), out=Path(args.out)))
    print(f"wrote {result.figure}")
    return 0
