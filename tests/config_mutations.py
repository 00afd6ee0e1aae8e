"""Test helpers for mutating the shipped rig, plan and scenario files (not a test module).

Reads a demo file into a dict, lists its numeric keys (bare numbers and quantity strings
such as ``"46 mm"``), writes a mutated dict back as TOML, loads it the way the command line
does, and walks a loaded model for every bounded number (``app.bounds.Range``).
"""

from __future__ import annotations

import json
import math
import re
import tomllib
import types
import typing
from pathlib import Path
from typing import Any, Iterator

from pydantic import BaseModel

from app.bounds import Range

CONFIGS = Path(__file__).resolve().parents[1] / "configs"
DEMO = {"rig": CONFIGS / "demo-rig.toml", "plan": CONFIGS / "demo-ftf-plan.toml",
        "scenario": CONFIGS / "demo-scenario.toml"}
QUANTITY = re.compile(r"^\s*[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?\s*(\S.*)$")

Path_ = tuple[str | int, ...]


def demo_data(kind: str) -> dict[str, Any]:
    data = tomllib.loads(DEMO[kind].read_text(encoding="utf-8"))
    if kind in ("plan", "scenario"):   # absolute, so a copy in tmp_path still finds the demo rig
        data["rig"] = str(CONFIGS / "demo-rig.toml")
        data.pop("scenario", None)
    return data


def key_text(path: Path_) -> str:
    out = ""
    for p in path:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else str(p))
    return out


def numeric_keys(data: Any, path: Path_ = ()) -> list[tuple[Path_, str | None]]:
    """Every key holding a number or a quantity string: (path, unit of the string or None)."""
    out: list[tuple[Path_, str | None]] = []
    items = data.items() if isinstance(data, dict) else enumerate(data) if isinstance(data, list) else ()
    for k, v in items:
        here = path + (k,)
        if isinstance(v, bool):
            continue
        if isinstance(v, (int, float)):
            out.append((here, None))
        elif isinstance(v, str) and (m := QUANTITY.match(v)):
            out.append((here, m.group(1)))
        elif isinstance(v, (dict, list)):
            out += numeric_keys(v, here)
    return out


def with_value(data: dict[str, Any], path: Path_, value: Any) -> dict[str, Any]:
    out = json.loads(json.dumps(data))
    node = out
    for p in path[:-1]:
        node = node[p]
    node[path[-1]] = value
    return out


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_toml_key(k)} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def _toml_key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k)


def dump_toml(data: dict[str, Any]) -> str:
    """TOML text of ``data``: every top-level key on its own line, tables inline."""
    return "".join(f"{_toml_key(k)} = {_toml_value(v)}\n" for k, v in data.items())


def load(kind: str, path: Path) -> BaseModel:
    """Load ``path`` as the command line does (plans and scenarios checked against the demo rig)."""
    from app.plan import load_plan
    from app.rig import load_rig
    from drivers.simulated.scenario import load_scenario

    if kind == "rig":
        return load_rig(path)
    rig = load_rig(DEMO["rig"])
    if kind == "plan":
        return load_plan(path, rig)
    scenario = load_scenario(path)
    scenario.check_against(rig)
    return scenario


def names_key(message: str, path: Path_) -> bool:
    """Whether a ConfigError message names ``path``: a problem line at the key or at one of the
    tables holding it (a check across keys), or any line holding the whole dotted key."""
    full = key_text(path)
    ancestors = {key_text(path[:i]) for i in range(1, len(path) + 1)}
    for line in message.splitlines()[1:]:
        line = line.strip().removeprefix("- ")
        where = line.partition(": ")[0]
        if full in line or where in ancestors:
            return True
    return False


def bounded_numbers(model: BaseModel) -> Iterator[tuple[str, float, Range | None]]:
    """Every number in a loaded model: (key, SI value, its Range or None if it has none)."""
    yield from _walk_model(model, ())


def _walk_model(model: BaseModel, path: Path_) -> Iterator[tuple[str, float, Range | None]]:
    for name, info in type(model).model_fields.items():
        value = getattr(model, name)
        rng = next((m for m in info.metadata if isinstance(m, Range)), None)
        if rng is not None and _is_number(value):
            yield key_text(path + (name,)), float(value), rng
        else:
            yield from _walk(value, info.annotation, path + (name,))


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _walk(value: Any, ann: Any, path: Path_) -> Iterator[tuple[str, float, Range | None]]:
    if value is None:
        return
    if isinstance(value, BaseModel):
        yield from _walk_model(value, path)
        return
    origin = typing.get_origin(ann)
    if origin is typing.Annotated:
        rng = next((m for m in ann.__metadata__ if isinstance(m, Range)), None)
        if rng is not None and _is_number(value):
            yield key_text(path), float(value), rng
            return
        yield from _walk(value, typing.get_args(ann)[0], path)
        return
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(ann) if a is not type(None)]
        yield from _walk(value, args[0] if len(args) == 1 else Any, path)
        return
    if isinstance(value, tuple):
        args = typing.get_args(ann)
        for i, item in enumerate(value):
            sub = args[0] if len(args) == 2 and args[1] is Ellipsis else (args[i] if i < len(args) else Any)
            yield from _walk(item, sub, path + (i,))
        return
    if isinstance(value, dict):
        args = typing.get_args(ann)
        for k, item in value.items():
            yield from _walk(item, args[1] if len(args) == 2 else Any, path + (k,))
        return
    if _is_number(value):
        yield key_text(path), float(value), None
