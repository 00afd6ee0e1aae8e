"""The multi-sine survey: a fast LINEAR FTF, several plan frequencies forced at once.

The plan's points (per forcing amplitude) are grouped into records of a few lines each, so
that the sum of the lines' targets stays within ``[survey] total_max`` (a bound on the peak
of the total forcing: the flame sees the sum of the lines, and a flame near blow-off must
not see many times one point's target). For each group the vector of line amplitudes is
tuned together: each window measures every line's velocity at the reference plane (the
other lines removed, ``app.core.multisine``) and every line's drive is stepped on its own
(secant-free proportional step, the linear-acoustics answer, limited per step and by the
peak of the sum under the ceiling) until every line is within the plan's tolerance; a line
whose drive would take the sum past the ceiling leaves the group and is measured with a sine
afterwards. One
record then gives the FTF at every line, each stored as its own point flagged ``multisine``.

CAUTION: a non-linear flame couples the lines (intermodulation, a shared saturation), so a
multi-sine FTF is the linear FTF only; describing-function (FDF) points need sines. The
survey is refused for a plan with more than one forcing amplitude per frequency for that
reason (the engine says so and measures with sines).

Imports: numpy, ``app.core.multisine``, ``drivers.protocols`` (protocols only) and this package.
Never Qt, never storage, never a concrete back-end.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from app.core.multisine import LineGrid, evaluate_lines, line_grid, measure_lines, schroeder_phases
from drivers.protocols import MultiSineDrive

from . import states as S
from .events import TuningStep
from .faults import Finding
from .prescan import within_ceiling
from .sweep import _Recording

MULTISINE_FLAG = "multisine"
CAUTION = ("multi-sine survey: the FTF of a LINEAR flame only (a non-linear flame couples the lines); "
           "use sines for amplitude-dependent points")


def unavailable_reason(plan: Any, drive: Any) -> str:
    """Why the survey cannot run ("" when it can)."""
    if not isinstance(drive, MultiSineDrive):
        return "the back-end cannot put out a multi-sine (no MultiSineDrive capability)"
    if len(set(plan.amplitude.values)) > 1:
        return "the plan has several forcing amplitudes (an FDF): a multi-sine measures the linear FTF only"
    return ""


def groups(points: list, total_max: float, lines_per_record: int) -> list[list]:
    """Points in records: contiguous in frequency, the sum of their peak targets within ``total_max``."""
    out: list[list] = []
    current: list = []
    for p in sorted(points, key=lambda q: q.freq_hz):
        full = lines_per_record and len(current) >= lines_per_record
        if current and (full or sum(q.peak_ratio for q in current) + p.peak_ratio > total_max + 1e-12):
            out.append(current)
            current = []
        current.append(p)
    if current:
        out.append(current)
    return out


class Survey:
    """Runs the survey on an engine (its drive, blocks, checks and store step)."""

    def __init__(self, engine: Any):
        self.e = engine
        self.settings = engine.plan.survey

    def run(self) -> None:
        e = self.e
        for group in groups(e.points, self.settings.total_max, self.settings.lines_per_record):
            e._raise_if_ending()
            if e._cmd.stop:
                return
            self._group(group)

    # ------------------------------------------------------------------ one record of lines
    def _group(self, points: list) -> None:
        e, plan = self.e, self.e.plan
        e._point_index = points[0].index
        e._point_flags = []
        e._set_state(S.PREPARING)
        e._boundary(resume_to=S.PREPARING)
        started = time.time()
        grid = line_grid([p.freq_hz for p in points], e._fs, max_period_s=plan.timing.tuning_window)
        phases = schroeder_phases(len(points))
        targets = np.array([p.peak_ratio for p in points])
        amps = self._first_amplitudes(points)
        tol = plan.tuning.tolerance
        e._set_state(S.TUNING)
        history: list[list[tuple[float, float, float]]] = [[] for _ in points]
        ratios = np.zeros(len(points))
        for step in range(1, self.settings.max_iterations + 1):
            amps = self._within_ceiling(grid, amps, phases)
            e._set_multisine(grid, amps, phases)
            e._wait_drive_settled(S.TUNING)
            e._discard(int(round(plan.timing.tuning_discard * e._fs)), S.TUNING)
            n = grid.periods_for(plan.timing.tuning_window) * grid.period_samples
            window = e._take(n, S.TUNING)
            e._react(e.checks.check_window(window, e._channels, e._drive_v, f"survey at {self._where(points)}"),
                     skip_ok=False)
            estimates = measure_lines(window, e._channels, e._fs, grid, e.rig)
            ratios = np.array([est.amplitude_ratio if est is not None else 0.0 for est in estimates])
            sigmas = np.array([est.sigma_ratio if est is not None else np.inf for est in estimates])
            within = np.abs(ratios / targets - 1.0) <= tol
            k = plan.amplitude.to_peak
            for i, p in enumerate(points):
                history[i].append((float(amps[i]), float(ratios[i] / k), n / e._fs))
                e.tuning_history[p.index] = tuple(history[i])
                e.bus.publish(TuningStep(point_index=p.index, step=step, drive_v=float(amps[i]),
                                         measured_ratio=float(ratios[i] / k), target_ratio=p.amplitude_ratio,
                                         tolerance=tol, window_s=n / e._fs, within_tolerance=bool(within[i])))
            if within.all():
                break
            amps = self._next(amps, ratios, sigmas, targets)
            if len(points) > 1 and not np.allclose(self._within_ceiling(grid, amps, phases), amps):
                # the sum would pass the ceiling: the line needing the most drive goes to the sines
                drop = int(np.argmax(amps))
                keep = [i for i in range(len(points)) if i != drop]
                e.tuning_history.pop(points[drop].index, None)
                points = [points[i] for i in keep]
                history = [history[i] for i in keep]
                amps, targets = amps[keep], targets[keep]
                grid = line_grid([p.freq_hz for p in points], e._fs, max_period_s=plan.timing.tuning_window)
                phases = schroeder_phases(len(points))
        for p in points:
            e.stats.tuning_steps.append(len(history[0]))
        e._set_state(S.SETTLING)
        left = int(round(plan.timing.settle * e._fs)) - e._settled_samples()
        if left > 0:
            e._discard(left, S.SETTLING)
        e._set_state(S.RECORDING)
        n_rec = grid.periods_for(plan.timing.record) * grid.period_samples
        # cut short (halt, abort, fault): stored as evidence under its first line, flagged interrupted
        e._recording = _Recording(points[0], e._drive_v, started)
        record = e._take(n_rec, S.RECORDING)
        e.stats.recorded_samples += n_rec
        recorded = time.time()
        e._react(e.checks.check_window(record, e._channels, e._drive_v, f"survey record at {self._where(points)}"),
                 skip_ok=False)
        e._set_state(S.EVALUATING)
        e._recording = None
        results = evaluate_lines(record, e._channels, e._fs, grid, e.rig)
        e._set_state(S.STORING)
        off = [not (abs(r / t - 1.0) <= tol) for r, t in zip(ratios, targets)]
        for p, a, result, off_target in zip(points, amps, results, off):
            e._point_index = p.index
            if result is None:
                e._point_flags = [MULTISINE_FLAG]
                e._publish_finding(Finding("evaluation-failed", f"survey line at {p.freq_hz:g} Hz could not be "
                                           f"evaluated"))
                continue
            # judged on the evaluated record, as a sine point is (the tuning estimate may differ)
            off_target = off_target or abs(float(result.velocity.amplitude_ratio) / p.peak_ratio - 1.0) > tol
            e._point_flags = [MULTISINE_FLAG] + (["amplitude-off-target"] if off_target else [])
            e.controller.learn(p.freq_hz, p.peak_ratio, float(a), float(result.velocity.amplitude_ratio))
            e._store(p, float(a), record, result, started, recorded)
            e._surveyed.add(p.index)
        e._boundary(resume_to=S.PREPARING)

    # ------------------------------------------------------------------ amplitudes
    def _first_amplitudes(self, points: list) -> np.ndarray:
        """From the pre-scan seed (or what was learned) where there is one, else the cold first voltage;
        each at most the target's voltage (soft start: a first window never above the target)."""
        c = self.e.controller
        out = []
        for p in points:
            tuner = c.start_point(p.freq_hz, p.peak_ratio)
            out.append(tuner.first_drive())
        return np.array(out)

    def _next(self, amps: np.ndarray, ratios: np.ndarray, sigmas: np.ndarray, targets: np.ndarray) -> np.ndarray:
        s = self.e.controller.settings
        clean = ratios >= s.noise_sigmas * sigmas
        bound = np.maximum(ratios, 0.0) + s.noise_sigmas * np.where(np.isfinite(sigmas), sigmas, 0.0)
        factor = np.where(clean, targets / np.where(ratios > 0, ratios, 1.0),
                          targets / np.where(bound > 0, bound, targets))
        factor = np.minimum(factor, np.where(clean, s.clean_step_factor, s.max_step_factor))
        return amps * factor

    def _within_ceiling(self, grid: LineGrid, amps: np.ndarray, phases: np.ndarray) -> np.ndarray:
        return within_ceiling(grid, amps, phases, self.e.ceiling_v)

    @staticmethod
    def _where(points: list) -> str:
        return f"{points[0].freq_hz:g}-{points[-1].freq_hz:g} Hz ({len(points)} lines)"
