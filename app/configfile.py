"""Reading a TOML configuration file into a validated model, with named problems.

Shared by the rig file, the sweep plan and the simulator's scenario: a syntax error names
the line, a validation problem names the key (``duct.diametre: unknown key``), and every
message starts with the file. Imports: standard library, pydantic, ``app.errors``.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from .errors import ConfigError

M = TypeVar("M", bound=BaseModel)


def read_toml(path: str | Path) -> dict[str, Any]:
    """Read a TOML file or raise ConfigError naming the file and the line."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(str(p), ["file not found"]) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(str(p), [f"cannot read file: {exc}"]) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(str(p), [f"not valid TOML: {exc}"]) from None


def format_validation_error(path: str, err: ValidationError, reference: str = "docs/rig-file.md") -> ConfigError:
    """Turn a pydantic error into a ConfigError whose lines read 'key.path: what is wrong'."""
    problems = []
    for e in err.errors():
        loc = ".".join(str(p) if not isinstance(p, int) else f"[{p}]" for p in e["loc"]).replace(".[", "[")
        msg = e["msg"].removeprefix("Value error, ")
        if e["type"] == "extra_forbidden":
            msg = f"unknown key (check spelling; see {reference})"
        elif e["type"] == "missing":
            msg = "required key is missing"
        problems.append(f"{loc or '(top level)'}: {msg}")
    return ConfigError(path, problems)


def model_from_dict(model: type[M], data: dict[str, Any], path: str, reference: str) -> M:
    """Validate ``data`` as ``model`` (its ``source_path`` set to ``path``) or raise a named ConfigError."""
    try:
        return model.model_validate({**data, "source_path": str(path)})
    except ValidationError as err:
        raise format_validation_error(str(path), err, reference) from None


def load_model(model: type[M], path: str | Path, reference: str, source_path: str | None = None) -> M:
    """Read and validate a TOML file as ``model``; ``reference`` names the doc of its keys."""
    data = read_toml(path)
    if "source_path" in data:
        raise ConfigError(str(path), [f"source_path: unknown key (check spelling; see {reference})"])
    return model_from_dict(model, data, source_path or str(path), reference)
