"""Small targeted edits of TOML text for the set-up form: read the value at a dotted key and
rewrite only that value, keeping every comment, blank line and the order of the file.

The text stays the source of truth: the form reads its values from the parsed text and
writes a change back as one replaced value (``key = value`` line in its table), or a new
line in the table (a new table at the end when there is none). Keys inside arrays of tables
(``[[pressure_sensors]]``) and values spanning several lines are not edited here.

Imports: the standard library only. Never Qt.
"""

from __future__ import annotations

import json
import re
import tomllib
from typing import Any

_TABLE = re.compile(r"^\s*\[\s*([A-Za-z0-9_.\-\s\"]+?)\s*\]\s*(#.*)?$")
_ARRAY_TABLE = re.compile(r"^\s*\[\[")
_KEY = re.compile(r"^(\s*)([A-Za-z0-9_\-]+(?:\s*\.\s*[A-Za-z0-9_\-]+)*)(\s*=\s*)")


def value_at(data: dict[str, Any], dotted: str) -> Any:
    """The value at ``a.b.c`` in parsed TOML, or None when a part is missing."""
    node: Any = data
    for part in dotted.split("."):
        if not isinstance(node, dict) or part not in node:
            return None
        node = node[part]
    return node


def read_values(text: str, keys: list[str]) -> dict[str, Any]:
    """Each key's value in ``text`` (raises tomllib.TOMLDecodeError when the text is not TOML)."""
    data = tomllib.loads(text)
    return {k: value_at(data, k) for k in keys}


def display(value: Any) -> str:
    """A value as the form shows it: strings bare, lists comma-separated, numbers as written."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, list):
        return ", ".join(display(v) for v in value)
    return str(value)


def _number(text: str) -> str | None:
    t = text.strip()
    try:
        int(t)
        return t
    except ValueError:
        pass
    try:
        float(t)
        return t if re.fullmatch(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?", t) else None
    except ValueError:
        return None


def literal(text: str, like: Any) -> str:
    """The TOML literal for what a person typed, shaped like the value it replaces.

    A number where a number was (anything else is written as a string, so the loaders name
    the key and the problem); a list of numbers or strings where a list was; else a string."""
    t = text.strip()
    if isinstance(like, bool) and t in ("true", "false"):
        return t
    if isinstance(like, (int, float)) and not isinstance(like, bool):
        return _number(t) or json.dumps(t, ensure_ascii=False)
    if isinstance(like, list):
        parts = [p.strip() for p in t.split(",") if p.strip()]
        return "[" + ", ".join(_number(p) or json.dumps(p, ensure_ascii=False) for p in parts) + "]"
    return json.dumps(t, ensure_ascii=False)


def _value_end(line: str, start: int) -> int | None:
    """Where the value that starts at ``start`` ends (before spaces and a comment); None when the
    value continues on the next line (open bracket or string)."""
    quote: str | None = None
    depth = 0
    i = start
    while i < len(line):
        c = line[i]
        if quote:
            if c == "\\" and quote == '"':
                i += 2
                continue
            if c == quote:
                quote = None
        elif c in "\"'":
            if line.startswith(c * 3, i):
                return None                      # multi-line strings are left alone
            quote = c
        elif c in "[{":
            depth += 1
        elif c in "]}":
            depth -= 1
        elif c == "#":
            break
        i += 1
    if quote or depth > 0:
        return None
    return len(line[:i].rstrip())


def set_value(text: str, dotted: str, value_literal: str) -> str:
    """``text`` with the value at ``dotted`` replaced by ``value_literal`` (added when missing)."""
    table, _, key = dotted.rpartition(".")
    lines = text.splitlines(keepends=True)
    current: str | None = ""                     # "" = the top level; None = inside an array of tables
    last_line_of: dict[str, int] = {}
    first_table_line: int | None = None
    for n, line in enumerate(lines):
        if _ARRAY_TABLE.match(line):
            current = None
            first_table_line = n if first_table_line is None else first_table_line
            continue
        m = _TABLE.match(line)
        if m:
            current = re.sub(r"\s+", "", m.group(1)).replace('"', "")
            first_table_line = n if first_table_line is None else first_table_line
            last_line_of[current] = n
            continue
        if current is None:
            continue
        k = _KEY.match(line)
        if k is None:
            continue
        last_line_of[current] = n
        written = re.sub(r"\s+", "", k.group(2))            # ``a.b = 1`` (a dotted key) names a.b too
        if (f"{current}.{written}" if current else written) == dotted:
            body = line.rstrip("\r\n")
            end = _value_end(body, k.end())
            if end is None:
                raise ValueError(f"{dotted}: the value spans several lines; edit it in the text")
            lines[n] = body[:k.end()] + value_literal + body[end:] + line[len(body):]
            return "".join(lines)
    new_line = f"{key} = {value_literal}\n"
    if table in last_line_of:
        at = last_line_of[table] + 1
    elif table == "":
        at = first_table_line if first_table_line is not None else len(lines)
    else:
        tail = "" if not lines or lines[-1].endswith("\n") else "\n"
        return "".join(lines) + f"{tail}\n[{table}]\n{new_line}"
    if at > 0 and not lines[at - 1].endswith("\n"):
        lines[at - 1] += "\n"
    lines.insert(at, new_line)
    return "".join(lines)
