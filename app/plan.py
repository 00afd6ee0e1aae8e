"""The sweep plan: which points to measure, how to tune them, when to flag or stop.

A plan is a plain value loaded from a TOML file (``load_plan(path) -> Plan``), validated
like the rig file (pydantic, unknown keys refused, unit strings through
``app.units.parse_quantity``, every problem reported as a ``ConfigError`` naming file and
key). ``Plan.points()`` lists the points in measuring order and
``Plan.estimated_duration_s()`` estimates the run time, so a plan can be printed, checked
and tested without hardware. Forcing amplitudes are |u'|/u_mean at the reference plane,
stated as peak or rms values (``amplitude.basis``); the engine tunes on the peak value.
Every number is finite and within the bounds stated key by key in docs/plan-file.md
(``app.bounds``), and a plan whose estimated run time exceeds :data:`MAX_RUN_S` is refused.

Imports: standard library, numpy, pydantic, ``app.units``, ``app.bounds``, ``app.configfile``,
``app.errors`` and ``app.rig`` only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from .bounds import number, quantity
from .configfile import load_model, model_from_dict
from .errors import ConfigError
from .rig import MAX_CEILING_V, Rig

# Bounds (SI; docs/plan-file.md states them key by key)
Frequency = quantity("frequency", 1.0, 1e5, unit="Hz")
Ceiling = quantity("voltage", 0.0, MAX_CEILING_V, lo_open=True, unit="V")
Decibels = number(-100.0, 200.0)
MAX_FREQUENCIES = 10000
MAX_POINTS = 10000
MAX_RUN_S = 3 * 86400.0      # a sweep estimated to take longer than three days is refused

RMS_TO_PEAK = math.sqrt(2.0)


PLAN_DOC = "docs/plan-file.md"


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


class LinearRange(_Strict):
    start: Frequency
    stop: Frequency
    step: quantity("frequency", 0.0, 1e5, lo_open=True, unit="Hz")

    @model_validator(mode="after")
    def _order(self) -> "LinearRange":
        if self.stop < self.start:
            raise ValueError("'stop' must not be below 'start'")
        if (self.stop - self.start) / self.step >= MAX_FREQUENCIES:
            raise ValueError(f"more than {MAX_FREQUENCIES} frequencies; use a larger 'step'")
        return self

    def values(self) -> np.ndarray:
        n = int(math.floor((self.stop - self.start) / self.step + 1e-9)) + 1
        return self.start + self.step * np.arange(n)


class LogRange(_Strict):
    start: Frequency
    stop: Frequency
    count: number(2, MAX_FREQUENCIES, integer=True) | None = None
    per_decade: number(1, 1000, integer=True) | None = None

    @model_validator(mode="after")
    def _one(self) -> "LogRange":
        if self.stop <= self.start:
            raise ValueError("'stop' must be above 'start'")
        if (self.count is None) == (self.per_decade is None):
            raise ValueError("give exactly one of 'count' or 'per_decade'")
        return self

    def values(self) -> np.ndarray:
        n = self.count
        if n is None:
            n = int(math.ceil(math.log10(self.stop / self.start) * self.per_decade - 1e-9)) + 1
        return np.geomspace(self.start, self.stop, n)


class Frequencies(_Strict):
    values: tuple[Frequency, ...] = Field(default=(), max_length=MAX_FREQUENCIES)
    linear: LinearRange | None = None
    log: LogRange | None = None

    @model_validator(mode="after")
    def _some(self) -> "Frequencies":
        if not self.values and self.linear is None and self.log is None:
            raise ValueError("give at least one of 'values', 'linear' or 'log'")
        return self

    def all_hz(self) -> np.ndarray:
        """Every frequency of the list and the ranges, sorted, duplicates (within 1e-6 relative) merged."""
        parts = [np.asarray(self.values, dtype=float)]
        parts += [r.values() for r in (self.linear, self.log) if r is not None]
        f = np.sort(np.concatenate(parts))
        keep = np.ones(f.size, dtype=bool)
        keep[1:] = np.diff(f) > 1e-6 * f[1:]
        return f[keep]


class Amplitude(_Strict):
    values: tuple[number(0.0, 2.0, lo_open=True, hi_open=True), ...] = Field(min_length=1, max_length=100)
    basis: Literal["peak", "rms"]

    @property
    def to_peak(self) -> float:
        return RMS_TO_PEAK if self.basis == "rms" else 1.0


class Order(_Strict):
    major: Literal["frequency", "amplitude"] = "frequency"
    frequency: Literal["ascending", "descending"] = "ascending"
    amplitude: Literal["ascending", "descending"] = "ascending"


class Timing(_Strict):
    """[timing]. ``settle = "auto"`` sets ``settle_auto`` and leaves ``settle`` at the plan's
    conservative value (``settle_fallback``, default 0.5 s): the engine then settles each point
    for ``settle_k`` decay time constants of the rig measured by the pre-scan
    (``app.engine.settle``), and for ``settle`` where it has no measured decay."""

    record: quantity("time", 0.01, 3600.0, unit="s")
    settle: quantity("time", 0.0, 3600.0, unit="s") = 0.5
    settle_periods: number(0.0, 1e5) = 0.0
    tuning_window: quantity("time", 0.01, 60.0, unit="s") = 0.3
    tuning_discard: quantity("time", 0.0, 60.0, unit="s") = 0.1
    settle_auto: bool = False
    settle_k: number(1.0, 50.0) = 5.0
    settle_min_periods: number(0.0, 1e4) = 3.0
    settle_floor: quantity("time", 0.0, 60.0, unit="s") = 0.02
    # a point's first tuning window, taken after the whole settle, begins the record when accepted
    record_from_window: bool = False

    @model_validator(mode="before")
    @classmethod
    def _auto(cls, data: Any) -> Any:
        if not isinstance(data, dict):
            return data
        data = dict(data)
        fallback = data.pop("settle_fallback", None)
        if isinstance(data.get("settle"), str) and data["settle"].strip().lower() == "auto":
            data["settle_auto"] = True
            if fallback is None:
                data.pop("settle")
            else:
                data["settle"] = fallback
        elif fallback is not None:
            raise ValueError('settle_fallback is the settle time used by settle = "auto" where the rig\'s '
                             'decay is not measured; give it only with settle = "auto"')
        return data

    def settle_s(self, freq_hz: float) -> float:
        """Settle time: the longer of the seconds and the periods given (with ``settle_auto``, the
        conservative value used where no decay was measured: the worst case for estimates)."""
        return max(self.settle, self.settle_periods / freq_hz)

    def describe_settle(self) -> str:
        """The settle rule in plain words (dry run, run info)."""
        fixed = f"{self.settle:g} s" + (f" or {self.settle_periods:g} periods" if self.settle_periods else "")
        if not self.settle_auto:
            return f"settle {fixed} after the last drive change"
        return (f"settle auto: {self.settle_k:g} decay time constants of the rig at each frequency (from the "
                f"pre-scan's transfer; residual transient e^-{self.settle_k:g} = {math.exp(-self.settle_k):.2%}), "
                f"at least {self.settle_min_periods:g} periods and {self.settle_floor:g} s; {fixed} where the "
                f"decay is not measured (no pre-scan, a line lost, a phase step too large between neighbours)")


class Tuning(_Strict):
    tolerance: number(0.0, 0.5, lo_open=True, hi_open=True) = 0.05
    max_steps: number(1, 100, integer=True) = 8
    ceiling: Ceiling | None = None
    first_drive_fraction: number(0.0, 1.0, lo_open=True) = 0.002
    max_step_factor: number(1.0, 100.0, lo_open=True) = 4.0
    when_unreachable: Literal["record-at-ceiling", "skip"] = "record-at-ceiling"
    prior: tuple[tuple[Frequency, number(0.0, 1e6, lo_open=True)], ...] = Field(default=(), max_length=MAX_FREQUENCIES)


class Quality(_Strict):
    snr_db_min: Decibels = 20.0
    residual_max: number(0.0, 10.0, lo_open=True) = 0.2
    pair_spread_max: number(0.0, 10.0, lo_open=True) = 0.2
    distortion_max: number(0.0, 10.0, lo_open=True) = 0.1
    drift_max: number(0.0, 10.0, lo_open=True) = 0.05
    cond_max: number(1.0, 1e6, lo_open=True) = 10.0
    # a point whose relative 95 % half-width of the FTF gain (or phase, in rad) exceeds this is
    # flagged too-uncertain; 0.3 = ±30 % in gain or ±17° in phase (judgement, see app.core.quality)
    relative_ci95_max: number(0.0, 100.0, lo_open=True) = 0.3


class Prescan(_Strict):
    """[prescan]: the drive-to-velocity transfer measured with a low multi-sine before the first point."""

    enabled: bool = False
    window: quantity("time", 0.05, 60.0, unit="s") = 1.0
    levels: number(1, 6, integer=True) = 3
    total_level: number(0.0, 1.5, lo_open=True) = 1.25   # never above the soft-start promise of 1.5 x target
    precision: number(0.0, 1.0, lo_open=True) = 0.02
    repeat_after: quantity("time", 1.0, 86400.0, unit="s") = 600.0
    table_fresh: quantity("time", 0.0, 30 * 86400.0, unit="s") = 3600.0
    # when the earlier run's table in [tuning] prior was measured (a TOML date-time; no offset:
    # local time); without it the table's age is unknown and it never counts as fresh
    table_measured: datetime | None = None

    def table_age_s(self, now: datetime | None = None) -> float | None:
        """Seconds since ``table_measured`` (None when it is not given)."""
        if self.table_measured is None:
            return None
        when = self.table_measured
        if when.tzinfo is None:
            when = when.astimezone()          # local time
        now = now or datetime.now(timezone.utc)
        return max(0.0, (now - when).total_seconds())

    def worst_case_s(self, ramp_time_s: float = 0.3, discard_s: float = 0.1) -> float:
        """Longest the pre-scan takes: every level's ramps, discard and window."""
        return self.levels * (2.0 * ramp_time_s + discard_s + self.window)


