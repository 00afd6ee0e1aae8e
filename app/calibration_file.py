"""Calibration files of the pressure sensors: our own TOML format (docs/calibration-file.md).

A calibration file holds, per frequency and pressure sensor, the relative correction factor
C (gain and phase, p_true = C · p_measured) with its standard uncertainty and coherence,
dated, with the method, the reference sensor and the identity of the rig it was made on.
:func:`write_calibration` writes it atomically (a temporary file in the same folder, flushed
to disk, then renamed over the target), so a stop or a crash never leaves half a file and an
older file of the same name stays whole until the new one is complete.

A rig file names one with ``pressure_calibration = "cal.toml"`` (relative to the rig file);
:func:`attach` reads it, checks it against the rig (rig identity, sensor names, the band, a
malformed or corrupt file) and puts its factors into the sensors' calibration tables, or
raises :class:`CalibrationFileError` naming the file and the problem. Nothing is applied
silently: a file that does not fit is refused as a whole. The factors' standard uncertainties
(``u_gain``, ``u_phase_deg``) go with them: each point's error budget carries them in place of
the sensors' stated ``gain_uncertainty`` / ``phase_uncertainty``.

The rig identity is a SHA-256 over what the factors depend on: the rig's name, the duct
radius and each pressure sensor's channel, position and nominal sensitivity (not the whole
rig file, which changes when the calibration is referenced in it).

Imports: standard library, ``app.configfile``, ``app.errors`` and (for types) ``app.rig``.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import stat
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Sequence

from .configfile import read_toml
from .errors import ConfigError

if TYPE_CHECKING:  # app.rig imports this module lazily; the types are only for reading
    from .rig import Rig

FORMAT = "flamebode-calibration"
VERSION = 1
DOC = "docs/calibration-file.md"
METHODS = ("common-plane", "sensor-swap")
ARRAYS = ("gain", "phase_deg", "u_gain", "u_phase_deg", "coherence")


class CalibrationFileError(ConfigError):
    """A calibration file is corrupt, malformed, or does not fit the rig that names it."""


@dataclass(frozen=True)
class SensorFactors:
    """One sensor's factors over the file's frequencies (tuples, one value per frequency)."""

    name: str
    sensitivity_v_pa: float       # the rig file's nominal sensitivity when calibrated
    position_m: float
    gain: tuple[float, ...]
    phase_deg: tuple[float, ...]
    u_gain: tuple[float, ...]     # relative standard uncertainty of the gain
    u_phase_deg: tuple[float, ...]
    coherence: tuple[float, ...]  # γ² with the reference sensor
    serial: str = ""


@dataclass(frozen=True)
class CalibrationFile:
    created: str                  # ISO 8601, UTC
    method: str
    reference: str
    rig_name: str
    rig_identity: str
    frequency_hz: tuple[float, ...]
    sensors: tuple[SensorFactors, ...]
    cut_on_hz: float
    rig_file: str = ""
    conditions: dict[str, Any] = field(default_factory=dict)
    path: str = ""

    @property
    def band_hz(self) -> tuple[float, float]:
        return self.frequency_hz[0], self.frequency_hz[-1]

    def sensor(self, name: str) -> SensorFactors:
        for s in self.sensors:
            if s.name == name:
                return s
        raise KeyError(name)


# ----------------------------------------------------------------------------- identity
def rig_identity(rig: "Rig") -> str:
    """SHA-256 over the rig's name, duct radius and each sensor's channel, position and sensitivity."""
    what = {"name": rig.name, "duct_radius_m": repr(float(rig.duct.radius_m)),
            "sensors": [[s.channel, repr(float(s.position)), repr(float(s.sensitivity))]
                        for s in rig.pressure_sensors]}
    return "sha256:" + hashlib.sha256(json.dumps(what, sort_keys=True).encode()).hexdigest()


# ----------------------------------------------------------------------------- writing
def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        v = float(value) if isinstance(value, float) else value
        if isinstance(v, float) and not math.isfinite(v):
            raise ValueError(f"cannot write a non-finite number {v!r} to a calibration file")
        return repr(v)
    if isinstance(value, str):
        return json.dumps(value)          # a JSON string is a valid TOML basic string
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} to a calibration file")


def to_toml(cal: CalibrationFile) -> str:
    """The file's text (see docs/calibration-file.md)."""
    top = {"format": FORMAT, "version": VERSION, "created": cal.created, "method": cal.method,
           "reference": cal.reference, "rig_name": cal.rig_name, "rig_identity": cal.rig_identity,
           "rig_file": cal.rig_file, "cut_on_hz": cal.cut_on_hz,
           "sensors": [s.name for s in cal.sensors], "frequency_hz": list(cal.frequency_hz)}
    lines = [f"# Relative calibration of the pressure sensors, written by flamebode ({DOC}).",
             "# C = gain * exp(i phase): p_true = C * p_measured, relative to the reference sensor."]
    lines += [f"{k} = {_toml_value(v)}" for k, v in top.items()]
    if cal.conditions:
        lines += ["", "[conditions]"] + [f"{json.dumps(str(k))} = {_toml_value(v)}" for k, v in cal.conditions.items()]
    for s in cal.sensors:
        lines += ["", f"[sensor.{json.dumps(s.name)}]", f"serial = {_toml_value(s.serial)}",
                  f"sensitivity_v_pa = {_toml_value(s.sensitivity_v_pa)}", f"position_m = {_toml_value(s.position_m)}"]
        lines += [f"{name} = {_toml_value(list(getattr(s, name)))}" for name in ARRAYS]
    return "\n".join(lines) + "\n"


