"""Commissioning checks of a rig's light chain and hot-wire, once, for every front end.

Dark offset (optionally written into the rig file), a light step at a stated thermal power,
the linearity fit, a lamp position, the uniformity summary, King's law from a CSV table and
the record's status: each is one function here taking plain arguments and returning a frozen
:class:`Outcome` (the check appended to the rig's commissioning record, and the words to tell
the operator). ``flamebode commission`` (``app.commands.commission``) parses its options and
prints these words; the window's commissioning panel (``app.ui.views.commissioning``) calls
the same functions on its worker thread and shows them. The estimates are
``app.core.commissioning``; the record is ``app.commissioning_record``.

Nothing here forces the flow: a recording opens the back-end, reads the light channel and
closes it; the drive is never asked for anything but zero. User mistakes raise
:class:`CommissionError` (a ``FlamebodeError``) whose message names the problem; ``option``
arguments name the entry the person typed (``--power`` on the command line, the panel's
field in the window).

Must not import Qt, pyqtgraph, ``app.ui``, ``app.cli`` or ``app.commands``.
"""

from __future__ import annotations

import csv
import math
import re
import threading
from contextlib import nullcontext
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, ContextManager

import numpy as np

from app.commissioning_record import Check, Record, age_notes, append_check, now_utc, read_record, record_path_for
from app.errors import FlamebodeError
from app.rig import Rig, load_rig

STATUS_KINDS = ("dark-offset", "light-linearity", "light-uniformity", "hot-wire", "pressure-calibration")
CAUTIONS = {
    "dark": "caution: the flame must be off and the photomultiplier's high voltage set as for a run; the drive "
            "stays at zero. The laboratory's own rules come first.",
    "light-step": "caution: a lit flame; keep to the rig's operating envelope and the laboratory's rules. The drive "
                  "stays at zero.",
    "lamp": "caution: flame off; the lamp in the flame region only with the burner cold and the fuel shut.",
}


class CommissionError(FlamebodeError):
    """A commissioning check cannot run as asked; the message names the entry or file."""


# ----------------------------------------------------------------------------- requests and results
@dataclass(frozen=True)
class Source:
    """Where the light is recorded from: the back-end and, on the simulated burner, its options."""

    backend: str = "simulated"
    scenario: Path | None = None
    fast: bool = False
    seed: int | None = None
    duration_s: float = 5.0


@dataclass(frozen=True)
class Target:
    """The rig (file and description) and its commissioning record, read before anything is recorded."""

    rig_path: Path
    rig: Rig
    record: Record


@dataclass(frozen=True)
class Outcome:
    """One check appended: the entry as stored, the record after it, what to tell the operator
    (``lines``, and ``notes`` that deserve attention), the rig file rewritten (dark offset)."""

    check: Check
    record: Record
    lines: tuple[str, ...]
    notes: tuple[str, ...] = ()
    rig_written: Path | None = None


@dataclass(frozen=True)
class StatusRow:
    kind: str
    date: str | None                 # the newest check of the kind, None when there is none


@dataclass(frozen=True)
class Status:
    record_path: Path
    exists: bool
    rig_name: str
    rows: tuple[StatusRow, ...]
    to_do: tuple[str, ...]           # missing or older than max_age_days (app.commissioning_record.age_notes)
    calibration_file: str = ""
    lines: tuple[str, ...] = field(default=())


