"""Typed inputs and results of the run services (frozen dataclasses, no behaviour).

Point numbers a person reads start at 1 (``point``, ``attempt``); fields named ``*_index``
are the plan's indices from 0. Must not import Qt, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:                       # the run as read from disk (a storage type)
    from app.storage.reader import Run


@dataclass(frozen=True)
class Choice:
    """One attempt named as people read it: point number and attempt number, both from 1."""

    point: int
    attempt: int

    @property
    def label(self) -> str:
        return f"{self.point}/{self.attempt}"


@dataclass(frozen=True)
class DecideRequest:
    """Accept (or reject) attempts of a run, by numbers or by attempt id; all or nothing."""

    run_dir: Path
    choices: tuple[Choice, ...] = ()
    attempt_ids: tuple[str, ...] = ()
    accept: bool = True
    reason: str = ""                    # kept in the index; a default naming the verb when empty


@dataclass(frozen=True)
class Decision:
    """One decision written: the point (from 1), the attempt's label ``point/attempt`` and id."""

    point: int
    label: str
    attempt_id: str
    accepted: bool

    @property
    def verb(self) -> str:
        return "accepted" if self.accepted else "rejected"


@dataclass(frozen=True)
class SnapshotNote:
    """A snapshot change of the run: pending (refused by resume/reacquire) or accepted earlier."""

    text: str
    accepted: bool


@dataclass(frozen=True)
class RunReview:
    """What ``review`` shows: the run, its point rows (export's numbers), notes and counts."""

    run: "Run"
    plan_name: str
    rows: tuple[dict[str, Any], ...]
    problems: tuple[str, ...]
    snapshot_notes: tuple[SnapshotNote, ...]
    counts_text: str                    # "n of m points with a result, k flagged ..." as the export says
    pending_points: tuple[int, ...]     # point numbers from 1 without an accepted attempt
    amplitude_lines: tuple[str, ...] = ()   # the amplitude-dependence test of an FDF run (app.storage.amplitude)


@dataclass(frozen=True)
class ReprocessRequest:
    """New analyses of a run's raw records with another rig file."""

    run_dir: Path
    rig_path: Path
    point_indices: tuple[int, ...] | None = None     # from 0; None: every point


@dataclass(frozen=True)
class ReprocessOutcome:
    """One attempt: a new analysis (``analysis_id``) or the reason it was not reprocessed."""

    point: int                          # from 1
    attempt_id: str
    analysis_id: int | None = None
    gain: float | None = None
    phase_rad: float | None = None
    problem: str | None = None

    @property
    def where(self) -> str:
        return f"point {self.point} attempt {self.attempt_id}"


@dataclass(frozen=True)
class ReprocessResult:
    rig_path: Path
    rig_sha256: str
    rig_copy: Path
    problems: tuple[str, ...]           # the run's own problems found on opening
    outcomes: tuple[ReprocessOutcome, ...] = field(default_factory=tuple)

    @property
    def n_done(self) -> int:
        return sum(1 for o in self.outcomes if o.problem is None)

    @property
    def not_done(self) -> tuple[ReprocessOutcome, ...]:
        return tuple(o for o in self.outcomes if o.problem is not None)


@dataclass(frozen=True)
class ExportRequest:
    run_dir: Path
    out_dir: Path | None = None         # default: RUN_DIR/export
    plots: bool = True
    convention: str = "plus"            # time convention of points.mat/.h5: "plus" e^{+iwt}, "minus" e^{-iwt}


@dataclass(frozen=True)
class ExportResult:
    paths: tuple[Path, ...]
    counts_text: str                    # what the files hold


@dataclass(frozen=True)
class CompareRequest:
    run_dirs: tuple[Path, ...]
    out: Path


@dataclass(frozen=True)
class CompareResult:
    figure: Path


@dataclass(frozen=True)
class ReacquireRequest:
    """Which points to measure again: ``point_indices`` (from 0) or every flagged one."""

    run_dir: Path
    point_indices: tuple[int, ...] = ()
    flagged: bool = False


@dataclass(frozen=True)
class ReacquirePlan:
    """The checked choice: the run, its snapshots, back-end and the points in plan order."""

    run_dir: Path
    point_indices: tuple[int, ...]
    rig_path: Path
    plan_path: Path
    backend: str
    simulated: bool


@dataclass(frozen=True)
class PointUse:
    """Which attempt a point uses now and why (after a re-acquire)."""

    point: int                          # from 1
    used: str | None                    # "point/attempt", None without an accepted attempt
    n_attempts: int = 0
    flags: tuple[str, ...] = ()
    why: str = ""                       # "chosen by a person", the rule's reason, ...