class Survey(_Strict):
    """[survey]: the fast linear survey by multi-sine forcing (LINEAR flame only)."""

    enabled: bool = False
    max_iterations: number(1, 20, integer=True) = 6
    lines_per_record: number(0, MAX_FREQUENCIES, integer=True) = 0
    total_max: number(0.0, 2.0, lo_open=True) = 0.25


class Refinement(_Strict):
    """[refinement]: frequencies inserted where gain or phase change too much between neighbours."""

    enabled: bool = False
    gain_change: number(0.0, 10.0, lo_open=True) = 0.25
    phase_change: quantity("angle", 0.0, 2 * math.pi, lo_open=True, unit="rad") = 0.5
    sigmas: number(0.0, 100.0, lo_open=True) = 3.0
    budget: number(0, MAX_POINTS, integer=True) = 10
    min_spacing: Frequency = 5.0


class FaultLimits(_Strict):
    pressure_max: quantity("pressure", 1.0, 1e5, unit="Pa") = 2000.0
    clip_fraction: number(0.5, 1.0, lo_open=True) = 0.98
    flame_out_fraction: number(0.0, 1.0, lo_open=True, hi_open=True) = 0.3
    light_drift_max: number(0.0, 10.0, lo_open=True) = 0.15
    dead_rms: quantity("voltage", 0.0, 1.0, unit="mV") = 2e-5
    noisy_snr_db_min: Decibels = 0.0
    backend_timeout: quantity("time", 0.1, 600.0, unit="s") = 5.0
    store_timeout: quantity("time", 1.0, 3600.0, unit="s") = 30.0


