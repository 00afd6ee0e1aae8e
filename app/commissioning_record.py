"""A rig's commissioning record: what was checked when, with the results (docs/commissioning.md).

One TOML file per rig, by default beside the rig file and named after it
(``demo-rig.toml`` → ``demo-rig.commissioning.toml``), or in the folder that
``FLAMEBODE_COMMISSIONING_DIR`` names. Each ``[[check]]`` has a ``kind``
(``dark-offset``, ``light-step``, ``light-linearity``, ``light-uniformity``, ``hot-wire``,
``pressure-calibration``), the UTC date, the back-end, the rig's identity and a ``result``
table of plain numbers. Checks are only ever appended; the newest of a kind is the one in
force. :func:`append_check` rewrites the whole file through a temporary file (a crash leaves
the old record whole). :func:`age_notes` says what is missing or too old, for the pre-run
checklist on real hardware.

Imports: standard library, ``app.configfile``, ``app.errors``, ``app.outputs``. No Qt.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .configfile import read_toml
from .errors import FlamebodeError
from .outputs import write_whole

FORMAT = "flamebode-commissioning"
VERSION = 1
KINDS = ("dark-offset", "light-step", "light-linearity", "light-uniformity", "hot-wire", "pressure-calibration")
SUFFIX = ".commissioning.toml"


class CommissioningRecordError(FlamebodeError):
    """A commissioning record that is corrupt, of another format, or for another rig."""


@dataclass(frozen=True)
class Check:
    kind: str
    date: str                       # UTC, ISO 8601 with a Z
    backend: str
    rig_identity: str
    result: dict[str, Any] = field(default_factory=dict)
    note: str = ""

    def when(self) -> _dt.datetime:
        return _dt.datetime.strptime(self.date, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=_dt.timezone.utc)


@dataclass(frozen=True)
class Record:
    path: Path
    rig_name: str
    checks: tuple[Check, ...] = ()

    def latest(self, kind: str) -> Check | None:
        found = [c for c in self.checks if c.kind == kind]
        return max(found, key=lambda c: c.date) if found else None

    def since(self, kind: str, after: str) -> list[Check]:
        """Checks of ``kind`` dated at or after ``after`` (ISO date), oldest first."""
        return sorted((c for c in self.checks if c.kind == kind and c.date >= after), key=lambda c: c.date)


def record_path_for(rig_path: str | Path) -> Path:
    """Beside the rig file, named after it; in the folder ``FLAMEBODE_COMMISSIONING_DIR`` names
    instead when that is set (a shared folder of records, or a test's own)."""
    p = Path(rig_path)
    name = p.name.removesuffix(".toml") + SUFFIX
    folder = os.environ.get("FLAMEBODE_COMMISSIONING_DIR")
    return Path(folder) / name if folder else p.with_name(name)


def now_utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def read_record(path: str | Path, rig_name: str = "") -> Record:
    """The record at ``path`` (an empty one when the file does not exist yet)."""
    p = Path(path)
    if not p.exists():
        return Record(p, rig_name)
    data = read_toml(p)          # ConfigError naming the file and line for broken TOML
    if data.get("format") != FORMAT:
        raise CommissioningRecordError(f"{p}: not a commissioning record (format = {data.get('format')!r}, "
                                       f"expected {FORMAT!r})")
    if data.get("format_version") != VERSION:
        raise CommissioningRecordError(f"{p}: format_version {data.get('format_version')!r} is not {VERSION}")
    if rig_name and data.get("rig_name") not in ("", rig_name):
        raise CommissioningRecordError(f"{p}: the record of rig {data.get('rig_name')!r}, not of {rig_name!r}")
    checks = []
    for j, c in enumerate(data.get("check", []), start=1):
        where = f"{p}: check {j}"
        if not isinstance(c, dict) or c.get("kind") not in KINDS:
            raise CommissioningRecordError(f"{where}: kind {c.get('kind') if isinstance(c, dict) else c!r} is not "
                                           f"one of {', '.join(KINDS)}")
        try:
            check = Check(str(c["kind"]), str(c["date"]), str(c.get("backend", "")), str(c.get("rig_identity", "")),
                          dict(c.get("result", {})), str(c.get("note", "")))
            when = check.when()
        except (KeyError, ValueError, TypeError) as exc:
            raise CommissioningRecordError(f"{where}: missing or malformed {exc} (a date reads "
                                           "2026-12-04T10:00:00Z)") from None
        if when > _dt.datetime.now(_dt.timezone.utc) + _dt.timedelta(days=1):
            raise CommissioningRecordError(f"{where}: dated {check.date}, in the future (is the computer's clock "
                                           "right?)")
        _check_result(check, where)
        checks.append(check)
    return Record(p, str(data.get("rig_name", rig_name)), tuple(checks))


# the numbers each kind of check must hold (finite), so that a record is refused when read, not later
REQUIRED = {"dark-offset": ("mean_v", "u_mean_v"), "light-step": ("power_w", "mean_v", "u_mean_v"),
            "hot-wire": ("a_v2", "b", "n")}


def _check_result(check: Check, where: str) -> None:
    need = REQUIRED.get(check.kind, ())
    if check.kind == "light-uniformity" and check.result.get("stage") == "position":
        need = ("mean_v", "u_mean_v")
    for key in need:
        if key not in check.result:
            raise CommissioningRecordError(f"{where}: result.{key} missing (a {check.kind} check holds "
                                           f"{', '.join(need)})")
    for key, v in check.result.items():
        values = v if isinstance(v, list) else [v]
        for x in values:
            if isinstance(x, bool) or isinstance(x, str):
                if key in need:
                    raise CommissioningRecordError(f"{where}: result.{key} = {x!r} is not a number")
                continue
            if not isinstance(x, (int, float)) or not math.isfinite(float(x)):
                raise CommissioningRecordError(f"{where}: result.{key} = {x!r} is not a finite number")


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ValueError(f"a commissioning result must be a finite number, got {v!r}")
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    raise ValueError(f"cannot write {type(v).__name__} {v!r} to a commissioning record")


def _text(record: Record) -> str:
    lines = [f'format = "{FORMAT}"', f"format_version = {VERSION}", f"rig_name = {_value(record.rig_name)}", ""]
    for c in record.checks:
        lines += ["[[check]]", f"kind = {_value(c.kind)}", f"date = {_value(c.date)}", f"backend = {_value(c.backend)}",
                  f"rig_identity = {_value(c.rig_identity)}"]
        if c.note:
            lines.append(f"note = {_value(c.note)}")
        lines.append("[check.result]")
        lines += [f"{k} = {_value(v)}" for k, v in c.result.items()]
        lines.append("")
    return "\n".join(lines)


def append_check(path: str | Path, rig_name: str, check: Check) -> Record:
    """The record with ``check`` appended, written whole; returns it."""
    old = read_record(path, rig_name)
    new = Record(old.path, rig_name or old.rig_name, old.checks + (check,))
    text = _text(new)

    def write(tmp: Path) -> None:
        tmp.write_text(text, encoding="utf-8")

    write_whole(new.path, write)
    return new


# kinds whose result belongs to the rig's sensor set and duct (app.calibration_file.rig_identity):
# made for other sensors, positions, sensitivities or another duct, they are not in force
IDENTITY_BOUND = ("pressure-calibration",)


def age_notes(record: Record, max_age_days: float, now: _dt.datetime | None = None,
              needs: tuple[str, ...] = ("dark-offset", "light-linearity", "pressure-calibration"),
              identity: str = "") -> list[str]:
    """What the pre-run checklist should say about the record: each needed check missing or older
    than ``max_age_days``, in words; with the rig's ``identity``, also a sensor-bound check made
    for another sensor set or duct."""
    now = now or _dt.datetime.now(_dt.timezone.utc)
    words = {"dark-offset": "dark offset", "light-linearity": "light-chain linearity check",
             "pressure-calibration": "relative calibration of the pressure sensors",
             "light-uniformity": "spatial uniformity check", "hot-wire": "hot-wire calibration"}
    notes = []
    for kind in needs:
        c = record.latest(kind)
        if c is None:
            notes.append(f"no {words.get(kind, kind)} in {record.path.name}")
            continue
        if identity and kind in IDENTITY_BOUND and c.rig_identity and c.rig_identity != identity:
            notes.append(f"the {words.get(kind, kind)} of {c.date} in {record.path.name} was made for another "
                         f"sensor set or duct (channels, positions, sensitivities or radius differ since): "
                         f"do it again")
            continue
        age = (now - c.when()).total_seconds() / 86400.0
        if age > max_age_days:
            shown = f"{age:.0f} days" if age >= 2 else f"{age * 24:.1f} hours"
            notes.append(f"the {words.get(kind, kind)} is {shown} old (older than {max_age_days:g} days)")
    return notes