class StopRequest:
    """A request, from any thread, to end a recording at its next block (nothing is then stored)."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self.why: str | None = None

    def set(self, why: str) -> None:
        with self._lock:
            self.why = self.why or why


# ----------------------------------------------------------------------------- entries people type
def open_target(rig_path: str | Path, record_path: str | Path | None = None) -> Target:
    """Load the rig and read its record (a broken record is named before anything is recorded)."""
    rig = load_rig(rig_path)
    path = Path(record_path) if record_path else record_path_for(rig_path)
    return Target(Path(rig_path), rig, read_record(path, rig.name))


def parse_duration(text: str, option: str = "--duration") -> float:
    from app.units import parse_quantity

    try:
        value = parse_quantity(text, "time", unit_required=True)
    except (ValueError, TypeError) as exc:
        raise CommissionError(f"{option} {text!r}: {exc}") from None
    if not 0.2 <= value <= 600.0:
        raise CommissionError(f"{option} {text!r}: must be from 0.2 s to 600 s")
    return value


def parse_power(text: str | None, option: str = "--power") -> float:
    """A thermal power with its unit (W, kW, MW), more than 0 W and at most 10 MW."""
    from app.units import parse_quantity

    if not text or not text.strip():
        raise CommissionError(f"light-step needs {option}, the thermal power now burning (e.g. {option} \"4 kW\")"
                              if option.startswith("--") else
                              f"{option}: empty; type the thermal power now burning with its unit (e.g. 4 kW)")
    try:
        value = parse_quantity(text.strip(), "power", unit_required=True)
    except (ValueError, TypeError) as exc:
        raise CommissionError(f"{option} {text!r}: {exc}") from None
    if not 0.0 < value <= 1e7:
        raise CommissionError(f"{option} {text!r}: must be more than 0 W and at most 10 MW")
    return value


def parse_position(text: str | None, option: str = "--position") -> str:
    if not text or not text.strip():
        raise CommissionError(f"lamp needs {option}, a label for where the lamp is (e.g. {option} \"r=0 z=10 mm\")"
                              if option.startswith("--") else
                              f"{option}: empty; type a label for where the lamp is (e.g. r=0 z=10 mm)")
    return text.strip()


# ----------------------------------------------------------------------------- recording
def record_light(rig: Rig, source: Source, flame: bool, stop: StopRequest | None = None,
                 watch: Callable[[Any], ContextManager[Any]] | None = None, **simulated: Any) -> np.ndarray:
    """The light channel's samples (volts) over ``source.duration_s`` with the drive at zero.

    ``simulated``: options for the simulated burner only (``thermal_power`` in W,
    ``lamp_position``). ``watch(device)``: a context held around the recording (the command
    line's stop signals); ``stop`` ends it early, and then nothing is returned but an error."""
    from drivers.registry import close_backend, open_backend

    stop = stop or StopRequest()
    if source.backend == "simulated":
        # the simulated rig: flame lit or not (its holder mode has no flame), burning at the stated
        # power, or with the lamp at the stated position
        device = open_backend("simulated", rig, scenario=str(source.scenario) if source.scenario else None,
                              real_time=not source.fast, seed=source.seed, holder=not flame, **simulated)
    else:
        device = open_backend(source.backend, rig)
    samples: list[np.ndarray] = []
    with (watch(device) if watch is not None else nullcontext()):
        try:
            device.start()
            got = 0.0
            while got < source.duration_s and stop.why is None:
                block = device.read_block()
                samples.append(np.asarray(block.channel(rig.light.channel), dtype=float))
                got += block.duration_s
        finally:
            close_backend(device)
    if stop.why is not None:
        raise CommissionError(f"{stop.why}: stopped, nothing recorded")
    return np.concatenate(samples)


def _append(target: Target, source_backend: str, kind: str, result: dict[str, Any]) -> Record:
    from app.calibration_file import rig_identity

    return append_check(target.record.path, target.rig.name,
                        Check(kind, now_utc(), source_backend, rig_identity(target.rig), result))


def _stored(record: Record, kind: str) -> str:
    return f"commissioning record: {record.path} ({kind} stored)"


def measure_dark(target: Target, source: Source, update_rig: bool = False, stop: StopRequest | None = None,
                 watch: Callable[[Any], ContextManager[Any]] | None = None) -> Outcome:
    """Flame off: the light channel's offset, noise and the offset's standard uncertainty; with
    ``update_rig`` also written, dated, into the rig file's ``[light]`` table."""
    from app.core.commissioning import dark_offset

    rig = target.rig
    d = dark_offset(record_light(rig, source, flame=False, stop=stop, watch=watch))
    lines = [f"dark offset {d.mean_v * 1e3:.6g} mV ± {d.u_mean_v * 1e3:.3g} mV (standard uncertainty), noise "
             f"{d.noise_rms_v * 1e3:.3g} mV rms over {d.n_samples} samples"]
    notes = []
    was = rig.light.dark_offset
    if abs(d.mean_v - was) > 4 * math.hypot(d.u_mean_v, rig.light.dark_offset_uncertainty):
        notes.append(f"note: the rig file states {was * 1e3:.4g} mV ± {rig.light.dark_offset_uncertainty * 1e3:.2g} "
                     "mV; the measured offset differs by more than 4 standard uncertainties")
    new = _append(target, source.backend, "dark-offset",
                  {"mean_v": d.mean_v, "u_mean_v": d.u_mean_v, "noise_rms_v": d.noise_rms_v,
                   "n_samples": d.n_samples})
    lines += notes
    lines.append(_stored(new, "dark-offset"))
    written = None
    if update_rig:
        written = update_rig_dark_offset(target.rig_path, d.mean_v, d.u_mean_v, new.checks[-1].date)
        lines.append(f"rig file updated: {written} ([light] dark_offset and dark_offset_uncertainty)")
    return Outcome(new.checks[-1], new, tuple(lines), tuple(notes), written)


def measure_light_step(target: Target, source: Source, power_w: float, stop: StopRequest | None = None,
                       watch: Callable[[Any], ContextManager[Any]] | None = None) -> Outcome:
    """Flame lit at ``power_w`` (W), drive at zero: the mean light and its standard uncertainty."""
    from app.core.commissioning import dark_offset

    d = dark_offset(record_light(target.rig, source, flame=True, stop=stop, watch=watch, thermal_power=power_w))
    new = _append(target, source.backend, "light-step", {"power_w": power_w, "mean_v": d.mean_v, "u_mean_v": d.u_mean_v})
    lines = (f"light at {power_w / 1e3:g} kW: {d.mean_v * 1e3:.5g} mV ± {d.u_mean_v * 1e3:.2g} mV",
             _stored(new, "light-step"))
    return Outcome(new.checks[-1], new, lines)


def measure_lamp(target: Target, source: Source, position: str, stop: StopRequest | None = None,
                 watch: Callable[[Any], ContextManager[Any]] | None = None) -> Outcome:
    """Flame off, a small lamp at ``position`` (a label): the light chain's mean response."""
    from app.core.commissioning import dark_offset

    d = dark_offset(record_light(target.rig, source, flame=False, stop=stop, watch=watch, lamp_position=position))
    new = _append(target, source.backend, "light-uniformity",
                  {"stage": "position", "position": position, "mean_v": d.mean_v, "u_mean_v": d.u_mean_v})
    lines = (f"lamp at {position}: {d.mean_v * 1e3:.5g} mV ± {d.u_mean_v * 1e3:.2g} mV",
             _stored(new, "light-uniformity"))
    return Outcome(new.checks[-1], new, lines)


# ----------------------------------------------------------------------------- from the record
def dark_in_force(record: Record, rig: Rig) -> tuple[float, float, str]:
    """The newest recorded dark offset (mean, its uncertainty, date), else the rig file's (date "")."""
    dark = record.latest("dark-offset")
    if dark is None:
        return rig.light.dark_offset, rig.light.dark_offset_uncertainty, ""
    return float(dark.result["mean_v"]), float(dark.result["u_mean_v"]), dark.date


def light_steps(record: Record, rig: Rig) -> list[Check]:
    """The light steps since the newest dark offset, oldest first (what the linearity fit uses)."""
    since = dark_in_force(record, rig)[2]
    return record.since("light-step", since) if since else [c for c in record.checks if c.kind == "light-step"]


def lamp_positions(record: Record, rig: Rig) -> list[Check]:
    """The lamp positions since the newest dark offset, oldest first (what the uniformity uses)."""
    since = dark_in_force(record, rig)[2]
    return [c for c in record.since("light-uniformity", since) if c.result.get("stage") == "position"]


def fit_linearity(target: Target, backend: str = "simulated", hint: str = "") -> Outcome:
    """Proportionality through the dark-corrected origin over the steps since the newest dark offset.
    ``hint``: how to record a step, for the message when there are too few."""
    from app.core.commissioning import light_linearity

    record, rig = target.record, target.rig
    dark_v, u_dark, _since = dark_in_force(record, rig)
    steps = light_steps(record, rig)
    if len(steps) < 3:
        raise CommissionError(f"{record.path}: {len(steps)} light step(s) since the newest dark offset; record at "
                              f"least 3 {hint or 'light steps'} at different powers")
    P = np.array([float(s.result["power_w"]) for s in steps])
    L = np.array([float(s.result["mean_v"]) for s in steps])
    u = np.array([float(s.result["u_mean_v"]) for s in steps])
    lin = light_linearity(P, L, np.maximum(u, 1e-9), dark_v, u_dark)
    lines = [f"light-chain linearity over {lin.n_steps} steps {P.min() / 1e3:g}-{P.max() / 1e3:g} kW: "
             f"{lin.slope_v_per_w * 1e6:.4g} mV/kW ± {lin.u_slope_v_per_w * 1e6:.2g} mV/kW; largest deviation from "
             f"proportionality {lin.max_deviation_rel * 100:.2f} % (p = {lin.p_value:.2g})"]
    lines += [f"  {p / 1e3:8.3g} kW  {dev * 100:+.2f} %" for p, dev in zip(P, lin.deviation_rel)]
    notes = []
    if lin.p_value < 0.01:
        notes.append("note: the light is not proportional to the thermal power within its uncertainty (a saturating "
                     "photomultiplier, a wrong dark offset or a changing equivalence ratio): check before using the "
                     "light as heat release")
    new = _append(target, backend, "light-linearity",
                  {"slope_v_per_w": lin.slope_v_per_w, "u_slope_v_per_w": lin.u_slope_v_per_w,
                   "max_deviation_rel": lin.max_deviation_rel, "p_value": lin.p_value, "n_steps": lin.n_steps,
                   "power_w": [float(x) for x in P], "deviation_rel": [float(x) for x in lin.deviation_rel]})
    return Outcome(new.checks[-1], new, tuple(lines + notes + [_stored(new, "light-linearity")]), tuple(notes))


def summarise_uniformity(target: Target, backend: str = "simulated", hint: str = "") -> Outcome:
    """The spread of the lamp responses (dark-corrected) since the newest dark offset."""
    from app.core.commissioning import spatial_uniformity

    record, rig = target.record, target.rig
    dark_v = dark_in_force(record, rig)[0]
    steps = lamp_positions(record, rig)
    if len(steps) < 2:
        raise CommissionError(f"{record.path}: {len(steps)} lamp position(s) since the newest dark offset; record "
                              f"at least 2 {hint or 'lamp positions'}")
    r = np.array([float(s.result["mean_v"]) for s in steps]) - dark_v
    u = spatial_uniformity(r)
    worst = str(steps[u.worst_index].result["position"])
    new = _append(target, backend, "light-uniformity",
                  {"stage": "summary", "spread_rel": u.spread_rel, "max_deviation_rel": u.max_deviation_rel,
                   "worst_position": worst, "n_positions": len(steps)})
    lines = (f"spatial uniformity over {len(steps)} positions: spread {u.spread_rel * 100:.2f} % (standard deviation "
             f"/ mean); furthest from the mean: {worst} ({u.max_deviation_rel * 100:+.2f} %)",
             _stored(new, "light-uniformity"))
    return Outcome(new.checks[-1], new, lines)


def fit_hot_wire(target: Target, table: str | Path | None, backend: str = "simulated",
                 option: str = "--table") -> Outcome:
    """King's law E² = A + B·Uⁿ fitted to a CSV table (``voltage_v``, ``velocity_m_s``), stored
    with its residual."""
    from app.core.commissioning import kings_law

    if not table or not str(table).strip():
        raise CommissionError(f"hot-wire needs {option} FILE.csv with columns voltage_v and velocity_m_s")
    path = Path(str(table).strip())
    E, U = read_hot_wire_table(path, option)
    k = kings_law(E, U)
    s = np.sqrt(np.clip(np.diag(k.covariance), 0.0, None))
    new = _append(target, backend, "hot-wire", {"a_v2": k.a_v2, "b": k.b, "n": k.n,
                                                 "residual_rms_m_s": k.residual_rms_m_s, "n_points": k.n_points,
                                                 "table": str(path.resolve())})
    lines = (f"King's law E^2 = A + B U^n over {k.n_points} points: A = {k.a_v2:.5g} ± {1.96 * s[0]:.2g} V^2, "
             f"B = {k.b:.5g} ± {1.96 * s[1]:.2g}, n = {k.n:.4g} ± {1.96 * s[2]:.2g} (95 %); velocity residual "
             f"{k.residual_rms_m_s:.3g} m/s rms", _stored(new, "hot-wire"))
    return Outcome(new.checks[-1], new, lines)


def read_hot_wire_table(path: Path, option: str = "--table") -> tuple[np.ndarray, np.ndarray]:
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
    except UnicodeDecodeError:
        raise CommissionError(f"{option} {path}: not a text CSV file (UTF-8)") from None
    except OSError as exc:
        raise CommissionError(f"{option} {path}: cannot be read ({exc.strerror or exc})") from None
    except csv.Error as exc:
        raise CommissionError(f"{option} {path}: not a CSV table ({exc})") from None
    if not rows or not {"voltage_v", "velocity_m_s"} <= set(rows[0]):
        raise CommissionError(f"{option} {path}: needs a header with the columns voltage_v and velocity_m_s")
    E, U = [], []
    for line, r in enumerate(rows, start=2):
        try:
            E.append(float(r["voltage_v"]))
            U.append(float(r["velocity_m_s"]))
        except (TypeError, ValueError):
            raise CommissionError(f"{option} {path}, line {line}: {r.get('voltage_v')!r}, {r.get('velocity_m_s')!r} "
                                  "are not two numbers") from None
    return np.array(E), np.array(U)


def status(target: Target, max_age_days: float = 30.0) -> Status:
    """The newest check of every kind and what is missing or older than ``max_age_days``."""
    record, rig = target.record, target.rig
    rows = tuple(StatusRow(k, c.date if (c := record.latest(k)) else None) for k in STATUS_KINDS)
    cal = str(getattr(rig, "pressure_calibration", "") or "")
    from app.calibration_file import rig_identity
    notes = age_notes(record, max_age_days, identity=rig_identity(rig))
    last_cal = record.latest("pressure-calibration")
    if last_cal is not None and not cal:   # calibrated, but the sweeps read the nominal sensitivities
        made = last_cal.result.get("file") if isinstance(last_cal.result, dict) else None
        notes.append(f"the pressure calibration of {last_cal.date}" + (f" ({made})" if made else "") +
                     " is not named by the rig file, so sweeps do not use it: add pressure_calibration = \"FILE\" "
                     "to the rig file (before its first table)")
    to_do = tuple(notes)
    lines = [f"commissioning record of {rig.name}: {record.path}" + ("" if record.path.exists() else " (none yet)")]
    lines += [f"  {r.kind:22s} {r.date or 'never'}" for r in rows]
    if cal:
        lines.append(f"  the rig names the calibration file {cal}")
    lines += [f"  to do: {n}" for n in to_do]
    return Status(record.path, record.path.exists(), rig.name, rows, to_do, cal, tuple(lines))


# ----------------------------------------------------------------------------- the rig file
_LIGHT = re.compile(r"^\s*\[\s*light\s*\]\s*(#.*)?$")
_TABLE = re.compile(r"^\s*\[")


def update_rig_dark_offset(rig_path: Path, mean_v: float, u_v: float, date: str) -> Path:
    """Set ``dark_offset`` and ``dark_offset_uncertainty`` in the rig file's ``[light]`` table,
    keeping every other line and comment, the file's line endings and permissions; a symbolic
    link keeps pointing at the file it names, which is the one rewritten. The file is rewritten
    whole and must load afterwards."""
    import os
    import stat

    from app.outputs import write_whole

    target = rig_path.resolve()                 # through a symbolic link: the file it names
    raw = target.read_bytes().decode("utf-8")
    lines = raw.splitlines(keepends=True)
    eol = "\r\n" if lines and lines[0].endswith("\r\n") else "\n"
    start = next((i for i, line in enumerate(lines) if _LIGHT.match(line.rstrip("\r\n"))), None)
    if start is None:
        raise CommissionError(f"{rig_path}: no [light] table header to write the dark offset under (a rig file "
                              "that sets light as dotted keys or an inline table): set [light] dark_offset and "
                              "dark_offset_uncertainty by hand")
    end = next((i for i in range(start + 1, len(lines)) if _TABLE.match(lines[i])), len(lines))
    values = {"dark_offset": f'"{mean_v * 1e3:.6g} mV"', "dark_offset_uncertainty": f'"{u_v * 1e3:.3g} mV"'}
    note = f"# measured by flamebode commission dark, {date}{eol}"
    out = lines[: start + 1]
    done = set()
    for line in lines[start + 1:end]:
        key = line.split("=", 1)[0].strip() if "=" in line else ""
        if key in values:
            out.append(f"{key} = {values[key]}    {note}")
            done.add(key)
        else:
            out.append(line)
    for key in values:
        if key not in done:
            out.insert(start + 1 + len(done), f"{key} = {values[key]}    {note}")
            done.add(key)
    out += lines[end:]
    text = "".join(out)

    def write(tmp: Path) -> None:
        tmp.write_bytes(text.encode("utf-8"))
        os.chmod(tmp, stat.S_IMODE(target.stat().st_mode))

    import tomllib

    from app.rig import rig_from_dict

    try:                                        # never leave a rig file that does not load: check the new text
        rig_from_dict(tomllib.loads(text), str(rig_path), units_required=True)   # as the rig file itself
    except tomllib.TOMLDecodeError as exc:
        raise CommissionError(f"{rig_path}: the dark offset could not be written in place ({exc}); the rig file "
                              "is left as it was: set [light] dark_offset by hand") from None
    write_whole(target, write)
    return rig_path
