"""Runs side by side, and one report per run: the step from a measurement to what is handed on.

* ``list_runs(folder)``: every run folder under ``folder`` with its metadata (kind, plan,
  rig, date, amplitudes, points, accepted, flagged, back-end, how it ended).
* ``compare(run_dirs, out)``: gain and phase (degrees, unwrapped, with 95 % bars; flagged
  points hollow) of several runs on one figure, one curve per run and forcing amplitude.
* ``write_report(run_dir, out_pdf)``: a PDF (and a PNG of each page beside it) with the rig
  and calibration used, how the run was made and ended, the curves, the point table, the
  fitted flame model, the amplitude dependence and a quality summary.

The numbers come from ``app.storage.export.point_rows`` (the rule for which attempt a point
uses, the phase as people read it) and the fits from ``app.core``. Matplotlib is used
without a display (Agg). Imports: numpy, matplotlib, ``app.core`` and ``app.storage``. Must
not import Qt or drivers.
"""

from __future__ import annotations

import json
import math
import sqlite3
import time
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import FlamebodeError
from ..outputs import PDF, PNG, SVG, output_target, write_whole
from .export import counts, plan_name, point_rows
from .index import INDEX_NAME
from .reader import open_run


def _date(run: Any) -> str:
    t = run.info.get("created_wall_s")
    try:
        return time.strftime("%Y-%m-%d %H:%M", time.localtime(float(t)))
    except (TypeError, ValueError):
        return "?"


def _rig_name(run: Any) -> str:
    try:
        return str(json.loads(run.info.get("identity") or "{}").get("rig") or "") or run.info.get("rig_source", "")
    except ValueError:
        return str(run.info.get("rig_source", ""))


def list_runs(folder: str | Path) -> list[dict[str, Any]]:
    """Metadata of every run folder at most two levels under ``folder`` (sorted by date)."""
    root = Path(folder)
    if not root.is_dir():
        raise FlamebodeError(f"{root}: not a folder")
    found = sorted({p.parent for pattern in (INDEX_NAME, f"*/{INDEX_NAME}", f"*/*/{INDEX_NAME}")
                    for p in root.glob(pattern)})
    out = []
    for d in found:
        try:
            run = open_run(d, verify=False)
            rows = point_rows(run)
        except (FlamebodeError, OSError, ValueError, sqlite3.Error) as exc:   # one damaged run, not the listing
            out.append({"run_dir": str(d), "problem": str(exc) or type(exc).__name__})
            continue
        c = counts(rows)
        out.append({"run_dir": str(d), "kind": run.kind, "problems": list(run.problems), "plan": plan_name(run), "rig": _rig_name(run),
                    "date": _date(run), "created_wall_s": float(run.info.get("created_wall_s") or 0.0),
                    "amplitudes": sorted({round(float(p["target_ratio"]), 6) for p in run.points}),
                    "n_points": c["n_points"], "n_accepted": c["n_accepted"], "n_flagged": c["n_flagged"],
                    "backend": run.info.get("backend", ""), "ended": run.info.get("last_finish_reason", "")})
    return sorted(out, key=lambda r: r.get("created_wall_s", 0.0))


def _curves(rows: list[dict[str, Any]]) -> dict[float, list[dict[str, Any]]]:
    out: dict[float, list[dict[str, Any]]] = {}
    for r in rows:
        if r["gain"] is not None and r["phase_deg"] is not None:
            out.setdefault(round(float(r["amplitude_ratio_target"]), 9), []).append(r)
    for rs in out.values():
        rs.sort(key=lambda r: r["freq_hz"])
    return out


def _col(rs: list[dict[str, Any]], key: str) -> np.ndarray:
    return np.array([math.nan if r[key] is None else float(r[key]) for r in rs], dtype=float)


