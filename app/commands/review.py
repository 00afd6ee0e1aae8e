"""``flamebode review RUN_DIR``: the run's points with their attempts, decisions and flags.

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


def _fmt(v: float | None, spec: str) -> str:
    width = int("".join(c for c in spec.split(".")[0] if c.isdigit()) or 0)
    return f"{'-':>{width}}" if v is None or (isinstance(v, float) and not math.isfinite(v)) else format(v, spec)


def run(args: argparse.Namespace) -> int:
    from ..storage import index
    from ..storage.export import point_rows
    from ..storage.reader import open_run

    r = open_run(index.require_run_folder(args.run_dir), verify=not args.no_verify)
    print(f"run {r.run_dir}  ({r.kind}, back-end {r.info.get('backend', '?')}, "
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
    head = (f"{'pt':>4} {'freq_hz':>9} {'target':>7} {'achieved':>8} {'gain':>7} {'±95%':>6} "
            f"{'phase_rad':>9} {'±95%':>6} {'att':>3}  accepted      flags")
    print(head)
    print("-" * len(head))
    for row in point_rows(r):
        print(f"{row['point_index'] + 1:>4} {row['frequency_hz']:>9.2f} {row['amplitude_ratio_target']:>7.4f} "
              f"{_fmt(row['amplitude_ratio_achieved'], '8.4f')} {_fmt(row['gain'], '7.4f')} "
              f"{_fmt(row['gain_ci95'], '6.4f')} {_fmt(row['phase_rad'], '+9.4f')} "
              f"{_fmt(row['phase_ci95_rad'], '6.4f')} {row['n_attempts']:>3}  "
              f"{row['attempt_id'] or '(none)':<12}  {row['flags'] or ''}")
        if args.attempts:
            for a in r.attempts_of(row["point_index"]):
                reason = f" ({a['decided_by']}: {a['decision_reason']})" if a.get("decision_reason") else ""
                print(f"{'':>6}attempt {a['attempt_id']} #{a.get('seq', '?')}: {a['decision'] or 'not chosen'}"
                      f"{reason}, record {a['record_status']}, flags {', '.join(a['flags']) or 'none'}")
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
