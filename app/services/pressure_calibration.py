"""Relative calibration of the pressure sensors, once, for every front end.

Two methods (docs/calibration-file.md): *common plane*, every sensor in a calibration holder at
one axial plane, a stepped sine tuned so that the reference sensor reads a target pressure, the
factors C_i = G_ref,ref / G_ref,i per frequency (app.core.calibration), optionally checked
against a second reference; and *sensor swap* in the duct (Chung & Blaser 1980,
app.core.sensor_swap), one pass as mounted and one per other sensor exchanged with the reference.
:func:`run_calibration` takes a :class:`Request` (the options as typed, parsed here so that a
mistake names its entry), drives the holder (:mod:`app.services.holder_run`: ceiling guard, soft
start, halt), writes the calibration file atomically (nothing on a stop or a failed check, an
older file of that name left as it was), compares it with the previous calibration in the
commissioning record (drift) and notes it there, and returns an :class:`Outcome`.

What happens along the way is said through an :class:`Operator`: progress lines, warnings, the
wait for each sensor swap (on real hardware; the simulated burner makes the swap itself) and the
stop scope held around each pass. ``flamebode calibrate`` (app.commands.calibrate) prints and
holds the stop signals; the window's commissioning panel shows the lines and a button for the
swap, and its stop button halts the pass.

Must not import Qt, pyqtgraph, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
from contextlib import AbstractContextManager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from ..errors import FlamebodeError

MAX_PRESSURE_PA = 200.0      # 137 dB re 20 µPa: a holder target above this is refused
MAX_FREQUENCIES = 1000
METHODS = ("common-plane", "sensor-swap")
CAUTIONS = {
    "common-plane": "caution: the sensors must be mounted in the calibration holder; the speaker will be driven loud "
                    "(hearing protection), within the rig's drive ceiling; the laboratory's own rules come first",
    "sensor-swap": "caution: the speaker will be driven loud in the duct (hearing protection), within the rig's drive "
                   "ceiling; the flame should be off for a calibration; the laboratory's own rules come first",
}


class CalibrationRunError(FlamebodeError):
    """The calibration cannot run as asked; the message names the entry (option or field)."""


class CalibrationStopped(FlamebodeError):
    """A stop (a signal, the window's stop button) ended the run: output zeroed, nothing written."""

    def __init__(self, why: str, out: Path, exit_code: int = 1):
        self.exit_code = exit_code
        super().__init__(f"{why}: outputs zeroed at once; nothing written "
                         f"({out} {'left as it was' if out.exists() else 'not created'})")


# ----------------------------------------------------------------------------- requests and results
@dataclass(frozen=True)
class Request:
    """The options as the person typed them (text where a unit is needed)."""

    rig: str | Path
    out: str | Path
    method: str = "common-plane"
    band: str = "100-2000"
    step_hz: float = 50.0
    reference: str | None = None
    check_reference: str | None = None
    pressure: str = "20 Pa"
    record: str = "1 s"
    segments: int = 16
    commissioning_record: str | Path | None = None
    backend: str = "simulated"
    scenario: str | Path | None = None
    fast: bool = False
    seed: int | None = None
    names: dict[str, str] = field(default_factory=dict)   # entry -> how the front end calls it (default: --option)

    def entry(self, key: str) -> str:
        return self.names.get(key, "--" + key.replace("_", "-").replace("-hz", ""))


@dataclass(frozen=True)
class Outcome:
    """A calibration written: the file, what it holds, the drift found and what to tell the operator."""

    path: Path
    method: str
    reference: str
    freq_hz: tuple[float, ...]
    sensors: tuple[str, ...]
    largest_gain_deviation: tuple[float, ...]      # max |gain - 1| per sensor over the band
    largest_phase_deg: tuple[float, ...]           # max |phase| per sensor over the band
    lowest_coherence: float
    drifted: tuple[str, ...]
    use_line: str                                  # the rig-file line that makes the sweeps use it
    record_path: Path | None


class Operator(Protocol):
    """What the run says and asks on its way (the command line prints; the window shows)."""

    def say(self, line: str) -> None: ...

    def warn(self, line: str) -> None: ...

    def wait_for_swap(self, instruction: str) -> None:
        """Return once the operator has made the swap ``instruction`` describes (drive at zero);
        raise a FlamebodeError to end the run with nothing written."""

    def stop_scope(self, holder: Any, out: Path) -> AbstractContextManager[Any]:
        """Held around each pass; ``holder.halt(why)`` stops it. On leaving, a scope that
        stopped the pass raises :class:`CalibrationStopped`."""


# ----------------------------------------------------------------------------- options
def coherence_text(worst: float) -> str:
    """The lowest coherence as a person reads it: four decimals, or, when it rounds to 1, how
    far below 1 it is (1 - coherence is what sets the factors' uncertainty)."""
    if 1.0 - worst >= 5e-5:
        return f"coherence >= {worst:.4f}"
    return f"coherence >= 1 - {max(1.0 - worst, 1e-12):.1e}"


def parse_band(text: str, step_hz: float, band_entry: str = "--band", step_entry: str = "--step") -> list[float]:
    lo_s, sep, hi_s = str(text).partition("-")
    try:
        lo, hi = float(lo_s), float(hi_s)
    except ValueError:
        raise CalibrationRunError(f"{band_entry} {text!r}: expected LOW-HIGH in Hz, e.g. 100-2000") from None
    if not sep or not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo <= hi):
        raise CalibrationRunError(f"{band_entry} {text!r}: expected LOW-HIGH in Hz with 0 < LOW <= HIGH")
    if not (math.isfinite(step_hz) and step_hz > 0):
        raise CalibrationRunError(f"{step_entry} {step_hz!r}: must be a number of Hz > 0")
    steps = (hi - lo) / step_hz
    if not steps < MAX_FREQUENCIES:            # also a step so small that the count overflows
        raise CalibrationRunError(f"{band_entry} {text} with {step_entry} {step_hz:g} gives more than "
                                  f"{MAX_FREQUENCIES} frequencies; give a larger step")
    n = int(math.floor(steps + 1e-9)) + 1
    freqs = [round(lo + k * step_hz, 9) for k in range(n)]
    if hi - freqs[-1] > 1e-9 * hi:             # the step misses the band's top: it is measured too (a
        freqs.append(round(hi, 9))             # calibration is never extrapolated to it)
    return freqs