def _draw(ax_g: Any, ax_p: Any, rows: list[dict[str, Any]], label: str) -> dict[float, Any]:
    """Each forcing amplitude's curve; returns the colour each was drawn in."""
    colours = {}
    for amp, rs in _curves(rows).items():
        f = _col(rs, "freq_hz")
        flagged = np.array([r["flagged"] for r in rs], dtype=bool)
        name = f"{label}, |u'|/u = {amp:.3g}" if label else f"|u'|/u = {amp:.3g}"
        line = ax_g.errorbar(f, _col(rs, "gain"), yerr=_col(rs, "gain_ci95"), marker="o", ms=4, capsize=2,
                             label=name)
        colour = colours[amp] = line[0].get_color()
        ax_p.errorbar(f, _col(rs, "phase_deg"), yerr=_col(rs, "phase_ci95_deg"), marker="o", ms=4, capsize=2,
                      color=colour)
        if flagged.any():
            for ax, key in ((ax_g, "gain"), (ax_p, "phase_deg")):
                ax.plot(f[flagged], _col(rs, key)[flagged], "o", ms=7, mfc="white", mec=colour, zorder=3)
    return colours


def same_phase_branch(reference: list[dict[str, Any]], rows: list[dict[str, Any]]
                      ) -> tuple[list[dict[str, Any]], int]:
    """``rows`` with their unwrapped phase moved by whole turns onto ``reference``'s branch.

    Each run unwraps its phase from its own first frequency, so two runs of one flame can read
    360° apart (a plan starting at 800 Hz against one from 100 Hz). The turn count is the rounded
    median difference at the frequencies both hold (within 1 % of each other), or, without any,
    against the reference interpolated at this run's lowest frequency inside its range; none
    when the two do not overlap at all. Returns the rows (copies where moved) and the turns."""
    ref = sorted((r["freq_hz"], r["phase_deg"]) for r in reference if r.get("phase_deg") is not None)
    own = [r for r in rows if r.get("phase_deg") is not None]
    if not ref or not own:
        return rows, 0
    rf, rp = np.array([a for a, _ in ref]), np.array([b for _, b in ref])
    diffs = []
    for r in own:
        k = int(np.argmin(np.abs(rf - r["freq_hz"])))
        if abs(rf[k] - r["freq_hz"]) <= 0.01 * r["freq_hz"]:
            diffs.append(rp[k] - r["phase_deg"])
    if not diffs:
        low = min(own, key=lambda r: r["freq_hz"])
        if not rf[0] <= low["freq_hz"] <= rf[-1]:
            return rows, 0
        diffs = [float(np.interp(low["freq_hz"], rf, rp)) - low["phase_deg"]]
    turns = int(round(float(np.median(diffs)) / 360.0))
    if not turns:
        return rows, 0
    return [({**r, "phase_deg": r["phase_deg"] + 360.0 * turns} if r.get("phase_deg") is not None else r)
            for r in rows], turns


def _axes_labels(ax_g: Any, ax_p: Any) -> None:
    ax_g.set_ylabel("gain |F| (-)")
    ax_p.set_ylabel("phase (degrees, unwrapped)")
    ax_p.set_xlabel("frequency (Hz)")
    for ax in (ax_g, ax_p):
        ax.grid(True, alpha=0.4)