def write_calibration(path: str | Path, cal: CalibrationFile) -> Path:
    """Write ``cal`` to ``path`` atomically: temporary file, fsync, rename over the target."""
    target = Path(path)
    if target.is_symlink():        # a link (to a shared folder's file): the file it points at is written
        target = target.resolve()
    text = to_toml(cal)
    folder = target.parent if str(target.parent) else Path(".")
    if target.exists():            # the replaced file's permissions are kept (mkstemp's are 0600)
        mode = stat.S_IMODE(target.stat().st_mode)
    else:                          # a new file: as open() would make it, under the umask
        umask = os.umask(0)
        os.umask(umask)
        mode = 0o666 & ~umask
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return target


# ----------------------------------------------------------------------------- reading
def _numbers(table: dict[str, Any], key: str, where: str, n: int, problems: list[str],
             lo: float = -math.inf, hi: float = math.inf, lo_open: bool = False,
             lo_warn: float | None = None) -> tuple[float, ...]:
    value = table.get(key)
    if not isinstance(value, list) or any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in value):
        problems.append(f"{where}.{key}: required list of numbers is missing or holds something else")
        return ()
    out = tuple(float(v) for v in value)
    if len(out) != n:
        problems.append(f"{where}.{key}: {len(out)} values, but frequency_hz has {n}")
    bad = [v for v in out if not math.isfinite(v) or v < lo or v > hi or (lo_open and v == lo)]
    if bad:
        rng = f"{'more than' if lo_open else 'at least'} {lo:g}" + (f" and at most {hi:g}" if math.isfinite(hi) else "")
        problems.append(f"{where}.{key}: {bad[0]!r} is not a finite number {rng}")
    elif lo_warn is not None and any(v < lo_warn for v in out):   # a factor below 1/100: no sensor that works
        problems.append(f"{where}.{key}: {min(out)!r} is below {lo_warn:g}: a factor of more than 100 between two "
                        f"sensors is not a calibration (at least {lo_warn:g} and at most {hi:g})")
    return out


def _text(data: dict[str, Any], key: str, problems: list[str], where: str = "") -> str:
    value = data.get(key)
    if not isinstance(value, str) or not value:
        problems.append(f"{where}{key}: required text is missing or not text")
        return ""
    return value


