"""Export a run: one CSV row per point, a JSON summary, the points as .mat and HDF5 for
network-model codes (app.storage.interchange), gain/phase plots (PNG and PDF).

Exports use, for every point, the accepted attempt (the acceptance rule in index.py) and
its newest analysis, and say which one (``used``: point number / attempt number, both from
1, e.g. ``7/2``). Phases are shown as people read them (app.core.phase: degrees, unwrapped
along frequency per forcing amplitude, with the 95 % interval); the CSV and JSON keep the
same unwrapped phase in radians beside it and the stored (wrapped) value. Every column
names its unit. FTF and FDF runs export alike; FDF plots draw one curve per forcing
amplitude. Plots use matplotlib's object interface with the Agg canvas (no pyplot, no
display). Column and key names are documented in docs/run-layout.md; ``point_rows`` is
also what ``flamebode review`` prints, so both read the same numbers.

Imports: standard library, numpy, matplotlib (Agg only), ``app.core.phase``. No Qt, no drivers.
"""

from __future__ import annotations

import csv
import json
import math
import tomllib
from pathlib import Path
from typing import Any

import numpy as np

from .. import __version__
from ..core.phase import unwrapped_phase_rad
from ..errors import FlamebodeError
from .index import attempt_label, is_flagged, require_run_folder
from .reader import Run, open_run

CSV_COLUMNS = ("point", "attempt", "used", "freq_hz", "amplitude_ratio_target", "amplitude_ratio_achieved",
               "gain", "gain_ci95", "phase_deg", "phase_ci95_deg", "phase_rad", "phase_ci95_rad",
               "phase_wrapped_rad", "flags", "status", "chosen_by", "n_attempts", "attempt_id", "analysis_id",
               "rig_sha256")

# the hot-wire cross-check's figures (app.core.hotwire), as columns when a run has them
HOTWIRE_COLUMNS = ("hotwire_ratio", "hotwire_ratio_ci95", "hotwire_phase_diff_rad", "hotwire_phase_ci95_rad",
                   "hotwire_diff_z", "hotwire_coherence", "hotwire_velocity_ratio", "hotwire_velocity_ratio_ci95")

UNITS = {
    "hotwire_ratio": "hot-wire velocity / multi-microphone velocity at the wire (1)",
    "hotwire_ratio_ci95": "95 % half-width of hotwire_ratio (1)",
    "hotwire_phase_diff_rad": "hot-wire phase minus multi-microphone phase at the wire, rad",
    "hotwire_phase_ci95_rad": "95 % half-width of hotwire_phase_diff_rad, rad",
    "hotwire_diff_z": "hot-wire difference over its standard error (1)",
    "hotwire_coherence": "coherence of the two velocities over the record's segments (1)",
    "hotwire_velocity_ratio": "1 (the hot-wire's |u'|/u_mean carried to the reference plane; empty where not carried)",
    "hotwire_velocity_ratio_ci95": "95 % half-width of hotwire_velocity_ratio (1)",
    "point": "point number in the plan, from 1",
    "attempt": "attempt number of the point, from 1 (the attempt used)",
    "used": "point/attempt used, e.g. 7/2",
    "freq_hz": "Hz",
    "amplitude_ratio_target": "1 (|u'|/u_mean at the reference plane)",
    "amplitude_ratio_achieved": "1 (|u'|/u_mean at the reference plane)",
    "gain": "1", "gain_ci95": "1 (half-width of the 95 % interval)",
    "phase_deg": "degrees, unwrapped along frequency per forcing amplitude; time convention x(t) = Re{x e^(+i w t)}",
    "phase_ci95_deg": "degrees (half-width of the 95 % interval)",
    "phase_rad": "rad, the same unwrapped phase as phase_deg",
    "phase_ci95_rad": "rad (half-width of the 95 % interval)",
    "phase_wrapped_rad": "rad in (-pi, pi], as stored in the run index",
    "flags": "attempt flags and analysis warnings, separated by ';'",
    "status": "'accepted', or 'no accepted attempt'",
    "chosen_by": "'auto' (the acceptance rule) or 'user' (flamebode accept)",
    "n_attempts": "attempts stored for the point",
}


def _flags(a: dict[str, Any]) -> list[str]:
    an = a.get("analysis") or {}
    return list(a["flags"]) + [w for w in an.get("warnings", ()) if w not in a["flags"]]


