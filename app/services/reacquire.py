"""Re-acquire points of a stored run: check the choice, then say which attempt each point uses.

The sweep itself runs where the front end runs sweeps (the command line's engine loop, the
window's session); both check the request here first and report through ``point_uses``.
New attempts are added and old ones kept; each point uses the newest attempt with no flags
(or the newest one where all are flagged) unless a person chose one (docs/run-layout.md).
Must not import Qt, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

from pathlib import Path

from app.errors import FlamebodeError
from app.plan import load_plan
from app.storage.export import point_rows
from app.storage.writer import ensure_not_busy   # noqa: F401  (the front ends check a busy run here)

from .runs import counts_text, open_run
from .types import PointUse, ReacquirePlan, ReacquireRequest


def prepare(req: ReacquireRequest) -> ReacquirePlan:
    """The points to measure again, in plan order; refuses points not in the plan."""
    r = open_run(req.run_dir, verify=False)
    if not r.index_readable:
        raise FlamebodeError(f"{r.run_dir}: cannot reacquire while the index is unreadable: {r.problems[0]}")
    planned = [p.index for p in load_plan(r.plan_path).points()]
    wanted = set(r.flagged_points() if req.flagged else req.point_indices)
    unknown = sorted(wanted - set(planned))
    if unknown:
        raise FlamebodeError(f"--points: {', '.join(str(i + 1) for i in unknown)} not in this run's plan "
                             f"(points 1-{len(planned)})")
    backend = r.info.get("backend", "simulated") or "simulated"
    return ReacquirePlan(run_dir=r.run_dir, point_indices=tuple(i for i in planned if i in wanted),
                         rig_path=Path(r.rig_path), plan_path=Path(r.plan_path), backend=backend,
                         simulated=backend.startswith("sim"))


def point_uses(run_dir: str | Path, point_indices: list[int] | tuple[int, ...]) -> tuple[tuple[PointUse, ...], str]:
    """Which attempt each of the points now uses and why; and the run's summary line."""
    run = open_run(run_dir, verify=False)
    rows = {row["point"] - 1: row for row in point_rows(run)}
    uses: list[PointUse] = []
    for i in sorted(set(point_indices)):
        row = rows.get(i)
        if row is None or row["status"] != "accepted":
            uses.append(PointUse(point=i + 1, used=None))
            continue
        reason = run.attempt(row["attempt_id"]).get("decision_reason") or ""
        why = "chosen by a person" if row["chosen_by"] == "user" else reason or "acceptance rule"
        flags = tuple(f for f in row["flags"].split(";") if f) if row["flagged"] else ()
        uses.append(PointUse(point=i + 1, used=row["used"], n_attempts=int(row["n_attempts"]), flags=flags, why=why))
    return tuple(uses), counts_text(run)