def parse_step(text: str, entry: str = "--step") -> float:
    """A frequency step typed with or without 'Hz'."""
    from ..units import parse_quantity

    try:
        return float(text)
    except ValueError:
        pass
    try:
        return float(parse_quantity(text, "frequency", unit_required=True))
    except (ValueError, TypeError) as exc:
        raise CalibrationRunError(f"{entry} {text!r}: {exc}") from None


def _quantity(entry: str, text: str, kind: str, lo: float, hi: float, unit: str) -> float:
    from ..units import parse_quantity

    try:
        float(text)
    except ValueError:
        pass
    else:   # a bare number: Pa or dB? seconds or periods? Never guessed for a drive target
        raise CalibrationRunError(f"{entry} {text!r}: give the unit, e.g. \"{text} {unit}\"")
    try:
        value = parse_quantity(text, kind, unit_required=True)
    except (ValueError, TypeError) as exc:
        raise CalibrationRunError(f"{entry} {text!r}: {exc}") from None
    if not lo < value <= hi:
        raise CalibrationRunError(f"{entry} {text!r}: must be more than {lo:g} {unit} and at most {hi:g} {unit}")
    return value


def _sensor(rig: Any, name: str | None, entry: str) -> str:
    names = [s.channel for s in rig.pressure_sensors]
    if not name:
        return names[0]
    if name not in names:
        raise CalibrationRunError(f"{entry} {name!r}: not a pressure sensor of {rig.source_path} "
                                  f"({', '.join(names)})")
    return name


def _is_calibration(p: Path) -> bool:
    """An existing calibration file (it may be replaced by a new calibration)."""
    import tomllib

    from ..calibration_file import FORMAT

    return p.stat().st_size == 0 or tomllib.loads(p.read_text(encoding="utf-8")).get("format") == FORMAT


