"""``flamebode fit RUN_DIR [RUN_DIR ...]``: flame models fitted to accepted points, per forcing amplitude.

Models: ``n-tau`` (F = n e^{-iωτ}), ``conical`` (the laminar conical flame, n and τ_c),
``rational`` (poles and residues with a pure delay by vector fitting, ``app.core.rational``,
with its state-space form) or ``delays`` (a sum of K Gaussian distributed delays; K chosen by
AICc up to ``--terms`` (at most one per three points), or fixed with ``--terms K --fixed``),
optionally with the low-frequency limit F(0) = 1 of a perfectly premixed flame (``--unit-gain``). Each point is
weighted by its own 95 % intervals (and coverage factors where the run stored them). Prints
the parameters with their 95 % intervals, the reduced χ² and the AIC; a flagged point is
used unless ``--good-only``. With two or more amplitudes (an FDF) it also says whether the
response at the two lowest amplitudes is the same within the uncertainties, naming the
frequencies where it is not, and fits a saturation limit across amplitudes
(``app.core.fdf``). Several FTF runs of one rig and operating point (same duct and gas sections)
are pooled by amplitude the same way (``app.storage.amplitude``); other runs are refused. The
fitting itself is ``app.core.fits``. Must not import Qt.
"""

from __future__ import annotations

import argparse
from pathlib import Path
import sys
from collections import defaultdict

MAX_TERMS = 4          # Gaussian delay terms (12 parameters): more is never identified from a sweep


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dirs", nargs="+", metavar="RUN_DIR",
                   help="run folder written by 'flamebode sweep'; several FTF runs of one rig and operating point "
                        "at different amplitudes are fitted per amplitude and tested for amplitude dependence "
                        "together")
    p.add_argument("--model", choices=("n-tau", "conical", "delays", "rational"), default="delays",
                   help="flame model (default: delays; conical: the laminar conical flame, parameters n and tau_c; "
                        "rational: poles and residues with a pure delay, by vector fitting, with its state-space "
                        "form)")
    p.add_argument("--poles", type=int, default=6, help="rational: number of poles (default 6)")
    p.add_argument("--terms", type=int, default=3, help="delays: at most this many Gaussian terms, 1-4 (default 3)")
    p.add_argument("--fixed", action="store_true", help="delays: exactly --terms terms, no choice by AIC")
    p.add_argument("--unit-gain", action="store_true", help="delays: impose F(0) = 1 (perfectly premixed flame)")
    p.add_argument("--good-only", action="store_true", help="leave flagged points out")
    p.add_argument("--save", metavar="FILE", help="write the points and the fitted models to FILE (.mat or .h5; "
                                                  "one run only)")
    p.add_argument("--convention", choices=("plus", "minus"), default="plus",
                   help="time convention of the saved file: plus = e^{+iwt} (flamebode's), minus = e^{-iwt} "
                        "(conjugated)")


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from ..core.fits import FitError, choose_delays, fit
    from ..storage.amplitude import require_same_operating_point, run_points
    from ..storage.reader import open_run

    from ..storage.index import require_run_folder

    if not 1 <= args.terms <= MAX_TERMS:
        raise FitError(f"--terms {args.terms}: must be 1 to {MAX_TERMS}")
    if args.unit_gain and args.model != "delays":
        raise FitError(f"--unit-gain applies to --model delays only; {args.model} fits its gain n (compare n with 1 "
                       "by its interval)")
    if args.save and len(args.run_dirs) > 1:
        raise FitError(f"--save writes one run's points; {len(args.run_dirs)} runs given (save each run on its own)")
    if args.save:
        from ..outputs import output_target
        from ..storage.interchange import _is_interchange

        output_target(args.save, "points file written by flamebode", _is_interchange)   # before any work
    runs = [open_run(require_run_folder(d), verify=False) for d in args.run_dirs]
    for run_ in runs:
        for problem in run_.problems:        # what review would say of this run, said here too
            print(f"flamebode fit: problem: {problem}", file=sys.stderr)
    seen: dict[tuple[str, str], str] = {}
    for d, run_ in zip(args.run_dirs, runs):   # one run (or a copy of it) twice would count its points twice
        key = (str(run_.info.get("created_wall_s", "")), str(run_.info.get("identity", "")))
        if str(Path(d).resolve()) in seen.values() or (key[0] and key in seen):
            raise FitError(f"{d}: the same run as {seen.get(key, d)} (created at the same moment): each run once")
        seen[key] = str(Path(d).resolve())
    require_same_operating_point(runs)
    points = [p for run_ in runs for p in run_points(run_)]
    skipped = sum(1 for p in points if p.flagged) if args.good_only else 0
    points = [p for p in points if not (args.good_only and p.flagged)]
    by_amp: dict[float, list] = defaultdict(list)
    for p in points:
        by_amp[round(p.amplitude_ratio, 9)].append(p)
    label = " + ".join(args.run_dirs)
    if not by_amp:
        raise FitError(f"{label}: no accepted point with a result to fit")
    print(f"run {label}: {args.model} fit, e^{{+iwt}} convention"
          + (f"; {skipped} flagged point(s) left out" if skipped else ""))
    failed = 0
    saved_models = []
    for amp, pts in sorted(by_amp.items()):
        f = np.array([p.freq_hz for p in pts])
        F = np.array([p.ftf for p in pts])
        gci = np.array([p.gain_ci95 for p in pts])
        pci = np.array([p.phase_ci95_rad for p in pts])
        k = np.array([p.coverage for p in pts])
        runs_here = sorted({p.run for p in pts})
        print(f"|u'|/u_mean = {amp:g}: {len(pts)} points, {f.min():g}-{f.max():g} Hz"
              + (f" (from {', '.join(runs_here)})" if len(runs) > 1 else ""))
        try:
            if args.model == "n-tau":
                result, others = fit(f, F, gci, pci, "n_tau", coverage=k), []
            elif args.model == "conical":
                result, others = fit(f, F, gci, pci, "conical", coverage=k), []
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
            advice = ("try --model delays" if args.model in ("n-tau", "conical") else
                      "try more poles" if args.model == "rational" else
                      "more terms are not supported by these points" if not args.fixed
                      else "try without --fixed (terms chosen by AICc)")
            print(f"  note: the model does not fit within the points' intervals (reduced chi2 > 3): {advice}, "
                  "or look at the flagged points")
    if len(by_amp) > 1:
        _amplitude_report(points)
    if args.save:
        from ..storage.interchange import CONVENTIONS, write_interchange

        path = write_interchange(args.run_dirs[0], args.save, args.convention, saved_models)
        print(f"wrote {path} (points and {len(saved_models)} fitted model(s), {CONVENTIONS[args.convention]})")
    return 1 if failed == len(by_amp) else 0


def _amplitude_report(points: list) -> None:
    from ..core.fdf import fit_saturation
    from ..core.fits import FitError
    from ..storage.amplitude import amplitude_test

    for line in amplitude_test(points).lines():
        print(line)
    try:
        print(fit_saturation([(p.freq_hz, p.amplitude_ratio, p.ftf, p.gain_ci95, p.phase_ci95_rad, p.coverage)
                              for p in points]).describe())
    except FitError as exc:
        print(f"saturation: not fitted: {exc}")
