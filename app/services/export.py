"""Export a run (CSV, JSON summary, interchange files, plots) and compare several runs.

The files are written by ``app.storage.export`` and ``app.storage.report``; this module is
the one door the command line and the window use, with the run's summary line and the
problems found on opening. Must not import Qt, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

from pathlib import Path

from app.storage import export as _export
from app.storage import report as _report

from .runs import check_run_folder, counts_text, open_run
from .types import CompareRequest, CompareResult, ExportRequest, ExportResult


def export(req: ExportRequest) -> ExportResult:
    """Write the run's files; the summary line counts what they hold."""
    check_run_folder(req.run_dir)                          # a plain error when it is not a run folder
    paths = _export.export_run(req.run_dir, req.out_dir, plots=req.plots, convention=req.convention)
    return ExportResult(paths=tuple(Path(p) for p in paths), counts_text=counts_text(open_run(req.run_dir, False)))


def compare(req: CompareRequest) -> CompareResult:
    """One gain/phase figure of several runs (each must be a run folder with a result)."""
    for d in req.run_dirs:
        check_run_folder(d)
    return CompareResult(figure=Path(_report.compare(list(req.run_dirs), req.out)))


def compare_figure_in(run_dir: str | Path, name: str = "compare.png") -> Path:
    """Where a comparison drawn from a run goes: its export folder (made when missing)."""
    out = check_run_folder(run_dir) / "export"
    out.mkdir(exist_ok=True)
    return out / name


def write_report(run_dir: str | Path, out: str | Path | None = None) -> tuple[Path, ...]:
    """The run's report (PDF and PNG pages); the files written."""
    check_run_folder(run_dir)
    return tuple(Path(p) for p in _report.write_report(run_dir, out))


def list_runs(folder: str | Path) -> list[dict]:
    """Every run folder under ``folder`` with its metadata, oldest first (``app.storage.report``)."""
    return _report.list_runs(folder)