@dataclass(frozen=True)
class PlanPoint:
    """One point of the sweep. ``amplitude_ratio`` is in the plan's basis; ``peak_ratio`` is peak."""

    index: int
    freq_hz: float
    amplitude_ratio: float
    peak_ratio: float


class Plan(_Strict):
    name: str = Field(min_length=1)
    rig: str | None = None
    scenario: str | None = None
    frequencies: Frequencies
    amplitude: Amplitude
    order: Order = Order()
    timing: Timing
    tuning: Tuning = Tuning()
    quality: Quality = Quality()
    faults: FaultLimits = FaultLimits()
    prescan: Prescan = Prescan()
    survey: Survey = Survey()
    refinement: Refinement = Refinement()
    source_path: str = ""

    @model_validator(mode="after")
    def _size(self) -> "Plan":
        n = self.frequencies.all_hz().size * len(set(self.amplitude.values))
        if n > MAX_POINTS:
            raise ValueError(f"{n} points (frequencies x amplitudes); at most {MAX_POINTS} in one plan")
        problem = self.periods_problem() or self.duration_problem()
        if problem:
            raise ValueError(problem)
        return self

    def periods_problem(self, sample_rate_hz: float | None = None) -> str | None:
        """Why a record or tuning window is too short for the evaluation, or None: each must hold at
        least two periods of the lowest frequency and, at ``sample_rate_hz``, 16 samples."""
        f_min = float(self.frequencies.all_hz().min())
        for key in ("record", "tuning_window"):
            length_s = getattr(self.timing, key)
            if length_s * f_min < 2.0 - 1e-9:
                return (f"timing.{key}: {length_s:g} s holds fewer than two periods of the lowest frequency "
                        f"({f_min:g} Hz); give at least {2.0 / f_min:g} s")
            if sample_rate_hz is not None and length_s * sample_rate_hz < 16:
                return (f"timing.{key}: {length_s:g} s is {length_s * sample_rate_hz:.0f} samples at "
                        f"{sample_rate_hz:g} Hz; give at least {16 / sample_rate_hz:g} s (16 samples)")
        return None

    def duration_problem(self, ramp_time_s: float = 0.3) -> str | None:
        """Why the estimated run time is too long, or None (at most :data:`MAX_RUN_S`)."""
        est = self.estimated_duration_s(ramp_time_s=ramp_time_s)
        if est <= MAX_RUN_S:
            return None
        return (f"the sweep would take about {est / 86400:.1f} days (estimated: {len(self.points())} points, "
                f"timing.record {self.timing.record:g} s, settle up to {self.timing.settle_s(self.frequencies.all_hz().min()):g} s); "
                f"at most {MAX_RUN_S / 86400:g} days per run: use fewer points or shorter records and settle times")

    def points(self) -> list[PlanPoint]:
        freqs = self.frequencies.all_hz()
        if self.order.frequency == "descending":
            freqs = freqs[::-1]
        amps = sorted(dict.fromkeys(self.amplitude.values), reverse=self.order.amplitude == "descending")
        if self.order.major == "frequency":
            pairs = [(float(f), a) for f in freqs for a in amps]
        else:
            pairs = [(float(f), a) for a in amps for f in freqs]
        k = self.amplitude.to_peak
        return [PlanPoint(i, f, a, a * k) for i, (f, a) in enumerate(pairs)]

    def ceiling_v(self, rig: Rig) -> float:
        """The lower of the plan's ceiling and the rig's (the rig's when the plan gives none)."""
        return rig.drive.ceiling if self.tuning.ceiling is None else min(self.tuning.ceiling, rig.drive.ceiling)

    def check_against(self, rig: Rig) -> None:
        """Raise ConfigError (naming the plan file and key) where the plan does not fit the rig."""
        problems = []
        if self.tuning.ceiling is not None and self.tuning.ceiling > rig.drive.ceiling:
            problems.append(f"tuning.ceiling: {self.tuning.ceiling:g} V is above the rig's ceiling "
                            f"{rig.drive.ceiling:g} V (drive.ceiling in {rig.source_path or 'the rig file'})")
        nyquist = rig.acquisition.sample_rate / 2.0
        f_max = float(self.frequencies.all_hz().max())
        if f_max >= 0.8 * nyquist:
            problems.append(f"frequencies: {f_max:g} Hz is too close to half the sample rate ({nyquist:g} Hz of "
                            f"acquisition.sample_rate {rig.acquisition.sample_rate:g} Hz): below {0.8 * nyquist:g} "
                            f"Hz only")
        from .core.calibration import duct_cut_on_hz

        cut_on = duct_cut_on_hz(rig)
        if f_max >= cut_on:
            problems.append(f"frequencies: {f_max:g} Hz is at or above the duct's first transverse cut-on, "
                            f"{cut_on:.0f} Hz (1.8412 c/(2π r) with the duct's radius and the gas at the sensors): "
                            f"above it the sound in the duct is no longer a plane wave, and the multi-microphone "
                            f"method does not hold; below {cut_on:.0f} Hz only")
        for problem in (self.periods_problem(rig.acquisition.sample_rate),
                        self.duration_problem(ramp_time_s=rig.drive.ramp_time)):
            if problem:
                problems.append(problem)
        from .calibration_file import band_problems   # a calibration is never extrapolated

        problems += [f"frequencies: {p}" for p in band_problems(rig, self.frequencies.all_hz())]
        if problems:
            raise ConfigError(self.source_path or "<plan>", problems)

    def estimated_duration_s(self, ramp_time_s: float = 0.3, tuning_steps: float = 2.6,
                             overhead_s: float = 0.05) -> float:
        """Rough run time: per point ``tuning_steps`` windows (each after a ramp and a discard),
        the part of the settle time the last window has not already covered, the record and a
        small evaluation/storage overhead; plus the final ramp down."""
        t = self.timing
        total = ramp_time_s
        for p in self.points():
            n_periods_window = math.ceil(t.tuning_window * p.freq_hz)
            window_s = n_periods_window / p.freq_hz
            step_s = ramp_time_s + t.tuning_discard + window_s
            settle_left = max(0.0, t.settle_s(p.freq_hz) - t.tuning_discard - window_s)
            total += tuning_steps * step_s + settle_left + t.record + overhead_s
        if self.prescan.enabled:
            total += self.prescan.worst_case_s(ramp_time_s, t.tuning_discard)
        return total + self.refinement_worst_case_s(ramp_time_s)

    def refinement_worst_case_s(self, ramp_time_s: float = 0.3) -> float:
        """Longest the refinement's budget can add: every inserted point at the plan's longest
        per-point time (all tuning steps at the lowest frequency's window); 0 when it is off."""
        r, t = self.refinement, self.timing
        if not r.enabled or r.budget == 0:
            return 0.0
        f_min = float(self.frequencies.all_hz().min())
        window_s = math.ceil(t.tuning_window * f_min) / f_min
        per_point = (self.tuning.max_steps * (ramp_time_s + t.tuning_discard + window_s)
                     + t.settle_s(f_min) + t.record + 0.05)
        return r.budget * per_point * len(set(self.amplitude.values))

    def describe_checks(self, rig: Rig | None = None) -> list[str]:
        """The checks the engine will run, in plain words (for --dry-run)."""
        q, fl, tu = self.quality, self.faults, self.tuning
        ceiling = f"{self.ceiling_v(rig):g} V" if rig is not None else (
            f"{tu.ceiling:g} V" if tu.ceiling else "the rig's ceiling")
        unreachable = ("record at the ceiling and flag" if tu.when_unreachable == "record-at-ceiling"
                       else "skip the point and flag")
        extra = []
        if self.prescan.enabled:
            extra.append(f"pre-scan: a multi-sine at every plan frequency before the first point, the sum of its "
                         f"lines at most {self.prescan.total_level:g} x the smallest target, its peak under the "
                         f"ceiling (about {self.prescan.worst_case_s():.0f} s at most)")
        if self.survey.enabled and len(set(self.amplitude.values)) > 1:
            extra.append("multi-sine survey: NOT made for this plan: it has several forcing amplitudes (an FDF) and a "
                         "multi-sine measures the linear FTF only; every point is measured with a sine")
        elif self.survey.enabled:
            extra.append(f"multi-sine survey: lines forced together, the sum of their targets at most "
                         f"{self.survey.total_max:g}; the LINEAR FTF only (a non-linear flame couples the lines)")
        if self.refinement.enabled:
            extra.append(f"refinement: up to {self.refinement.budget} inserted points (flagged 'refined') where gain "
                         f"changes by more than {self.refinement.gain_change:.0%} or phase by more than "
                         f"{math.degrees(self.refinement.phase_change):.3g} deg between neighbours; worst case "
                         f"{self.refinement_worst_case_s(0.3) / 60:.1f} min more")
        return [
            f"drive never above {ceiling} peak; unreachable target: {unreachable}",
            f"tuning within {tu.tolerance:.1%} of the target in at most {tu.max_steps} steps "
            f"(else flag 'tuning-not-converged')",
            f"input clipping at {fl.clip_fraction:.0%} of the input range, or flat tops at any level (flag the point)",
            "light above the rig's safe maximum (abort)",
            "no flame at the start: the mean light must exceed the dark offset by more than a lit flame's "
            "least signal (light.min_flame_signal, or 4 x light.dark_offset_uncertainty), else the sweep ends "
            "before any drive",
            f"flame-out: mean light above dark below {fl.flame_out_fraction:.0%} of the start value, checked "
            f"every block (abort at once)",
            "output monitor: the drive reference above the ceiling, or 30 % above the command (abort)"
            + ("" if rig is None or rig.drive.reference_channel else " - not active: the rig has no "
               "drive.reference_channel"),
            f"dead sensor: rms below {fl.dead_rms * 1e3:g} mV (abort); noisy sensor: "
            f"pressure SNR below {fl.noisy_snr_db_min:g} dB (flag)",
            f"pressure amplitude above {fl.pressure_max:g} Pa (drive to zero, skip the point)",
            f"back-end silent for {fl.backend_timeout:g} s (abort)",
            f"mean light drift beyond {fl.light_drift_max:.0%} of the start value (flag)",
            f"quality flags: SNR < {q.snr_db_min:g} dB, residual > {q.residual_max:g}, pair spread > "
            f"{q.pair_spread_max:g}, distortion > {q.distortion_max:g}, drift > {q.drift_max:g}, "
            f"cond > {q.cond_max:g}",
        ] + extra

    def resolve(self, name: Literal["rig", "scenario"]) -> Path | None:
        """The plan's default rig or scenario file, relative to the plan file."""
        value = getattr(self, name)
        if value is None:
            return None
        p = Path(value)
        return p if p.is_absolute() else Path(self.source_path).parent / p


def plan_from_dict(data: dict[str, Any], path: str = "<plan>", units_required: bool = False) -> Plan:
    """Validate a plan given as a dict: SI numbers, or with ``units_required`` (the text of a file) units."""
    return model_from_dict(Plan, data, str(path), PLAN_DOC, units_required=units_required)


def load_plan(path: str | Path, rig: Rig | None = None, units_required: bool = True) -> Plan:
    """Load and validate a plan file; with ``rig``, also check it against that rig.

    ``units_required=False`` reads an old file's bare durations as seconds."""
    plan = load_model(Plan, path, PLAN_DOC, units_required=units_required)
    if rig is not None:
        plan.check_against(rig)
    return plan