@dataclass(frozen=True)
class _Plan:
    rig: Any
    reference: str
    second: str | None
    freqs: list[float]
    cut_on: float
    target_pa: float
    record_s: float
    out: Path


def _plan(req: Request, op: Operator) -> _Plan:
    """Every option checked before anything is driven."""
    from ..core import calibration as core
    from ..outputs import output_target
    from ..rig import load_rig

    if req.method not in METHODS:
        raise CalibrationRunError(f"{req.entry('method')} {req.method!r}: one of {', '.join(METHODS)}")
    # the sensors as they are: the calibration the rig names (gone, made before a sensor moved, or
    # fine) is not read, so that a rig is never locked out of the calibration that would mend it
    rig = load_rig(req.rig, attach_calibration=False)
    if rig.pressure_calibration:
        op.say(f"the rig names the calibration {rig.pressure_calibration!r}; it is not read here: this run "
               f"measures the sensors anew")
    reference = _sensor(rig, req.reference, req.entry("reference"))
    second = _sensor(rig, req.check_reference, req.entry("check_reference")) if req.check_reference else None
    if second == reference:
        raise CalibrationRunError(f"{req.entry('check_reference')} {second}: must differ from the reference sensor")
    if second and req.method == "sensor-swap":
        raise CalibrationRunError(f"{req.entry('check_reference')}: the sensor-swap method has no second reference; "
                                  "use it with the common-plane method")
    target_pa = _quantity(req.entry("pressure"), req.pressure, "pressure", 0.0, MAX_PRESSURE_PA, "Pa")
    record_s = _quantity(req.entry("record"), req.record, "time", 0.0, 600.0, "s")
    if not 4 <= req.segments <= 256:
        raise CalibrationRunError(f"{req.entry('segments')} {req.segments}: must be from 4 to 256")
    freqs = parse_band(req.band, req.step_hz, req.entry("band"), req.entry("step_hz"))
    fs = rig.acquisition.sample_rate
    if freqs[-1] >= 0.45 * fs:
        raise CalibrationRunError(f"{req.entry('band')} {req.band}: {freqs[-1]:g} Hz is too close to half the rig's "
                                  f"{fs:g} Hz sample rate ({fs / 2:g} Hz)")
    cut_on = core.duct_cut_on_hz(rig)
    freqs, refused = core.split_at_cut_on(freqs, cut_on)
    if refused:
        op.warn(f"warning: refused {', '.join(f'{f:g}' for f in refused)} Hz: at or above the duct's first transverse "
                f"cut-on {cut_on:.0f} Hz (radius {rig.duct.radius_m * 1e3:g} mm), where the sensors at one plane no "
                f"longer see one pressure")
    if not freqs:
        raise CalibrationRunError(f"{req.entry('band')} {req.band}: every frequency is at or above the cut-on "
                                  f"{cut_on:.0f} Hz")
    from ..core.calibration import MIN_PERIODS_PER_SEGMENT, MIN_SEGMENTS

    need = 1.02 * MIN_SEGMENTS * MIN_PERIODS_PER_SEGMENT / min(freqs)   # checked before anything is driven
    if record_s < need:
        raise CalibrationRunError(f"{req.entry('record')} {req.record!r}: holds {record_s * min(freqs):g} periods of "
                                  f"the lowest frequency {min(freqs):g} Hz; at least "
                                  f"{MIN_SEGMENTS * MIN_PERIODS_PER_SEGMENT:g} are needed: give at least "
                                  f"{math.ceil(need * 1000) / 1000:g} s")
    if len(freqs) == 1:
        op.warn(f"warning: one frequency only ({freqs[0]:g} Hz): a sweep can use this calibration at exactly "
                f"{freqs[0]:g} Hz and nowhere else (a calibration is never extrapolated); give a band LOW-HIGH "
                f"that covers the plan's frequencies")
    out = output_target(req.out, "calibration file", _is_calibration)   # never over a rig file or a run's files
    record = _record_path(req)
    if out.resolve() == record.resolve():
        raise CalibrationRunError(f"{req.entry('out')} {req.out}: that is the rig's commissioning record, which this "
                                  f"run notes the calibration in; give the calibration file another name")
    return _Plan(rig, reference, second, freqs, cut_on, target_pa, record_s, out)