def parse_calibration(data: dict[str, Any], path: str) -> CalibrationFile:
    """Check a calibration file's contents; every problem is named with its key."""
    if data.get("format") != FORMAT:
        raise CalibrationFileError(path, [f"format: this is not a flamebode calibration file (expected "
                                          f"format = \"{FORMAT}\", see {DOC})"])
    if data.get("version") != VERSION:
        raise CalibrationFileError(path, [f"version: {data.get('version')!r} is not a version this flamebode "
                                          f"reads ({VERSION})"])
    problems: list[str] = []
    created, method, reference = (_text(data, k, problems) for k in ("created", "method", "reference"))
    rig_name, identity = _text(data, "rig_name", problems), _text(data, "rig_identity", problems)
    if method and method not in METHODS:
        problems.append(f"method: {method!r} is not one of {', '.join(METHODS)}")
    freqs = _numbers(data, "frequency_hz", "(top level)", len(data.get("frequency_hz") or []), problems,
                     lo=0.0, lo_open=True)
    if freqs and any(b <= a for a, b in zip(freqs, freqs[1:])):
        problems.append("frequency_hz: frequencies must be strictly increasing")
    if not freqs:
        problems.append("frequency_hz: no frequency")
    cut_on = data.get("cut_on_hz")
    if isinstance(cut_on, bool) or not isinstance(cut_on, (int, float)) or not cut_on > 0:
        problems.append("cut_on_hz: required number > 0 is missing or not a number")
        cut_on = math.nan
    names = data.get("sensors")
    tables = data.get("sensor")
    if not isinstance(names, list) or not names or not all(isinstance(n, str) and n for n in names):
        problems.append("sensors: required list of sensor names is missing or not a list of names")
        names = []
    if not isinstance(tables, dict):
        problems.append("sensor: the per-sensor tables [sensor.<name>] are missing")
        tables = {}
    sensors = []
    for name in names:
        t = tables.get(name)
        where = f"sensor.{name}"
        if not isinstance(t, dict):
            problems.append(f"{where}: table is missing (named in 'sensors')")
            continue
        n = len(freqs)
        sens, pos = t.get("sensitivity_v_pa"), t.get("position_m")
        if isinstance(sens, bool) or not isinstance(sens, (int, float)) or not sens > 0:
            problems.append(f"{where}.sensitivity_v_pa: required number > 0 is missing")
            sens = math.nan
        if isinstance(pos, bool) or not isinstance(pos, (int, float)) or not math.isfinite(pos):
            problems.append(f"{where}.position_m: required number is missing")
            pos = math.nan
        sensors.append(SensorFactors(
            name=name, sensitivity_v_pa=float(sens), position_m=float(pos),
            # the bounds of a rig's calibration table (app.rig.CalibrationPoint), said here by key
            gain=_numbers(t, "gain", where, n, problems, lo=0.0, lo_open=True, hi=100.0, lo_warn=0.01),
            phase_deg=_numbers(t, "phase_deg", where, n, problems, lo=-360.0, hi=360.0),
            u_gain=_numbers(t, "u_gain", where, n, problems, lo=0.0, hi=1.0),
            u_phase_deg=_numbers(t, "u_phase_deg", where, n, problems, lo=0.0, hi=90.0),
            coherence=_numbers(t, "coherence", where, n, problems, lo=0.0, hi=1.0),
            serial=str(t.get("serial", ""))))
    extra = sorted(set(tables) - set(names))
    if extra:
        problems.append(f"sensor.{extra[0]}: a table for a sensor not listed in 'sensors'")
    if reference and names and reference not in names:
        problems.append(f"reference: {reference!r} is not one of the sensors ({', '.join(names)})")
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        problems.append(f"sensors: {', '.join(twice)} listed more than once")
    if freqs and math.isfinite(cut_on) and freqs[-1] >= cut_on:
        problems.append(f"frequency_hz: {freqs[-1]:g} Hz is at or above the file's own cut_on_hz {cut_on:g} Hz: no "
                        f"plane-wave calibration holds there")
    for f in sensors:   # relative factors: the reference sensor's own is 1 (gain 1, phase 0) by definition
        if f.name == reference and f.gain and f.phase_deg and (
                max(abs(g - 1.0) for g in f.gain) > 1e-9 or max(abs(ph) for ph in f.phase_deg) > 1e-9):
            problems.append(f"sensor.{f.name}: the reference sensor's factors must be gain 1 and phase 0 at every "
                            f"frequency (the others are relative to it); this file is not a relative calibration "
                            f"against {reference!r}")
        elif f.name != reference and f.coherence and min(f.coherence) <= 0.0:
            problems.append(f"sensor.{f.name}.coherence: 0 means no coherent signal with the reference: its factor "
                            f"there was not measured")
    if problems:
        raise CalibrationFileError(path, problems)
    conditions = data.get("conditions") if isinstance(data.get("conditions"), dict) else {}
    return CalibrationFile(created=created, method=method, reference=reference, rig_name=rig_name,
                           rig_identity=identity, frequency_hz=freqs, sensors=tuple(sensors), cut_on_hz=float(cut_on),
                           rig_file=str(data.get("rig_file", "")), conditions=dict(conditions), path=path)


