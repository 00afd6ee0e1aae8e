"""``flamebode backends``: list the hardware back-ends and whether they can be used here.

A rich table on a terminal; plain aligned columns when piped (one back-end per line, easy
to grep); ``--json`` for scripts. Listing probes each back-end cheaply and never fails on a
missing library: that back-end is shown as unavailable with the reason.

Imports: ``drivers.registry`` (at run time) and rich (only on a terminal). No Qt.
"""

from __future__ import annotations

import argparse
import json
import sys


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", action="store_true", help="print the list as JSON for scripts")


def _rows(infos) -> list[dict[str, object]]:
    return [{"name": i.name, "title": i.title, "available": i.availability.available,
             "reason": i.availability.reason, "details": dict(i.availability.details), "target": i.target}
            for i in infos]


def _plain(rows: list[dict[str, object]]) -> str:
    header = ("NAME", "STATUS", "TITLE", "REASON")
    lines = [(str(r["name"]), "available" if r["available"] else "unavailable", str(r["title"]),
              str(r["reason"]).replace("\n", " ")) for r in rows]
    widths = [max(len(row[c]) for row in [header, *lines]) for c in range(3)]
    fmt = "  ".join(f"{{:<{w}}}" for w in widths) + "  {}"
    return "\n".join(fmt.format(*row).rstrip() for row in [header, *lines])


def _rich(rows: list[dict[str, object]]) -> None:
    from rich.console import Console
    from rich.table import Table

    table = Table(title="flamebode back-ends")
    for col in ("name", "status", "title", "reason"):
        table.add_column(col, overflow="fold")
    for r in rows:
        status = "[green]available[/green]" if r["available"] else "[red]unavailable[/red]"
        table.add_row(str(r["name"]), status, str(r["title"]), str(r["reason"]))
    Console(file=sys.stdout).print(table)


def run(args: argparse.Namespace) -> int:
    from drivers.registry import list_backends

    rows = _rows(list_backends())
    if args.json:
        print(json.dumps(rows, indent=2))
    elif not rows:
        print("no back-ends are declared (is flamebode installed with `pip install -e .`?)")
    elif sys.stdout.isatty():
        _rich(rows)
    else:
        print(_plain(rows))
    return 0
