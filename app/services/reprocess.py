"""Reprocess a run: new analyses of its raw records with another rig file (records only read).

Each usable attempt of the chosen points gets a new row of the ``analyses`` table naming
the rig file (path, sha256) and the tool version; a copy of the rig file is kept in
RUN_DIR/rigs/<sha256[:12]>.toml. A record that cannot be read or evaluated is reported
with the reason and skipped. Must not import Qt, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

import shutil
import time
from pathlib import Path
from typing import Callable

from app import __version__
from app.core.response import evaluate_point
from app.errors import FlamebodeError
from app.rig import load_rig
from app.storage import index
from app.storage.writer import analysis_from_result, sha256_file

from .points import parse_points  # noqa: F401  (the --points reader, here for callers of reprocess)
from .runs import open_run
from .types import ReprocessOutcome, ReprocessRequest, ReprocessResult


class ReprocessRefused(FlamebodeError):
    """Nothing was reprocessed; ``problems`` are the run's own problems found on opening."""

    def __init__(self, message: str, problems: tuple[str, ...]) -> None:
        super().__init__(message)
        self.problems = problems


def reprocess(req: ReprocessRequest, on_opened: Callable[[tuple[str, ...]], None] | None = None,
              on_outcome: Callable[[ReprocessOutcome], None] | None = None) -> ReprocessResult:
    """Evaluate the chosen attempts again with ``req.rig_path``; one outcome per attempt.

    ``on_opened`` gets the run's problems as soon as it is open and ``on_outcome`` each outcome
    as it happens (a long run shows progress); the result holds them all as well."""
    rig = load_rig(req.rig_path)
    r = open_run(req.run_dir)
    # a changed snapshot (e.g. the run's calibration copy edited) is said, as review says it
    problems = tuple(r.problems) + tuple(f"snapshot changed since the run was created: {c.describe()}"
                                         for c in index.snapshot_changes(r.run_dir))
    if on_opened is not None:
        on_opened(problems)
    if not r.index_readable:
        raise ReprocessRefused(f"{r.run_dir}: the index cannot be changed now (see the problems above)", problems)
    wanted = None if req.point_indices is None else set(req.point_indices)
    known = {p["point_index"] for p in r.points}
    missing = sorted((wanted or set()) - known)
    if missing:
        raise ReprocessRefused(f"--points: {', '.join(str(i + 1) for i in missing)} not in this run (points 1-"
                               f"{max(known, default=-1) + 1})", problems)
    digest = sha256_file(req.rig_path)
    copy = r.run_dir / "rigs" / f"{digest[:12]}.toml"
    copy.parent.mkdir(exist_ok=True)
    if not copy.exists():
        shutil.copyfile(req.rig_path, copy)
    outcomes: list[ReprocessOutcome] = []

    def add(o: ReprocessOutcome) -> None:
        outcomes.append(o)
        if on_outcome is not None:
            on_outcome(o)

    conn = index.connect(r.run_dir / index.INDEX_NAME)
    try:
        for a in r.attempts:
            if wanted is not None and a["point_index"] not in wanted:
                continue
            point, aid = a["point_index"] + 1, a["attempt_id"]
            if a["record_status"] != "ok":
                add(ReprocessOutcome(point, aid, problem=f"its record file is {a['record_status']} "
                                                         f"(see the problems above)"))
                continue
            try:
                rec = r.read_record(aid)
                result = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, rec.freq_hz, rig)
            except FlamebodeError as exc:
                add(ReprocessOutcome(point, aid, problem=str(exc)))
                continue
            analysis = analysis_from_result(result)
            analysis.update(rig_path=str(Path(req.rig_path).resolve()), rig_sha256=digest,
                            tool_version=__version__, created_wall_s=time.time())
            with conn:
                analysis_id = index.insert_analysis(conn, aid, analysis)
            add(ReprocessOutcome(point, aid, analysis_id=analysis_id, gain=float(analysis["gain"]),
                                 phase_rad=float(analysis["phase_rad"])))
    finally:
        conn.close()
    return ReprocessResult(rig_path=Path(req.rig_path), rig_sha256=digest, rig_copy=copy, problems=problems,
                           outcomes=tuple(outcomes))
