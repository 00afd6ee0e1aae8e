"""Export a run: one CSV row per point, a JSON summary, gain/phase plots (PNG and PDF).

Exports use, for every point, the accepted attempt and its newest analysis. FTF and FDF
runs export alike; FDF plots draw one curve per forcing amplitude. Plots use matplotlib's
object interface with the Agg canvas (no pyplot, no display). Column and key names are
documented in docs/run-layout.md.

Imports: standard library, numpy, matplotlib (Agg only). No Qt, no drivers.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path
from typing import Any

import numpy as np

from .. import __version__
from .index import require_run_folder
from .reader import Run, open_run

CSV_COLUMNS = ("point_index", "frequency_hz", "amplitude_ratio_target", "amplitude_ratio_achieved",
               "gain", "gain_ci95", "phase_rad", "phase_ci95_rad", "flags", "status", "attempt_id",
               "n_attempts", "analysis_id", "rig_sha256")


def point_rows(run: Run) -> list[dict[str, Any]]:
    """One row per planned point (in plan order) from its accepted attempt's newest analysis."""
    accepted = run.accepted()
    rows = []
    for p in run.points:
        i = p["point_index"]
        a = accepted.get(i)
        an = a["analysis"] if a else {}
        flags = list(a["flags"]) + [w for w in an.get("warnings", ()) if w not in a["flags"]] if a else []
        rows.append({
            "point_index": i, "frequency_hz": p["freq_hz"], "amplitude_ratio_target": p["target_ratio"],
            "amplitude_ratio_achieved": an.get("achieved_ratio"), "gain": an.get("gain"),
            "gain_ci95": an.get("gain_ci95"), "phase_rad": an.get("phase_rad"),
            "phase_ci95_rad": an.get("phase_ci95_rad"), "flags": ";".join(flags),
            "status": "accepted" if a else "no accepted attempt", "attempt_id": a["attempt_id"] if a else "",
            "n_attempts": len(run.attempts_of(i)), "analysis_id": an.get("analysis_id"),
            "rig_sha256": an.get("rig_sha256", ""),
        })
    return rows


def _cell(v: Any) -> Any:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    return repr(v) if isinstance(v, float) else v


def write_csv(rows: list[dict[str, Any]], path: Path) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=CSV_COLUMNS)
        w.writeheader()
        for r in rows:
            w.writerow({k: _cell(r[k]) for k in CSV_COLUMNS})
    return path


def write_summary(run: Run, rows: list[dict[str, Any]], path: Path) -> Path:
    def clean(v: Any) -> Any:
        return None if isinstance(v, float) and not math.isfinite(v) else v

    info = {k: v for k, v in run.info.items()}
    summary = {
        "format": "flamebode-export", "format_version": 1, "tool_version": __version__,
        "run_dir": str(run.run_dir), "kind": run.kind, "amplitude_basis": info.get("amplitude_basis", ""),
        "units": {"frequency_hz": "Hz", "amplitude_ratio": "1 (|u'|/u_mean at the reference plane)",
                  "gain": "1", "phase_rad": "rad, time convention x(t) = Re{x e^(+i w t)}"},
        "run_info": info, "problems": list(run.problems),
        "n_points": len(rows), "n_accepted": sum(r["status"] == "accepted" for r in rows),
        "points": [{k: clean(r[k]) for k in CSV_COLUMNS} for r in rows],
    }
    path.write_text(json.dumps(summary, indent=2), encoding="utf-8")
    return path


def _curves(rows: list[dict[str, Any]]) -> dict[float, list[dict[str, Any]]]:
    out: dict[float, list[dict[str, Any]]] = {}
    for r in rows:
        if r["gain"] is not None and r["phase_rad"] is not None:
            out.setdefault(r["amplitude_ratio_target"], []).append(r)
    return {a: sorted(rs, key=lambda r: r["frequency_hz"]) for a, rs in sorted(out.items())}


def _err(rs: list[dict[str, Any]], key: str) -> np.ndarray:
    return np.array([np.nan if r[key] is None else r[key] for r in rs], dtype=float)


def plot(run: Run, rows: list[dict[str, Any]], out_dir: Path, stem: str) -> list[Path]:
    """Gain and (unwrapped) phase against frequency with 95 % bars; PNG and PDF."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.0, 6.0), layout="constrained")
    FigureCanvasAgg(fig)
    ax_g, ax_p = fig.subplots(2, 1, sharex=True)
    curves = _curves(rows)
    for amp, rs in curves.items():
        f = _err(rs, "frequency_hz")
        label = f"|u'|/u = {amp:.3g}" if run.kind == "FDF" or len(curves) > 1 else None
        ax_g.errorbar(f, _err(rs, "gain"), yerr=_err(rs, "gain_ci95"), marker="o", ms=3, capsize=2, label=label)
        ax_p.errorbar(f, np.unwrap(_err(rs, "phase_rad")), yerr=_err(rs, "phase_ci95_rad"), marker="o", ms=3,
                      capsize=2, label=label)
    ax_g.set_ylabel("gain |F| (-)")
    ax_p.set_ylabel("phase (rad, unwrapped)")
    ax_p.set_xlabel("frequency (Hz)")
    ax_g.set_title(f"{run.kind}: {run.info.get('run_label', run.run_dir.name)}")
    for ax in (ax_g, ax_p):
        ax.grid(True, alpha=0.4)
    if any(ax_g.get_legend_handles_labels()[1]):
        ax_g.legend(fontsize="small")
    paths = [out_dir / f"{stem}.png", out_dir / f"{stem}.pdf"]
    for p in paths:
        fig.savefig(p, dpi=150)
    return paths


def export_run(run_dir: str | Path, out_dir: str | Path | None = None, plots: bool = True) -> list[Path]:
    """Write ``points.csv``, ``summary.json`` and ``gain-phase.png/.pdf``; returns the paths written."""
    run = open_run(require_run_folder(run_dir))     # nothing is written unless it is a run folder
    out = Path(out_dir) if out_dir is not None else run.run_dir / "export"
    out.mkdir(parents=True, exist_ok=True)
    rows = point_rows(run)
    written = [write_csv(rows, out / "points.csv"), write_summary(run, rows, out / "summary.json")]
    if plots:
        written += plot(run, rows, out, "gain-phase")
    return written
