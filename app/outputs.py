"""Files flamebode writes on request (a fit, a report, a figure, a calibration): where they may go.

``output_target`` refuses, with a message naming the path, before anything is computed:

* a folder, a missing folder, or a folder that cannot be written;
* a path inside a run folder other than its ``export/`` folder (the index, the records and the
  snapshots are never written over by these commands);
* an existing file that is not of the kind being written (``is_own``, e.g. a rig file named as
  the calibration's output, or a record named as a fit's). A file of the same kind is replaced:
  writing a new calibration over the old one is the normal case.

``write_whole`` writes through a temporary file beside the target and renames it over the target;
on any failure the temporary file is removed and an OSError becomes a plain message.

Imports: the standard library and ``app.errors`` only (every layer may use it).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Callable

from .errors import FlamebodeError

RUN_INDEX = "index.sqlite"


class OutputError(FlamebodeError):
    """An output path flamebode will not write to; the message names it and why."""


def run_folder_of(path: Path) -> Path | None:
    """The run folder ``path`` lies in (an ancestor holding the run index), or None."""
    for parent in path.resolve().parents:
        if (parent / RUN_INDEX).is_file():
            return parent
    return None


def output_target(path: str | Path, what: str, is_own: Callable[[Path], bool] | None = None) -> Path:
    """``path`` as a Path if ``what`` may be written there; else OutputError saying why."""
    p = Path(path)
    if p.is_dir():
        raise OutputError(f"{p}: is a folder; name the {what} file to write")
    folder = p.parent if str(p.parent) else Path(".")
    run = run_folder_of(p)
    if run is not None:
        export = (run / "export").resolve()
        try:
            p.resolve().relative_to(export)
        except ValueError:
            raise OutputError(f"{p}: inside the run folder {run}, whose index, records and snapshots are never "
                              f"written over; write the {what} under {run / 'export'} or elsewhere") from None
        if folder.resolve() == export:
            export.mkdir(exist_ok=True)          # the run's own folder for what is made from it
    if not folder.is_dir():
        raise OutputError(f"{p}: the folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise OutputError(f"{p}: the folder {folder} cannot be written")
    if p.exists():
        if not p.is_file():
            raise OutputError(f"{p}: exists and is not a regular file")
        if is_own is not None and not _safe(is_own, p):
            raise OutputError(f"{p}: exists and is not a {what}; not written over (choose another name, or "
                              f"remove it yourself)")
    return p


def _safe(check: Callable[[Path], bool], p: Path) -> bool:
    try:
        return bool(check(p))
    except Exception:          # an unreadable file is not ours
        return False


def starts_with(*prefixes: bytes) -> Callable[[Path], bool]:
    """``is_own`` for formats recognised by their first bytes (PDF, PNG, SVG/XML, HDF5)."""
    def check(p: Path) -> bool:
        with open(p, "rb") as fh:
            head = fh.read(16)
        return p.stat().st_size == 0 or any(head.startswith(x) for x in prefixes)
    return check


PDF = starts_with(b"%PDF")
PNG = starts_with(b"\x89PNG")
SVG = starts_with(b"<?xml", b"<svg")
HDF5 = starts_with(b"\x89HDF")
MAT = starts_with(b"MATLAB")


def write_whole(path: Path, write: Callable[[Path], None]) -> Path:
    """``write(tmp)`` then rename ``tmp`` over ``path``; nothing half-written is left behind."""
    tmp = path.with_name(f".{path.name}.part")
    try:
        write(tmp)
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise OutputError(f"{path}: could not be written ({exc.strerror or exc})") from None
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path