def point_rows(run: Run) -> list[dict[str, Any]]:
    """One row per planned point (in plan order) from its accepted attempt's newest analysis."""
    accepted = run.accepted()
    rows = []
    for p in run.points:
        i = p["point_index"]
        a = accepted.get(i)
        an = a["analysis"] if a else {}
        rows.append({
            "point": i + 1, "attempt": a.get("seq") if a else None,
            "used": attempt_label(i, a.get("seq")) if a else "",
            "freq_hz": p["freq_hz"], "amplitude_ratio_target": p["target_ratio"],
            "amplitude_ratio_achieved": finite_number(an.get("achieved_ratio")), "gain": finite_number(an.get("gain")),
            "gain_ci95": finite_number(an.get("gain_ci95"), positive=True),
            "phase_wrapped_rad": finite_number(an.get("phase_rad")),
            "phase_ci95_rad": finite_number(an.get("phase_ci95_rad"), positive=True),
            "flags": ";".join(_flags(a)) if a else "",
            "flagged": bool(a) and is_flagged(a),
            "status": "accepted" if a else "no accepted attempt",
            "chosen_by": (a.get("decided_by") or "auto") if a else "",
            "attempt_id": a["attempt_id"] if a else "",
            "n_attempts": len(run.attempts_of(i)), "analysis_id": an.get("analysis_id"),
            "rig_sha256": an.get("rig_sha256", ""),
            **{k: finite_number((an.get("quality") or {}).get(k)) for k in HOTWIRE_COLUMNS
               if k in (an.get("quality") or {})},
        })
    _add_phase_as_read(rows)
    return rows


def finite_number(v: Any, positive: bool = False) -> float | None:
    """A stored number as a float, or None when it is missing, not a number, not finite (or not
    positive, for an interval): a damaged or edited index never reaches a file or a plot as text."""
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    if not math.isfinite(x) or (positive and x <= 0):
        return None
    return x


def _num(v: Any) -> float:
    return math.nan if v is None else float(v)


def _add_phase_as_read(rows: list[dict[str, Any]]) -> None:
    """Unwrapped phase (rad and degrees) with its interval in degrees, by the one rule of app.core.phase."""
    unwrapped = unwrapped_phase_rad([_num(r["freq_hz"]) for r in rows], [_num(r["phase_wrapped_rad"]) for r in rows],
                                    [_num(r["amplitude_ratio_target"]) for r in rows])
    for r, ph in zip(rows, unwrapped):
        ok = math.isfinite(ph)
        r["phase_rad"] = float(ph) if ok else None
        r["phase_deg"] = math.degrees(ph) if ok else None
        ci = r["phase_ci95_rad"]
        r["phase_ci95_deg"] = math.degrees(ci) if ci is not None and math.isfinite(ci) else None


def kept_phases(run: Run) -> list[tuple[int, float, float, float]]:
    """(point_index, freq_hz, target_ratio, stored phase_rad) of every accepted attempt with a phase:
    the curve a re-acquire's progress lines unwrap on (app.engine.progress.ProgressDisplay ``known``)."""
    out = []
    for i, a in sorted(run.accepted().items()):
        ph = (a.get("analysis") or {}).get("phase_rad")
        if ph is not None and math.isfinite(ph):
            out.append((int(i), float(a["freq_hz"]), float(a["target_ratio"]), float(ph)))
    return out


def plan_name(run: Run) -> str:
    """The plan's ``name`` from the run's plan snapshot; the run folder's name when it has none."""
    try:
        name = tomllib.loads(run.plan_path.read_text(encoding="utf-8")).get("name")
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        name = None
    return name.strip() if isinstance(name, str) and name.strip() else run.run_dir.name


def counts(rows: list[dict[str, Any]]) -> dict[str, Any]:
    """What a summary counts: points, with a result, flagged among them (point numbers), without one."""
    flagged = [r["point"] for r in rows if r["status"] == "accepted" and r["flagged"]]
    return {"n_points": len(rows), "n_accepted": sum(r["status"] == "accepted" for r in rows),
            "n_flagged": len(flagged), "flagged_points": flagged,
            "points_without_result": [r["point"] for r in rows if r["status"] != "accepted"]}


def describe_counts(c: dict[str, Any]) -> str:
    """e.g. '19 points: 19 with an accepted attempt, 2 of them flagged (points 4, 9), 0 without'."""
    flagged = (f"{c['n_flagged']} of them flagged (point{'s' if c['n_flagged'] > 1 else ''} "
               f"{', '.join(map(str, c['flagged_points']))})" if c["n_flagged"] else "none flagged")
    missing = c["points_without_result"]
    without = (f"{len(missing)} without (point{'s' if len(missing) > 1 else ''} {', '.join(map(str, missing))})"
               if missing else "0 without")
    return f"{c['n_points']} points: {c['n_accepted']} with an accepted attempt, {flagged}, {without}"


def _cell(v: Any) -> Any:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    return repr(v) if isinstance(v, float) else v


def write_csv(rows: list[dict[str, Any]], path: Path) -> Path:
    """The rows as CSV: CSV_COLUMNS, then the hot-wire columns when any point has them."""
    columns = CSV_COLUMNS + tuple(k for k in HOTWIRE_COLUMNS if any(k in r for r in rows))
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=columns)
        w.writeheader()
        for r in rows:
            w.writerow({k: _cell(r.get(k)) for k in columns})
    return path