def read_calibration(path: str | Path) -> CalibrationFile:
    """Read and check a calibration file (not yet against a rig)."""
    p = str(path)
    try:
        data = read_toml(p, complete=True)
    except ConfigError as exc:
        raise CalibrationFileError(p, exc.problems) from None
    return parse_calibration(data, p)


# ----------------------------------------------------------------------------- use with a rig
def check_against(cal: CalibrationFile, rig: "Rig") -> None:
    """Refuse a calibration made on another rig or for other sensors, naming what differs."""
    problems = []
    rig_names = [s.channel for s in rig.pressure_sensors]
    file_names = [s.name for s in cal.sensors]
    missing = [n for n in rig_names if n not in file_names]
    unknown = [n for n in file_names if n not in rig_names]
    if missing:
        problems.append(f"sensors: no factors for the rig's pressure sensor(s) {', '.join(missing)}")
    if unknown:
        problems.append(f"sensors: {', '.join(unknown)} not among the rig's pressure sensors "
                        f"({', '.join(rig_names)})")
    for s in rig.pressure_sensors:            # a sensor exchanged since: its factors are another sensor's
        if s.channel in file_names and s.serial and cal.sensor(s.channel).serial and \
                s.serial != cal.sensor(s.channel).serial:
            problems.append(f"sensor.{s.channel}: serial {cal.sensor(s.channel).serial!r} was calibrated, the rig "
                            f"now has {s.serial!r} on this channel: the sensor was exchanged; calibrate again")
    if cal.rig_identity != rig_identity(rig):
        why = []
        if cal.rig_name != rig.name:
            why.append(f"made on rig {cal.rig_name!r}, this is {rig.name!r}")
        for s in rig.pressure_sensors:
            if s.channel in file_names:
                f = cal.sensor(s.channel)
                if not math.isclose(f.sensitivity_v_pa, s.sensitivity, rel_tol=1e-12):
                    why.append(f"{s.channel}: nominal sensitivity {f.sensitivity_v_pa:g} V/Pa then, "
                               f"{s.sensitivity:g} V/Pa now")
                if not math.isclose(f.position_m, s.position, rel_tol=1e-12, abs_tol=1e-12):
                    why.append(f"{s.channel}: position {f.position_m:g} m then, {s.position:g} m now")
        if not why and not (missing or unknown):
            why.append("sensor order or duct radius differ")
        problems.append(f"rig_identity: made for another rig or another sensor set ({'; '.join(why) or 'see above'})"
                        f"; calibrate again for this rig")
    if problems:
        raise CalibrationFileError(cal.path, problems)


