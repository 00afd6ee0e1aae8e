"""``flamebode fit RUN_DIR``: flame models fitted to a run's accepted points, per forcing amplitude.

Models: ``n-tau`` (F = n e^{-iωτ}), ``rational`` (poles and residues with a pure delay by
vector fitting, ``app.core.rational``, with its state-space form) or ``delays`` (a sum of K Gaussian distributed delays; K
chosen by AICc up to ``--terms`` (at most one per three points), or fixed with ``--terms K --fixed``), optionally with the
low-frequency limit F(0) = 1 of a perfectly premixed flame (``--unit-gain``). Each point is
weighted by its own 95 % intervals (and coverage factors where the run stored them). Prints
the parameters with their 95 % intervals, the reduced χ² and the AIC; a flagged point is
used unless ``--good-only``. With two or more amplitudes (an FDF) it also says whether the
response at the two lowest amplitudes is the same within the uncertainties, naming the
frequencies where it is not, and fits a saturation limit across amplitudes
(``app.core.fdf``). The fitting itself is ``app.core.fits``. Must not import Qt.
"""

from __future__ import annotations

import argparse
import math
import sys
from collections import defaultdict

MAX_TERMS = 4          # Gaussian delay terms (12 parameters): more is never identified from a sweep


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="run folder written by 'flamebode sweep'")
    p.add_argument("--model", choices=("n-tau", "delays", "rational"), default="delays",
                   help="flame model (default: delays; rational: poles and residues with a pure delay, by vector "
                        "fitting, with its state-space form)")
    p.add_argument("--poles", type=int, default=6, help="rational: number of poles (default 6)")
    p.add_argument("--terms", type=int, default=3, help="delays: at most this many Gaussian terms, 1-4 (default 3)")
    p.add_argument("--fixed", action="store_true", help="delays: exactly --terms terms, no choice by AIC")
    p.add_argument("--unit-gain", action="store_true", help="impose F(0) = 1 (perfectly premixed flame)")
    p.add_argument("--good-only", action="store_true", help="leave flagged points out")
    p.add_argument("--save", metavar="FILE", help="write the points and the fitted models to FILE (.mat or .h5)")
    p.add_argument("--convention", choices=("plus", "minus"), default="plus",
                   help="time convention of the saved file: plus = e^{+iwt} (flamebode's), minus = e^{-iwt} "
                        "(conjugated)")


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from ..core.fits import Z95, FitError, choose_delays, fit
    from ..storage.reader import open_run

    from ..storage.export import finite_number, point_rows
    from ..storage.index import require_run_folder

    if not 1 <= args.terms <= MAX_TERMS:
        raise FitError(f"--terms {args.terms}: must be 1 to {MAX_TERMS}")
    if args.save:
        from ..outputs import output_target
        from ..storage.interchange import _is_interchange

        output_target(args.save, "points file written by flamebode fit", _is_interchange)   # before any work
    run_ = open_run(require_run_folder(args.run_dir), verify=False)
    for problem in run_.problems:        # what review would say of this run, said here too
        print(f"flamebode fit: problem: {problem}", file=sys.stderr)
    coverage = {i + 1: finite_number(a.get("analysis", {}).get("coverage_factor_gain"), positive=True) or Z95
                for i, a in run_.accepted().items()}
    by_amp: dict[float, list[tuple[float, complex, float, float, float]]] = defaultdict(list)
    skipped = 0
    for r in point_rows(run_):          # numbers checked there: text, inf or a negative interval never reach a fit
        if r["status"] != "accepted" or r["gain"] is None or r["phase_wrapped_rad"] is None:
            continue
        if not (r["freq_hz"] is not None and math.isfinite(float(r["freq_hz"])) and float(r["freq_hz"]) > 0):
            continue
        if args.good_only and r["flagged"]:
            skipped += 1
            continue
        by_amp[round(float(r["amplitude_ratio_target"]), 9)].append(
            (float(r["freq_hz"]), complex(r["gain"] * np.exp(1j * r["phase_wrapped_rad"])),
             r["gain_ci95"] if r["gain_ci95"] is not None else math.nan,
             r["phase_ci95_rad"] if r["phase_ci95_rad"] is not None else math.nan, coverage.get(r["point"], Z95)))
    if not by_amp:
        raise FitError(f"{args.run_dir}: no accepted point with a result to fit")
    print(f"run {args.run_dir}: {args.model} fit, e^{{+iwt}} convention"
          + (f"; {skipped} flagged point(s) left out" if skipped else ""))
    failed = 0
    saved_models = []
    for amp, pts in sorted(by_amp.items()):
        f, F, gci, pci, k = (np.array(c) for c in zip(*pts))
        print(f"|u'|/u_mean = {amp:g}: {len(pts)} points, {f.min():g}-{f.max():g} Hz")
        try:
            if args.model == "n-tau":
                result, others = fit(f, F, gci, pci, "n_tau", coverage=k), []
            elif args.model == "rational":
                from ..core.rational import vector_fit

                result, others = vector_fit(f, F, gci, pci, args.poles, coverage=float(np.median(k))), []
            elif args.fixed:
                result, others = fit(f, F, gci, pci, "delays", args.terms, args.unit_gain, coverage=k), []
            else:
                result, others = choose_delays(f, F, gci, pci, args.terms, args.unit_gain, coverage=k)
        except FitError as exc:
            print(f"  not fitted: {exc}")
            failed += 1
            continue
        if others:
            print("  terms by AICc: " + ", ".join(f"K={r.k_terms} AICc {r.aic:.4g}" for r in others)
                  + f" -> K={result.k_terms}")
        saved_models.append((amp, result))
        for line in result.describe():
            print(f"  {line}")
        if result.reduced_chi2 > 3:
            advice = ("try --model delays" if args.model == "n-tau" else
                      "try more poles" if args.model == "rational" else
                      "more terms are not supported by these points" if not args.fixed
                      else "try without --fixed (terms chosen by AICc)")
            print(f"  note: the model does not fit within the points' intervals (reduced chi2 > 3): {advice}, "
                  "or look at the flagged points")
    if len(by_amp) > 1:
        _amplitude_report(by_amp)
    if args.save:
        from ..storage.interchange import CONVENTIONS, write_interchange

        path = write_interchange(args.run_dir, args.save, args.convention, saved_models)
        print(f"wrote {path} (points and {len(saved_models)} fitted model(s), {CONVENTIONS[args.convention]})")
    return 1 if failed == len(by_amp) else 0


def _amplitude_report(by_amp: dict) -> None:
    from ..core.fdf import amplitude_independence, fit_saturation
    from ..core.fits import FitError

    points = [(f, amp, F, g, p, k) for amp, pts in by_amp.items() for f, F, g, p, k in pts]
    comparisons = amplitude_independence(points)
    if comparisons:
        bad = [c for c in comparisons if c.fails]
        lo = sorted(by_amp)[:2]
        print(f"amplitude dependence: at the two lowest amplitudes ({lo[0]:g}, {lo[1]:g}) the response is the same "
              f"within the uncertainties at {len(comparisons) - len(bad)} of {len(comparisons)} frequencies "
              f"(5 % test per frequency: about 1 in 20 differs by chance)")
        if bad:
            print("  differs at: " + ", ".join(f"{c.freq_hz:g} Hz (p = {c.p_value:.2g})" for c in bad))
        if len(bad) > max(1, 0.1 * len(comparisons)):
            print("  note: the lowest amplitudes are not in the linear range at these frequencies; report it "
                  "with the FTF")
    try:
        print(fit_saturation(points).describe())
    except FitError as exc:
        print(f"saturation: not fitted: {exc}")
