"""``flamebode review RUN_DIR``: the run's points with their attempts, decisions and flags.

One row per point: the attempt it uses (``used``: point/attempt, both from 1, e.g. ``7/2``,
chosen by the acceptance rule or a person), gain and phase as people read them (degrees,
unwrapped along frequency per forcing amplitude, ±95 %; the same numbers as the export),
and a last line counting points with a result, flagged ones and points without one.

Problems found while opening the run (leftover temporary files, missing or damaged
records, a locked index) are printed first; the table shows what is still readable.
Must not import Qt.
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


def _attempt_flags(a: dict) -> list[str]:
    an = a.get("analysis") or {}
    return list(a["flags"]) + [w for w in an.get("warnings", ()) if w not in a["flags"]]


def run(args: argparse.Namespace) -> int:
    from ..storage import index
    from ..storage.export import counts, describe_counts, plan_name, point_rows
    from ..storage.index import attempt_label
    from ..storage.reader import open_run

    r = open_run(index.require_run_folder(args.run_dir), verify=not args.no_verify)
    print(f"run {r.run_dir}: {plan_name(r)}  ({r.kind}, back-end {r.info.get('backend', '?')}, "
          f"{len(r.points)} points, {len(r.attempts)} attempts)")
    for p in r.problems:
        print(f"problem: {p}")
    for c in index.snapshot_changes(r.run_dir):
        print(f"problem: snapshot changed since the run was created: {c.describe()} (resume and reacquire "
              f"refuse it without --accept-changed-snapshot)")
    for c in _accepted_changes(r.run_dir):
        print(f"snapshot change accepted by {c['command']} at {_utc(c['wall_time_s'])}: {c['name']}: "
              f"{'; '.join(c['keys']) or 'content changed'} (sha256 {c['old_sha256'][:12]} → {c['new_sha256'][:12]})")
    for f in r.faults:
        print(f"fault at point {_num(f['point_index'])}: {f['name']}: {f['message']} ({f['action']})")
    rows = point_rows(r)
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
                flags = ", ".join(_attempt_flags(a)) or "none"
                print(f"{'':>6}attempt {attempt_label(a['point_index'], a.get('seq'))}: "
                      f"{a['decision'] or 'not used'}{reason}, record {a['record_status']}, flags {flags}, "
                      f"id {a['attempt_id']}")
    print(describe_counts(counts(rows)))
    pending = r.pending_points()
    if pending:
        print(f"{len(pending)} point(s) without an accepted attempt: {', '.join(str(i + 1) for i in pending)} "
              f"(continue with 'flamebode resume {r.run_dir}')")
    return 0


def _accepted_changes(run_dir) -> list[dict]:
    import sqlite3

    from ..storage import index

    try:
        conn = index.connect(run_dir / index.INDEX_NAME, read_only=True, timeout_s=0.5)
        try:
            return index.snapshot_change_log(conn)
        finally:
            conn.close()
    except sqlite3.Error:
        return []


def _utc(wall_s: float) -> str:
    from datetime import datetime, timezone

    return datetime.fromtimestamp(wall_s, timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC")


def _num(index: object) -> str:
    """A stored point index as the number users see (from 1)."""
    return str(int(index) + 1) if isinstance(index, int) else "-"