# ----------------------------------------------------------------------------- run
def run_calibration(req: Request, op: Operator) -> Outcome:
    """The whole calibration as asked; raises :class:`CalibrationRunError` (nothing driven, or
    nothing written) or :class:`CalibrationStopped`."""
    plan = _plan(req, op)
    if req.method == "sensor-swap":
        cal, check = _swap(req, plan, op)
    else:
        cal, check = _common_plane(req, plan, op)
    # A stop that comes after the last pass, while the drift is compared, still ends the run with
    # nothing written: the comparison runs inside a stop scope of its own (the drive is already at
    # zero and closed), and leaving it raises CalibrationStopped before the file is written.
    with op.stop_scope(_AtZero(), plan.out):
        earlier = _earlier_date(req)               # "" when there is no earlier calibration to compare with
        drifted = drift_since_last(req, cal, op)   # before the file is written: it may replace the last one
    written = _write(plan.out, cal, plan.rig, req, plan.target_pa, plan.record_s, plan.cut_on, check)
    op.say(f"calibration file: {written}")
    record = _note_in_record(req, plan.rig, written, plan.reference, plan.freqs, check, drifted, op, earlier)
    use = f"pressure_calibration = {json.dumps(str(written.resolve()))}"
    op.say(f"to use it, add to {plan.rig.source_path} (before its first table): {use}")
    others = [j for j, n in enumerate(cal.sensors) if n != cal.reference] or list(range(len(cal.sensors)))
    return Outcome(written, cal.method, cal.reference, tuple(float(f) for f in cal.freq_hz), tuple(cal.sensors),
                   tuple(float(np.max(np.abs(np.abs(cal.factor[:, j]) - 1.0))) for j in range(len(cal.sensors))),
                   tuple(float(np.max(np.abs(np.degrees(np.angle(cal.factor[:, j]))))) for j in range(len(cal.sensors))),
                   float(cal.coherence[:, others].min()), tuple(drifted), use, record)


class _AtZero:
    """The holder of the stop scope after the last pass: its drive is already zero and closed."""

    halted: str | None = None

    def halt(self, why: str) -> None:
        self.halted = why


def _open(req: Request, rig: Any, holder: bool) -> Any:
    from drivers.registry import open_backend

    if req.backend == "simulated":
        return open_backend("simulated", rig, scenario=str(req.scenario) if req.scenario else None,
                            real_time=not req.fast, seed=req.seed, **({"holder": True} if holder else {}))
    return open_backend(req.backend, rig)


def drive_pass(holder: Any, device: Any, freqs: list[float], on_record: Any, out: Path, op: Operator) -> None:
    """One stepped-sine pass of ``holder`` over ``freqs``; whatever happens the drive ends at zero
    (ramped, or zeroed at once if the ramp fails) and the back-end is closed; a stop raises
    :class:`CalibrationStopped` (from the operator's stop scope; nothing written)."""
    from drivers.registry import close_backend

    from .holder_run import Halted

    with op.stop_scope(holder, out):
        try:
            holder.run(freqs, on_record)
        except Halted:
            pass
        except FlamebodeError:
            if holder.halted is None:    # after a stop, a refused request (halt latched) is the stop itself
                raise
        finally:
            try:
                holder.ramp_to_zero()
            except Exception as exc:     # never leave the drive on: zero it at once instead
                holder.halt(f"the ramp to zero failed: {exc}")
                op.warn(f"warning: the ramp to zero failed ({exc}); the output was zeroed at once")
            finally:
                close_backend(device)


