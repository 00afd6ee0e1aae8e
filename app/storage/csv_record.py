"""Read a record from another acquisition system as plain CSV.

Format: a header line ``time_s,<channel>,<channel>,...`` with channel names as in the
rig file, then one row per sample, comma separated, values in volts. The sample rate
comes from the time column, which must be evenly spaced. Errors name the file, the row
and the column. Must not import Qt or drivers.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import RecordError


@dataclass(frozen=True)
class CsvRecord:
    data: np.ndarray               # (n_channels, n_samples) volts
    channels: tuple[str, ...]
    sample_rate_hz: float
    path: str


def _locate_bad_cell(path: Path, n_cols: int) -> str:
    with path.open(newline="", encoding="utf-8", errors="replace") as fh:
        reader = csv.reader(fh)
        header = next(reader)
        for row_no, row in enumerate(reader, start=2):
            if len(row) != n_cols:
                return f"line {row_no} has {len(row)} cells, the header has {n_cols}"
            for col, cell in zip(header, row):
                try:
                    float(cell)
                except ValueError:
                    return f"line {row_no}, column '{col.strip()}': {cell!r} is not a number"
    return "a cell could not be read as a number"


def read_csv_record(path: str | Path) -> CsvRecord:
    p = Path(path)
    try:
        with p.open(newline="", encoding="utf-8") as fh:
            header = next(csv.reader(fh), None)
    except FileNotFoundError:
        raise RecordError(f"{p}: file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RecordError(f"{p}: cannot read file: {exc}") from None
    if not header:
        raise RecordError(f"{p}: empty file; expected a header 'time_s,<channel>,...'")
    names = [h.strip() for h in header]
    if names[0] != "time_s":
        raise RecordError(f"{p}: the first column must be 'time_s', found {names[0]!r}")
    if len(names) < 2:
        raise RecordError(f"{p}: no channel columns after 'time_s'")
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise RecordError(f"{p}: duplicate column name(s) {', '.join(dupes)}")
    try:
        table = np.loadtxt(p, delimiter=",", skiprows=1, ndmin=2, dtype=float)
    except ValueError:
        raise RecordError(f"{p}: {_locate_bad_cell(p, len(names))}") from None
    if table.shape[1] != len(names):
        raise RecordError(f"{p}: rows have {table.shape[1]} cells, the header has {len(names)}")
    if not np.isfinite(table).all():
        row, col = np.argwhere(~np.isfinite(table))[0]
        raise RecordError(f"{p}: line {row + 2}, column '{names[col]}' is not a finite number")
    if table.shape[0] < 16:
        raise RecordError(f"{p}: only {table.shape[0]} rows; a record needs many periods of the forcing")
    dt = np.diff(table[:, 0])
    step = float(table[-1, 0] - table[0, 0]) / (table.shape[0] - 1)
    if step <= 0:
        raise RecordError(f"{p}: the time column does not increase")
    uneven = np.abs(dt - step) > 1e-3 * step + 1e-12
    if uneven.any():
        row = int(np.argmax(uneven)) + 3
        raise RecordError(f"{p}: uneven time steps (first at line {row}: step {dt[row - 3]:.6g} s, "
                          f"typical {step:.6g} s); resample to a constant rate first")
    return CsvRecord(data=np.ascontiguousarray(table[:, 1:].T), channels=tuple(names[1:]),
                     sample_rate_hz=1.0 / step, path=str(p))
