"""Reading a TOML configuration file into a validated model, with named problems.

Shared by the rig file, the sweep plan and the simulator's scenario: a syntax error names
the line, a validation problem names the key (``duct.diametre: unknown key``), and every
message starts with the file. A file is validated with ``units_required`` (a bare number
where a unit is ambiguous is refused, see ``app.units``); a dict built by a program is SI.
A file whose every table has defaults (the scenario) is also checked for being cut short:
it must end with a line break and have no empty table, so a truncated file is an error
naming the line instead of a silent fall-back to defaults.
Imports: standard library, pydantic, ``app.errors``.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from .errors import ConfigError

M = TypeVar("M", bound=BaseModel)


def read_toml(path: str | Path, complete: bool = False) -> dict[str, Any]:
    """Read a TOML file or raise ConfigError naming the file and the line.

    With ``complete``, a file that ends in the middle of a line or holds an empty table is
    refused as possibly cut short (for files whose missing keys would silently default)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")     # a byte-order mark (as Windows editors save) is dropped
    except FileNotFoundError:
        raise ConfigError(str(p), ["file not found"]) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(str(p), [f"cannot read file: {exc}"]) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        why = str(exc)
        if why.endswith("(at end of document)"):   # tomllib names no line there: name the last one
            why = why.removesuffix("(at end of document)") + (
                f"(at line {text.count(chr(10)) + (0 if text.endswith(chr(10)) else 1)}, the end of the file: "
                f"it may have been cut short)")
        raise ConfigError(str(p), [f"not valid TOML: {why}"]) from None
    if complete:
        problems = _cut_short(text, data)
        if problems:
            raise ConfigError(str(p), problems)
    return data


def _cut_short(text: str, data: dict[str, Any]) -> list[str]:
    """Signs that a file was truncated: no final line break, or a table with nothing in it."""
    problems = []
    if text and not text.endswith(("\n", "\r")):
        n = text.count("\n") + 1
        problems.append(f"line {n}: the file ends in the middle of a line, so it may have been cut short "
                        f"(a complete file ends with a line break)")
    for key in _empty_tables(data):
        line = _header_line(text, key)
        where = f"line {line}: " if line else ""
        problems.append(f"{where}table [{key}] is empty, so the file may have been cut short "
                        f"(give its keys or remove the table)")
    return problems


def _empty_tables(data: Any, prefix: str = "") -> list[str]:
    out: list[str] = []
    items = data.items() if isinstance(data, dict) else enumerate(data) if isinstance(data, list) else ()
    for k, v in items:
        key = f"{prefix}[{k}]" if isinstance(k, int) else (f"{prefix}.{k}" if prefix else str(k))
        if isinstance(v, dict) and not v:
            out.append(key)
        elif isinstance(v, (dict, list)):
            out += _empty_tables(v, key)
    return out


def _header_line(text: str, key: str) -> int | None:
    """Line number of ``[key]`` (or ``key = {}``) in ``text``, if it can be found."""
    dotted = re.escape(re.sub(r"\[\d+\]", "", key)).replace(r"\.", r"[ \t]*\.[ \t]*")
    last = re.escape(key.rsplit(".", 1)[-1])
    for pattern in (rf"^[ \t]*\[+[ \t]*{dotted}[ \t]*\]+", rf"^[ \t]*{last}[ \t]*=[ \t]*\{{[ \t]*\}}"):
        m = re.search(pattern, text, flags=re.MULTILINE)
        if m:
            return text.count("\n", 0, m.start()) + 1
    return None


def _entry_hint(data: Any, loc: tuple) -> str:
    """' (entry 2 of [[pressure_sensors]], channel "p2")' for a key inside a list of tables: the list
    index counts from 0 like the key path, so the entry is also said from 1 and by its name."""
    node, hint = data, ""
    for i, part in enumerate(loc):
        if isinstance(part, int) and isinstance(node, list) and 0 <= part < len(node):
            entry = node[part]
            label = next((f'{k} "{entry[k]}"' for k in ("channel", "name") if isinstance(entry, dict)
                          and isinstance(entry.get(k), str)), "")
            table = ".".join(str(p) for p in loc[:i] if not isinstance(p, int))
            hint = f" (entry {part + 1} of [[{table}]]" + (f", {label}" if label else "") + ")"
            node = entry
        elif isinstance(node, dict) and part in node:
            node = node[part]
        else:
            break
    return hint


def format_validation_error(path: str, err: ValidationError, reference: str = "docs/rig-file.md",
                            data: Any = None) -> ConfigError:
    """Turn a pydantic error into a ConfigError whose lines read 'key.path: what is wrong'."""
    problems = []
    for e in err.errors():
        loc = ".".join(str(p) if not isinstance(p, int) else f"[{p}]" for p in e["loc"]).replace(".[", "[")
        msg = e["msg"].removeprefix("Value error, ")
        if e["type"] == "extra_forbidden":
            msg = f"unknown key (check spelling; see {reference})"
        elif e["type"] == "missing":
            msg = "required key is missing"
        elif e["type"] != "value_error" and isinstance(e.get("input"), (str, int, float, bool)):
            msg = f"{msg} (got {e['input']!r})"
        problems.append(f"{loc or '(top level)'}: {msg}" + (_entry_hint(data, tuple(e["loc"])) if data else ""))
    return ConfigError(path, problems)


def model_from_dict(model: type[M], data: dict[str, Any], path: str, reference: str,
                    units_required: bool = False) -> M:
    """Validate ``data`` as ``model`` (its ``source_path`` set to ``path``) or raise a named ConfigError.

    ``units_required``: ``data`` was read from a file, so a bare number where a unit is
    ambiguous is refused (``app.units.UNIT_REQUIRED``)."""
    try:
        return model.model_validate({**data, "source_path": str(path)},
                                    context={"units_required": units_required})
    except ValidationError as err:
        raise format_validation_error(str(path), err, reference, data) from None


def load_model(model: type[M], path: str | Path, reference: str, source_path: str | None = None,
               complete: bool = False, units_required: bool = True) -> M:
    """Read and validate a TOML file as ``model``; ``reference`` names the doc of its keys.

    ``complete``: refuse a file that looks cut short (see :func:`read_toml`)."""
    data = read_toml(path, complete=complete)
    if "source_path" in data:
        raise ConfigError(str(path), [f"source_path: unknown key (check spelling; see {reference})"])
    return model_from_dict(model, data, source_path or str(path), reference, units_required=units_required)
