"""``flamebode runs FOLDER``: every run folder under FOLDER with its metadata, oldest first.

Kind (FTF/FDF), date, plan name, rig, forcing amplitudes, points (with a result / planned),
flagged points, back-end and how the sweep ended; a folder that cannot be read is listed
with its problem. The listing itself is ``app.services.export.list_runs``. Must not import Qt.
"""

from __future__ import annotations

import argparse


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("folder", nargs="?", default="runs", help="folder holding run folders (default: ./runs)")


def run(args: argparse.Namespace) -> int:
    from ..services.export import list_runs

    found = list_runs(args.folder)
    if not found:
        print(f"{args.folder}: no run folders found")
        return 0
    for r in found:
        if "problem" in r:
            print(f"{r['run_dir']}: cannot be read: {r['problem']}")
            continue
        amps = ", ".join(f"{a:g}" for a in r["amplitudes"])
        print(f"{r['run_dir']}\n    {r['kind']} {r['date']}  plan '{r['plan']}'  rig '{r['rig']}'  |u'|/u {amps}\n"
              f"    {r['n_accepted']} of {r['n_points']} points with a result, {r['n_flagged']} flagged; "
              f"{r['backend']}, {r['ended'] or 'not finished'}")
        for problem in r.get("problems", []):
            print(f"    problem: {problem}")
    return 0