def compare(run_dirs: list[str | Path], out: str | Path) -> Path:
    """One gain/phase figure of several runs (PNG or PDF by the suffix)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    if len(run_dirs) < 1:
        raise FlamebodeError("name at least one run folder to compare")
    out = Path(out)
    if out.suffix.lower() not in (".png", ".pdf", ".svg"):
        raise FlamebodeError(f"{out}: write a .png, .pdf or .svg figure (the suffix chooses the format)")
    out = output_target(out, "figure", {".png": PNG, ".pdf": PDF, ".svg": SVG}[out.suffix.lower()])
    fig = Figure(figsize=(8.0, 6.5), layout="constrained")
    FigureCanvasAgg(fig)
    ax_g, ax_p = fig.subplots(2, 1, sharex=True)
    drawn = 0
    first: list[dict[str, Any]] | None = None
    for d in run_dirs:
        run = open_run(d, verify=False)
        rows = point_rows(run)
        drawn += sum(1 for r in rows if r["gain"] is not None and r["phase_deg"] is not None)
        label = f"{plan_name(run) or Path(d).name} ({_date(run)}, {Path(d).name})"
        if first is None:
            first = rows
        else:
            rows, turns = same_phase_branch(first, rows)
            if turns:
                label += f", phase {360 * turns:+d}° to the first run's branch"
        _draw(ax_g, ax_p, rows, label)
    if not drawn:
        raise FlamebodeError("no point with a result in " + ", ".join(str(d) for d in run_dirs) + ": nothing to draw")
    _axes_labels(ax_g, ax_p)
    ax_g.set_title(f"{len(run_dirs)} run(s): 95 % intervals, flagged points hollow; e^(+iwt)", fontsize="medium")
    ax_g.legend(fontsize="x-small")
    return write_whole(out, lambda tmp: fig.savefig(tmp, dpi=150, format=out.suffix.lower()[1:]))


def _fit_lines(rows: list[dict[str, Any]], run: Any, fitted: dict[float, Any] | None = None) -> list[str]:
    from ..core.fdf import fit_saturation
    from ..core.fits import FitError, choose_delays

    lines = []
    curves = _curves(rows)
    for amp, rs in curves.items():
        F = _col(rs, "gain") * np.exp(1j * np.radians(_col(rs, "phase_deg")))
        try:
            best, _ = choose_delays(_col(rs, "freq_hz"), F, _col(rs, "gain_ci95"), _col(rs, "phase_ci95_rad"))
            if fitted is not None:
                fitted[amp] = best
            lines.append(f"|u'|/u = {amp:.3g}: {best.k_terms} Gaussian delay term(s) (lowest AICc)")
            lines += [f"    {t}" for t in best.describe()]
        except FitError as exc:
            lines.append(f"|u'|/u = {amp:.3g}: no model fitted ({exc})")
    if len(curves) > 1:
        from .amplitude import amplitude_test, run_points

        pts = run_points(run)
        lines += amplitude_test(pts).lines()
        try:
            lines.append(fit_saturation([(p.freq_hz, p.amplitude_ratio, p.ftf, p.gain_ci95, p.phase_ci95_rad,
                                          p.coverage) for p in pts]).describe())
        except FitError as exc:
            lines.append(f"saturation: not fitted ({exc})")
    return lines


def _checklist(info: dict[str, Any]) -> str:
    if str(info.get("backend", "")).startswith("sim"):
        return "not required (simulated burner)"
    if info.get("started_from") == "window":
        return "every item ticked in the window before Start (Start refuses otherwise on real hardware)"
    return "not recorded (started from the command line: the lab's own checklist applies)"


def _text_page(fig: Any, title: str, lines: list[str], size: float = 8.0) -> None:
    fig.text(0.06, 0.95, title, fontsize=13, weight="bold", va="top")
    fig.text(0.06, 0.91, "\n".join(lines), fontsize=size, va="top", family="monospace")


def write_report(run_dir: str | Path, out: str | Path | None = None) -> list[Path]:
    """The run's report as a PDF, and each page as a PNG beside it; returns the paths written."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.backends.backend_pdf import PdfPages
    from matplotlib.figure import Figure

    run = open_run(run_dir, verify=False)
    rows = point_rows(run)
    c = counts(rows)
    pdf = Path(out) if out is not None else run.run_dir / "export" / "report.pdf"
    if pdf.suffix.lower() != ".pdf":
        raise FlamebodeError(f"{pdf}: the report is a .pdf file")
    if out is None:
        pdf.parent.mkdir(parents=True, exist_ok=True)      # the run's own export/ folder
    pdf = output_target(pdf, "report PDF", PDF)
    if not any(r["gain"] is not None for r in rows):
        raise FlamebodeError(f"{run.run_dir}: no point with a result to report")
    for k in range(1, 4 + len(rows) // 60):
        output_target(pdf.with_name(f"{pdf.stem}-page{k}.png"), "report page", PNG)
    info = run.info
    calib = ""
    try:
        from ..configfile import read_toml

        rig_data = read_toml(run.rig_path)
        calib = str((rig_data.get("pressure_sensors") or {}).get("calibration", "") if isinstance(
            rig_data.get("pressure_sensors"), dict) else rig_data.get("pressure_calibration", "")) or ""
    except (FlamebodeError, OSError):
        rig_data = {}
    fitted: dict[float, Any] = {}
    flags: dict[str, int] = {}
    for r in rows:
        for fl in filter(None, (r["flags"] or "").split(";")):
            flags[fl] = flags.get(fl, 0) + 1
    head = [f"run folder     {run.run_dir}", f"kind           {run.kind}", f"plan           {plan_name(run)}",
            f"rig            {_rig_name(run)}", f"rig file hash  {info.get('rig_sha256', '?')[:16]}…",
            f"calibration    {calib or 'none named in the rig file (nominal sensitivities)'}",
            f"back-end       {info.get('backend', '?')}" + (" (rehearsal on the simulated burner)"
                                                         if str(info.get('backend', '')).startswith('sim') else ""),
            f"created        {_date(run)}", f"ended          {info.get('last_finish_reason', '?')} "
                                                 f"{info.get('last_finish_detail', '')}".rstrip(),
            "checklist      " + _checklist(info),
            "", f"points         {c['n_accepted']} of {c['n_points']} with a result, {c['n_flagged']} flagged",
            "flags          " + (", ".join(f"{k} x{v}" for k, v in sorted(flags.items())) or "none"),
            "convention     x(t) = Re{x^ exp(+i w t)}: a delay gives a falling phase",
            *[f"PROBLEM        {p}" for p in run.problems], "",
            "flame model and amplitude dependence:"] + [f"  {t}" for t in _fit_lines(rows, run, fitted)]
    pages = []
    fig = Figure(figsize=(8.27, 11.69))
    FigureCanvasAgg(fig)
    _text_page(fig, "flamebode run report", head)
    pages.append(fig)
    fig = Figure(figsize=(8.27, 11.69), layout="constrained")
    FigureCanvasAgg(fig)
    ax_g, ax_p = fig.subplots(2, 1, sharex=True)
    colours = _draw(ax_g, ax_p, rows, "")
    for amp, model in fitted.items():          # the fitted flame model, dashed in its curve's colour, on its branch
        rs = _curves(rows)[amp]
        f = np.linspace(min(r["freq_hz"] for r in rs), max(r["freq_hz"] for r in rs), 300)
        F = model.evaluate(f)
        ph = np.degrees(np.unwrap(np.angle(F)))
        ph += 360.0 * np.round((rs[0]["phase_deg"] - np.interp(rs[0]["freq_hz"], f, ph)) / 360.0)
        ax_g.plot(f, np.abs(F), "--", color=colours.get(amp, "0.35"), lw=1, label=f"fitted model, |u'|/u = {amp:.3g}")
        ax_p.plot(f, ph, "--", color=colours.get(amp, "0.35"), lw=1)
    _axes_labels(ax_g, ax_p)
    ax_g.set_title("response with 95 % intervals; flagged points hollow; dashed: fitted flame model",
                   fontsize="medium")
    ax_g.legend(fontsize="small")
    pages.append(fig)
    table = [f"{'point':>5} {'used':>6} {'f (Hz)':>8} {'target':>7} {'reached':>8} {'gain':>7} {'±95%':>6} "
             f"{'phase':>8} {'±95%':>6}  flags"]
    for r in rows:
        def fmt(v: Any, spec: str) -> str:
            return "-" if v is None else format(v, spec)
        table.append(f"{r['point']:>5} {r['used'] or '-':>6} {r['freq_hz']:>8.1f} {r['amplitude_ratio_target']:>7.4f} "
                     f"{fmt(r['amplitude_ratio_achieved'], '>8.4f')} {fmt(r['gain'], '>7.4f')} "
                     f"{fmt(r['gain_ci95'], '>6.4f')} {fmt(r['phase_deg'], '>+8.1f')} {fmt(r['phase_ci95_deg'], '>6.1f')}"
                     f"  {(r['flags'] or '').replace(';', ', ')}")
    for start in range(0, len(table) - 1, 60):
        fig = Figure(figsize=(8.27, 11.69))
        FigureCanvasAgg(fig)
        _text_page(fig, "points (phase in degrees, unwrapped)", [table[0]] + table[1 + start:61 + start], 7.0)
        pages.append(fig)
    def write_pdf(tmp: Path) -> None:
        with PdfPages(tmp) as doc:
            for page in pages:
                doc.savefig(page)

    written = [write_whole(pdf, write_pdf)]
    for k, page in enumerate(pages, 1):
        png = pdf.with_name(f"{pdf.stem}-page{k}.png")
        written.append(write_whole(png, lambda tmp, page=page: page.savefig(tmp, dpi=80, format="png")))
    return written
