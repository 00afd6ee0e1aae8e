"""``flamebode reprocess-run RUN_DIR --rig NEW.toml [--points 3,7]``: new analyses, same records.

Every usable attempt of the chosen points (default: all) is evaluated again from its
stored raw record with the given rig file; each result is added as a new row of the
``analyses`` table naming the rig file (path and sha256) and tool version. Raw records
are only read. A copy of the rig file is kept in RUN_DIR/rigs/<sha256[:12]>.toml. A record
that cannot be read or evaluated is named with the reason and skipped; the exit code is
then 1. Must not import Qt.
"""

from __future__ import annotations

import argparse
import shutil
import time
from pathlib import Path

from ..errors import FlamebodeError


def parse_points(text: str | None) -> list[int] | None:
    """Point numbers as users see them (from 1) to plan indices (from 0):
    '3,7,10-12' -> [2, 6, 9, 10, 11]; None -> None (all points)."""
    if not text:
        return None
    out: list[int] = []
    try:
        for part in text.split(","):
            part = part.strip()
            if "-" in part:
                a, b = part.split("-", 1)
                out.extend(range(int(a), int(b) + 1))
            elif part:
                out.append(int(part))
    except ValueError:
        raise FlamebodeError(f"--points: '{text}' is not a list of point numbers such as 3,7 or 10-12") from None
    if any(n < 1 for n in out):
        raise FlamebodeError(f"--points: point numbers start at 1, got '{text}'")
    return [n - 1 for n in out]


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder")
    p.add_argument("--rig", required=True, help="the changed rig file (TOML)")
    p.add_argument("--points", default=None, help="point numbers, e.g. 3,7 or 10-12 (default: all)")


def run(args: argparse.Namespace) -> int:
    from .. import __version__
    from ..core.response import evaluate_point
    from ..rig import load_rig
    from ..storage import index
    from ..storage.reader import open_run
    from ..storage.writer import analysis_from_result, sha256_file

    rig = load_rig(args.rig)
    r = open_run(args.run_dir)
    for prob in r.problems:
        print(f"problem: {prob}")
    if not r.index_readable:
        raise FlamebodeError(f"{r.run_dir}: the index cannot be changed now (see the problems above)")
    wanted = parse_points(args.points)
    known = {p["point_index"] for p in r.points}
    missing = sorted(set(wanted or ()) - known)
    if missing:
        raise FlamebodeError(f"--points: {', '.join(str(i + 1) for i in missing)} not in this run (points 1-"
                             f"{max(known, default=-1) + 1})")
    digest = sha256_file(args.rig)
    copy = r.run_dir / "rigs" / f"{digest[:12]}.toml"
    copy.parent.mkdir(exist_ok=True)
    if not copy.exists():
        shutil.copyfile(args.rig, copy)
    conn = index.connect(r.run_dir / index.INDEX_NAME)
    n_ok = 0
    not_done: list[str] = []
    try:
        for a in r.attempts:
            if wanted is not None and a["point_index"] not in wanted:
                continue
            where = f"point {a['point_index'] + 1} attempt {a['attempt_id']}"
            if a["record_status"] != "ok":
                not_done.append(where)
                print(f"{where}: not reprocessed: its record file is {a['record_status']} (see the problems above)")
                continue
            try:
                rec = r.read_record(a["attempt_id"])
                point = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, rec.freq_hz, rig)
            except FlamebodeError as exc:
                not_done.append(where)
                print(f"{where}: not reprocessed: {exc}")
                continue
            analysis = analysis_from_result(point)
            analysis.update(rig_path=str(Path(args.rig).resolve()), rig_sha256=digest, tool_version=__version__,
                            created_wall_s=time.time())
            with conn:
                aid = index.insert_analysis(conn, a["attempt_id"], analysis)
            n_ok += 1
            print(f"{where}: analysis {aid}: gain {analysis['gain']:.4f}, phase {analysis['phase_rad']:+.4f} rad")
    finally:
        conn.close()
    print(f"{n_ok} attempt(s) reprocessed with {args.rig} (sha256 {digest[:12]}, copy in {copy})")
    if not_done:
        print(f"{len(not_done)} attempt(s) not reprocessed ({', '.join(not_done)}); their records are unchanged")
        return 1
    return 0