def _common_plane(req: Request, plan: _Plan, op: Operator) -> tuple[Any, Any]:
    from ..core import calibration as core
    from .holder_run import DriveSettings, HolderRun

    rig, reference, second = plan.rig, plan.reference, plan.second
    sensors = [s.channel for s in rig.pressure_sensors]
    sens = [s.sensitivity for s in rig.pressure_sensors]
    if req.backend != "simulated":
        op.warn(CAUTIONS["common-plane"])
    device = _open(req, rig, holder=True)
    settings = DriveSettings(target_pa=plan.target_pa, ceiling_v=rig.drive.ceiling)
    holder = HolderRun(device, sensors, sens, reference, settings, plan.record_s, rig.acquisition.block_duration)
    results: dict[str, list[core.FrequencyFactors]] = {reference: [], **({second: []} if second else {})}
    freqs = plan.freqs
    op.say(f"calibrating {len(sensors)} sensors of {rig.name} against {reference}: {len(freqs)} frequencies "
           f"{freqs[0]:g}-{freqs[-1]:g} Hz at {plan.target_pa:g} Pa, cut-on {plan.cut_on:.0f} Hz")

    def on_record(rec: Any) -> None:
        for ref in results:
            results[ref].append(core.calibrate_record(rec.pressures, sensors, ref, device.sample_rate_hz,
                                                      rec.freq_hz, req.segments))
        q = results[reference][-1]
        others = [j for j, n in enumerate(sensors) if n != reference]
        note = "  (ceiling reached: below the target)" if rec.at_ceiling else ""
        op.say(f"  {rec.freq_hz:8.1f} Hz  drive {rec.drive_v * 1e3:8.2f} mV  {rec.pressure_pa:7.2f} Pa  "
               f"{coherence_text(float(q.coherence[others].min()))}  "
               f"u(gain) <= {q.u_gain_rel[others].max() * 100:.3f} %{note}")

    drive_pass(holder, device, freqs, on_record, plan.out, op)
    cal = core.assemble(results[reference], sensors, reference)
    check = None
    if second:
        check = core.consistency(cal, core.assemble(results[second], sensors, second))
        op.say(f"check against {second}: largest deviation {check.worst_z:.2f} standard uncertainties "
               f"({check.worst_part} of {check.worst_sensor} at {check.worst_freq_hz:g} Hz)")
        if not check.consistent:
            raise CalibrationRunError(
                f"the calibrations against {reference} and {second} disagree: the {check.worst_part} of "
                f"{check.worst_sensor} at {check.worst_freq_hz:g} Hz by {check.worst_z:.1f} standard "
                f"uncertainties (limit {check.limit:g}); nothing written. Check the holder (every sensor at "
                f"one plane, sealed) and repeat")
    return cal, check


def swapped_rig(rig: Any, a: str, b: str) -> Any:
    """``rig`` with the axial positions of pressure sensors ``a`` and ``b`` exchanged."""
    pos = {s.channel: s.position for s in rig.pressure_sensors}
    sensors = [s.model_copy(update={"position": pos[b] if s.channel == a else pos[a] if s.channel == b
                                    else s.position}) for s in rig.pressure_sensors]
    return rig.model_copy(update={"pressure_sensors": tuple(sensors)})


