"""``flamebode review RUN_DIR``: the run's points with their attempts, decisions and flags.

One row per point: the attempt it uses (``used``: point/attempt, both from 1, e.g. ``7/2``,
chosen by the acceptance rule or a person), gain and phase as people read them (degrees,
unwrapped along frequency per forcing amplitude, ±95 %; the same numbers as the export),
and a last line counting points with a result, flagged ones and points without one.

Problems found while opening the run (leftover temporary files, missing or damaged
records, a locked index) are printed first; the table shows what is still readable. The run
is read through ``app.services.runs.review``, as the window's review tab reads it. Must not
import Qt or open the index itself.
"""

from __future__ import annotations

import argparse
import math


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder written by 'flamebode sweep'")
    p.add_argument("--attempts", action="store_true", help="list every attempt, not only the accepted one")
    p.add_argument("--no-verify", action="store_true", help="skip re-hashing the record files (faster)")


# (header, alignment) of each column; phases in degrees, unwrapped along frequency (app.core.phase)
COLUMNS = (("point", ">"), ("freq_hz", ">"), ("target", ">"), ("achieved", ">"), ("gain", ">"), ("±95%", ">"),
           ("phase_deg", ">"), ("±95%", ">"), ("used", ">"), ("of", ">"), ("chosen", "<"), ("flags", "<"))


def _fmt(v: float | None, spec: str) -> str:
    return "-" if v is None or (isinstance(v, float) and not math.isfinite(v)) else format(v, spec)


def _cells(row: dict) -> list[str]:
    """The printed cells of one point; the digits printed are those compared with the export's files."""
    return [str(row["point"]), _fmt(row["freq_hz"], ".2f"), _fmt(row["amplitude_ratio_target"], ".4f"),
            _fmt(row["amplitude_ratio_achieved"], ".4f"), _fmt(row["gain"], ".4f"), _fmt(row["gain_ci95"], ".4f"),
            _fmt(row["phase_deg"], "+.2f"), _fmt(row["phase_ci95_deg"], ".2f"), row["used"] or "(none)",
            str(row["n_attempts"]), row["chosen_by"] or "-", row["flags"].replace(";", ", ")]


def run(args: argparse.Namespace) -> int:
    from ..services import runs
    from ..services.runs import attempt_label

    rv = runs.review(args.run_dir, verify=not args.no_verify)
    r = rv.run
    print(f"run {r.run_dir}: {rv.plan_name}  ({r.kind}, back-end {r.info.get('backend', '?')}, "
          f"{len(r.points)} points, {len(r.attempts)} attempts)")
    for p in rv.problems:
        print(f"problem: {p}")
    for note in rv.snapshot_notes:
        print(note.text if note.accepted else f"problem: {note.text}")
    for f in r.faults:
        print(f"fault at point {_num(f['point_index'])}: {f['name']}: {f['message']} ({f['action']})")
    rows = list(rv.rows)
    print("(used: the point/attempt every output uses, e.g. 7/2 = point 7, attempt 2; of: attempts stored; "
          "phase in degrees, unwrapped along frequency, time convention e^(+iωt); ±95%: half-widths of the 95 % "
          "intervals)")
    cells = [_cells(row) for row in rows]
    widths = [max([len(h)] + [len(c[k]) for c in cells]) for k, (h, _) in enumerate(COLUMNS)]
    line = "  ".join
    head = line(f"{h:<{w}}" if align == "<" else f"{h:>{w}}" for (h, align), w in zip(COLUMNS, widths))
    print(head.rstrip())
    print("-" * len(head.rstrip()))
    for row, c in zip(rows, cells):
        print(line(f"{v:<{w}}" if align == "<" else f"{v:>{w}}"
                   for v, (_, align), w in zip(c, COLUMNS, widths)).rstrip())
        if args.attempts:
            for a in r.attempts_of(row["point"] - 1):
                reason = f" ({a['decided_by']}: {a['decision_reason']})" if a.get("decision_reason") else ""
                flags = ", ".join(runs.attempt_flags(a)) or "none"
                print(f"{'':>6}attempt {attempt_label(a['point_index'], a.get('seq'))}: "
                      f"{a['decision'] or 'not used'}{reason}, record {a['record_status']}, flags {flags}, "
                      f"id {a['attempt_id']}")
    print(rv.counts_text)
    for line in rv.amplitude_lines:
        print(line)
    if rv.pending_points:
        print(f"{len(rv.pending_points)} point(s) without an accepted attempt: "
              f"{', '.join(map(str, rv.pending_points))} (continue with 'flamebode resume {r.run_dir}')")
    return 0


def _num(index: object) -> str:
    """A stored point index as the number users see (from 1)."""
    return str(int(index) + 1) if isinstance(index, int) else "-"