def write_summary(run: Run, rows: list[dict[str, Any]], path: Path) -> Path:
    def clean(v: Any) -> Any:
        return None if isinstance(v, float) and not math.isfinite(v) else v

    info = {k: v for k, v in run.info.items()}
    summary = {
        "format": "flamebode-export", "format_version": 2, "tool_version": __version__,
        "run_dir": str(run.run_dir), "plan_name": plan_name(run), "kind": run.kind,
        "amplitude_basis": info.get("amplitude_basis", ""),
        "acceptance_rule": "the newest attempt with no flags, unless a person accepted or rejected one; "
                           "where every attempt of a point is flagged, the newest",
        "units": UNITS, "run_info": info, "problems": list(run.problems), **counts(rows),
        "points": [{k: clean(r[k]) for k in CSV_COLUMNS + HOTWIRE_COLUMNS if k in r} for r in rows],
    }
    path.write_text(json.dumps(summary, indent=2), encoding="utf-8")
    return path


def _curves(rows: list[dict[str, Any]]) -> dict[float, list[dict[str, Any]]]:
    out: dict[float, list[dict[str, Any]]] = {}
    for r in rows:
        if r["gain"] is not None and r["phase_deg"] is not None:
            out.setdefault(r["amplitude_ratio_target"], []).append(r)
    return {a: sorted(rs, key=lambda r: r["freq_hz"]) for a, rs in sorted(out.items())}


def _col(rs: list[dict[str, Any]], key: str) -> np.ndarray:
    return np.array([np.nan if r[key] is None else r[key] for r in rs], dtype=float)


def plot(run: Run, rows: list[dict[str, Any]], out_dir: Path, stem: str) -> list[Path]:
    """Gain and phase (degrees, unwrapped) against frequency with 95 % bars; flagged points hollow,
    each point labelled with the attempt it uses (point/attempt); PNG and PDF."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.0, 6.0), layout="constrained")
    FigureCanvasAgg(fig)
    ax_g, ax_p = fig.subplots(2, 1, sharex=True)
    curves = _curves(rows)
    for amp, rs in curves.items():
        f = _col(rs, "freq_hz")
        label = f"|u'|/u = {amp:.3g}" if run.kind == "FDF" or len(curves) > 1 else None
        flagged = np.array([r["flagged"] for r in rs], dtype=bool)
        for ax, y, e in ((ax_g, _col(rs, "gain"), _col(rs, "gain_ci95")),
                         (ax_p, _col(rs, "phase_deg"), _col(rs, "phase_ci95_deg"))):
            line = ax.errorbar(f, y, yerr=e, marker="o", ms=4, capsize=2, label=label)
            colour = line[0].get_color()
            if flagged.any():
                ax.plot(f[flagged], y[flagged], "o", ms=7, mfc="white", mec=colour, zorder=3)
        for r, x, y in zip(rs, f, _col(rs, "gain")):
            ax_g.annotate(r["used"], (x, y), xytext=(3, 4), textcoords="offset points", fontsize=6)
    ax_g.set_ylabel("gain |F| (-)")
    ax_p.set_ylabel("phase (degrees, unwrapped)")
    ax_p.set_xlabel("frequency (Hz)")
    c = counts(rows)
    ax_g.set_title(f"{run.kind}: {plan_name(run)}\n{c['n_accepted']} of {c['n_points']} points, "
                   f"{c['n_flagged']} flagged (hollow); labels: point/attempt used", fontsize="medium")
    for ax in (ax_g, ax_p):
        ax.grid(True, alpha=0.4)
    if any(ax_g.get_legend_handles_labels()[1]):
        ax_g.legend(fontsize="small")
    paths = [out_dir / f"{stem}.png", out_dir / f"{stem}.pdf"]
    for p in paths:
        fig.savefig(p, dpi=150)
    return paths


def export_run(run_dir: str | Path, out_dir: str | Path | None = None, plots: bool = True,
               convention: str = "plus") -> list[Path]:
    """Write ``points.csv``, ``summary.json``, ``points.mat`` and ``points.h5`` (the files network-model
    codes read, in time convention ``convention``: "plus" = e^{+iωt}, flamebode's; "minus" =
    e^{-iωt}, conjugated; see app.storage.interchange) and ``gain-phase.png/.pdf``; returns the
    paths written."""
    from .interchange import CONVENTIONS, write_interchange

    if convention not in CONVENTIONS:            # before anything is written
        raise FlamebodeError(f"time convention {convention!r}: use 'plus' (e^+iwt) or 'minus' (e^-iwt)")
    run = open_run(require_run_folder(run_dir))     # nothing is written unless it is a run folder
    out = Path(out_dir) if out_dir is not None else run.run_dir / "export"
    out.mkdir(parents=True, exist_ok=True)
    rows = point_rows(run)
    written = [write_csv(rows, out / "points.csv"), write_summary(run, rows, out / "summary.json")]
    written += [write_interchange(run.run_dir, out / name, convention) for name in ("points.mat", "points.h5")]
    if plots:
        written += plot(run, rows, out, "gain-phase")
    return written