RUN_SNAPSHOT = "calibration.toml"     # a run folder's copy of the calibration it was measured with
RUN_INDEX = "index.sqlite"            # what makes a folder a run folder (app.storage.index.INDEX_NAME)


def resolve_name(name: str, rig_path: str | Path | None) -> Path:
    """``name`` as a rig file at ``rig_path`` names it: relative to the rig file's folder.

    A rig file that is a run folder's snapshot (``rig.toml`` beside the run's index) reads the
    run's own copy of the calibration, made when the run was created, wherever the original
    went and whatever became of it since."""
    if rig_path:
        folder = Path(rig_path).resolve().parent
        if (folder / RUN_INDEX).is_file() and Path(rig_path).name == "rig.toml":
            return folder / RUN_SNAPSHOT     # even when it is gone: never the original in its place
    p = Path(name).expanduser()
    if not p.is_absolute() and rig_path and Path(rig_path).is_file():
        p = Path(rig_path).resolve().parent / p
    return p


def resolve(rig: "Rig") -> Path | None:
    """The calibration file a rig names, relative to the rig file's folder (a run's snapshot of
    a rig: the run's copy, see :func:`resolve_name`)."""
    name = rig.pressure_calibration
    if not name:
        return None
    return resolve_name(name, rig.source_path)


def attach(rig: "Rig") -> "Rig":
    """The rig with the factors of the calibration file it names put into its sensors' tables."""
    from .rig import CalibrationPoint  # local: app.rig imports this module lazily

    path = resolve(rig)
    if path is None:
        return rig
    where = f"{rig.source_path or '<rig>'}: pressure_calibration"
    if not path.is_file():
        if path.name == RUN_SNAPSHOT and (path.parent / RUN_INDEX).is_file():
            raise CalibrationFileError(str(path), [
                f"the run's copy of the calibration it was measured with is missing (the rig snapshot names "
                f"{rig.pressure_calibration!r}; that file is not used in its place, it may have changed since): "
                f"restore the copy, or reprocess with --rig naming a rig file and its calibration"])
        raise CalibrationFileError(str(path), [f"calibration file not found (named by {where})"])
    cal = read_calibration(path)
    check_against(cal, rig)
    sensors = []
    for s in rig.pressure_sensors:
        f = cal.sensor(s.channel)
        try:
            points = tuple(CalibrationPoint.model_validate({"frequency": fr, "gain": g, "phase_deg": ph,
                                                            "u_gain": ug, "u_phase_deg": up})
                           for fr, g, ph, ug, up in zip(cal.frequency_hz, f.gain, f.phase_deg, f.u_gain,
                                                        f.u_phase_deg))
        except ValueError as exc:
            raise CalibrationFileError(str(path), [f"sensor.{s.channel}: {exc}"]) from None
        sensors.append(s.model_copy(update={"calibration": points}))
    return rig.model_copy(update={"pressure_sensors": tuple(sensors)})


def band_problems(rig: "Rig", freqs_hz: Sequence[float]) -> list[str]:
    """Frequencies a rig's calibration file does not cover (empty when it names none)."""
    if not rig.pressure_calibration or not rig.pressure_sensors[0].calibration:
        return []
    pts = rig.pressure_sensors[0].calibration
    lo, hi = min(p.frequency for p in pts), max(p.frequency for p in pts)
    out = [float(f) for f in freqs_hz if not lo <= f <= hi]
    if not out:
        return []
    shown = ", ".join(f"{f:g}" for f in out[:8]) + (" ..." if len(out) > 8 else "")
    return [f"{shown} Hz outside the band {lo:g}-{hi:g} Hz of the calibration file {resolve(rig)} "
            f"(a calibration is never extrapolated; calibrate over a band that covers them)"]