def _swap(req: Request, plan: _Plan, op: Operator) -> tuple[Any, None]:
    from ..core import calibration as core
    from ..core.sensor_swap import swap_factors
    from .holder_run import DriveSettings, HolderRun

    rig, reference, freqs = plan.rig, plan.reference, plan.freqs
    sensors = [s.channel for s in rig.pressure_sensors]
    sens = [s.sensitivity for s in rig.pressure_sensors]
    r = sensors.index(reference)
    others = [n for n in sensors if n != reference]
    settings = DriveSettings(target_pa=plan.target_pa, ceiling_v=rig.drive.ceiling)
    simulated = req.backend == "simulated"
    if not simulated:
        op.warn(CAUTIONS["sensor-swap"])
    op.say(f"calibrating {len(sensors)} sensors of {rig.name} by swapping each with {reference}: {len(freqs)} "
           f"frequencies {freqs[0]:g}-{freqs[-1]:g} Hz at {plan.target_pa:g} Pa, cut-on {plan.cut_on:.0f} Hz, "
           f"{len(others) + 1} passes")
    phasors: dict[str | None, dict[float, Any]] = {}
    undo = None
    for swapped in [None, *others]:
        if swapped is not None:
            if simulated:
                op.say(f"(simulated) {undo + ' back, then ' if undo else ''}{swapped} and {reference} exchanged")
            else:
                what = (f"put {undo} back in its place, then " if undo else "") + \
                    f"exchange the sensors on {reference} and {swapped}"
                op.wait_for_swap(f"the drive is at zero: {what} (each keeps its cable), seal them")
            undo = swapped
        layout = rig if swapped is None or not simulated else swapped_rig(rig, reference, swapped)
        device = _open(req, layout, holder=False)
        holder = HolderRun(device, sensors, sens, reference, settings, plan.record_s, rig.acquisition.block_duration)
        got: dict[float, Any] = {}
        label = "as mounted" if swapped is None else reference + "<->" + swapped

        def on_record(rec: Any, got: dict = got, device: Any = device, label: str = label) -> None:
            got[rec.freq_hz] = core.segment_phasors(rec.pressures, device.sample_rate_hz, rec.freq_hz, req.segments)
            op.say(f"  {label:>12s} {rec.freq_hz:8.1f} Hz  drive {rec.drive_v * 1e3:8.2f} mV  "
                   f"{rec.pressure_pa:7.2f} Pa")

        drive_pass(holder, device, freqs, on_record, plan.out, op)
        phasors[swapped] = got
    if not simulated and undo:
        op.say(f"put {undo} back in its place before measuring")
    points = [swap_factors(phasors[None][f], {sensors.index(o): phasors[o][f] for o in others}, r, f) for f in freqs]
    cal = core.assemble(points, sensors, reference, method="sensor-swap")
    worst = float(cal.coherence[:, [sensors.index(o) for o in others]].min())
    op.say(f"lowest {coherence_text(worst)}; largest u(gain) {cal.u_gain_rel.max() * 100:.3f} %")
    return cal, None


# ----------------------------------------------------------------------------- file and record
def core_calibration(cf: Any) -> Any:
    """A calibration file's factors as the core's :class:`~app.core.calibration.Calibration`."""
    from ..core.calibration import Calibration

    g = np.array([s.gain for s in cf.sensors]).T
    ph = np.radians(np.array([s.phase_deg for s in cf.sensors]).T)
    return Calibration(tuple(s.name for s in cf.sensors), cf.reference, np.array(cf.frequency_hz), g * np.exp(1j * ph),
                       np.array([s.u_gain for s in cf.sensors]).T, np.radians(np.array([s.u_phase_deg
                                                                                        for s in cf.sensors]).T),
                       np.array([s.coherence for s in cf.sensors]).T, cf.method, str(getattr(cf, "source", "")))


def _record_path(req: Request) -> Path:
    from ..commissioning_record import record_path_for

    return Path(req.commissioning_record) if req.commissioning_record else record_path_for(req.rig)


def drift_since_last(req: Request, cal: Any, op: Operator) -> list[str]:
    """Sensors whose factors moved beyond their uncertainties (app.core.sensor_drift) since the record's previous
    calibration (said either way); a previous file that is gone or unreadable is said."""
    from ..calibration_file import read_calibration
    from ..commissioning_record import read_record
    from ..core.sensor_drift import drift_limit, sensor_drift

    try:
        last = read_record(_record_path(req)).latest("pressure-calibration")
    except FlamebodeError:
        return []
    if last is None:
        op.say("drift: no earlier calibration in the commissioning record to compare with")
        return []
    try:
        previous = core_calibration(read_calibration(last.result.get("file", "")))
        drift = sensor_drift(previous, cal)
    except (FlamebodeError, OSError, ValueError) as exc:
        op.say(f"drift: not compared with the calibration of {last.date} ({exc})")
        return []
    moved = [d for d in drift if d.drifted]
    for d in moved:
        amount = f"{d.change * 100:+.2f} %" if d.part == "gain" else f"{np.degrees(d.change):+.2f} deg"
        op.say(f"drift: {d.sensor} {d.part} changed by {amount} at {d.freq_hz:g} Hz since {last.date} "
               f"({d.z:.1f} standard uncertainties): check its mounting, cable and certificate")
    if not moved:
        op.say(f"drift: no sensor moved beyond its uncertainty since {last.date} (limit "
               f"{drift_limit(len(cal.freq_hz)):.1f} standard uncertainties, 1 % false alarms per sensor)")
    return list(dict.fromkeys(d.sensor for d in moved))


def _earlier_date(req: Request) -> str:
    """The date of the record's newest pressure calibration ("" when none, or the record is unreadable)."""
    from ..commissioning_record import read_record

    try:
        last = read_record(_record_path(req)).latest("pressure-calibration")
    except FlamebodeError:
        return ""
    return "" if last is None else str(last.date)


def _note_in_record(req: Request, rig: Any, written: Path, reference: str, freqs: list[float], check: Any,
                    drifted: list[str], op: Operator, earlier: str = "") -> Path | None:
    """The calibration in the rig's commissioning record (app.commissioning_record); a record that
    cannot be written is said, and the calibration file already written stays."""
    from ..calibration_file import rig_identity
    from ..commissioning_record import Check, append_check, now_utc

    result: dict[str, Any] = {"file": str(written.resolve()), "reference": reference, "band_low_hz": float(freqs[0]),
                              "band_high_hz": float(freqs[-1]), "n_frequencies": len(freqs), "drifted": list(drifted),
                              "compared_with": earlier}
    if check is not None:
        result["check_worst_z"] = float(check.worst_z)
    try:
        rec = append_check(_record_path(req), rig.name,
                           Check("pressure-calibration", now_utc(), req.backend, rig_identity(rig), result))
    except FlamebodeError as exc:
        op.warn(f"warning: the commissioning record was not updated: {exc}")
        return None
    op.say(f"commissioning record: {rec.path}")
    return Path(rec.path)


def calibration_file_of(cal: Any, rig: Any, conditions: dict[str, Any], cut_on_hz: float,
                        created: str | None = None) -> Any:
    """The file's contents for a core :class:`~app.core.calibration.Calibration` made on ``rig``."""
    from ..calibration_file import CalibrationFile, SensorFactors, rig_identity

    phase = np.degrees(np.unwrap(np.angle(cal.factor), axis=0))
    sensors = []
    for s in rig.pressure_sensors:
        col = cal.column(s.channel)
        sensors.append(SensorFactors(
            name=s.channel, sensitivity_v_pa=float(s.sensitivity), position_m=float(s.position),
            gain=tuple(float(v) for v in np.abs(cal.factor[:, col])), phase_deg=tuple(float(v) for v in phase[:, col]),
            u_gain=tuple(float(v) for v in cal.u_gain_rel[:, col]),
            u_phase_deg=tuple(float(v) for v in np.degrees(cal.u_phase_rad[:, col])),
            coherence=tuple(float(v) for v in cal.coherence[:, col]), serial=str(getattr(s, "serial", "") or "")))
    when = created or _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    return CalibrationFile(created=when, method=cal.method, reference=cal.reference, rig_name=rig.name,
                           rig_identity=rig_identity(rig), frequency_hz=tuple(float(f) for f in cal.freq_hz),
                           sensors=tuple(sensors), cut_on_hz=float(cut_on_hz),
                           rig_file=str(Path(rig.source_path).resolve()) if rig.source_path else "",
                           conditions=conditions)


def _write(out: Path, cal: Any, rig: Any, req: Request, target_pa: float, record_s: float, cut_on: float,
           check: Any) -> Path:
    from ..calibration_file import write_calibration

    conditions: dict[str, Any] = {"backend": req.backend, "pressure_pa": target_pa, "record_s": record_s,
                                  "segments": req.segments}
    if req.backend == "simulated" and req.seed is not None:
        conditions["simulated_seed"] = req.seed
    if check is not None:
        conditions.update({"check_reference": req.check_reference, "check_worst_z": check.worst_z})
    try:
        return write_calibration(out, calibration_file_of(cal, rig, conditions, cut_on))
    except OSError as exc:
        raise CalibrationRunError(f"{req.entry('out')} {out}: could not be written ({exc.strerror or exc})") from None


__all__ = ["CAUTIONS", "METHODS", "CalibrationRunError", "CalibrationStopped", "Operator", "Outcome", "Request",
           "calibration_file_of", "coherence_text", "core_calibration", "drive_pass", "parse_band", "parse_step",
           "run_calibration", "swapped_rig"]
