"""Read a record from another acquisition system as plain CSV.

Format: a header line ``time_s,<channel>,<channel>,...`` with channel names as in the
rig file, then one row per sample, comma separated, values in volts (UTF-8, with or
without a byte-order mark; LF or CRLF line ends). The sample rate comes from a
least-squares line through all time stamps; the stamps must lie on that uniform grid
within the precision they are printed with (a stamp printed as 1.234567E+00 is only
known to ±5e-7 s), so a time column exported with 7 significant digits is accepted
when the sampling is uniform. Errors name the file, the line and the column.
Must not import Qt or drivers.
"""

from __future__ import annotations

import csv
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import RecordError
from .record import SAMPLE_RATE_MAX_HZ, SAMPLE_RATE_MIN_HZ, VOLTS_MAX

MIN_ROWS = 16
# A stamp may lie off the fitted grid by half its printed resolution plus this share of a step
# (clock jitter, stamps computed in single precision); a missing or repeated row is a whole step.
JITTER_STEPS = 0.1
# A missing or repeated row moves the later stamps by a whole step, which still shows through
# rounding up to about 0.6 step (tests/storage/test_csv_import.py); coarser stamps cannot show it.
RESOLUTION_STEPS = 0.6
_NUMBER = re.compile(r"\s*[+-]?(\d*)(?:\.(\d*))?(?:[eE]([+-]?\d+))?\s*")


@dataclass(frozen=True)
class CsvRecord:
    data: np.ndarray               # (n_channels, n_samples) volts
    channels: tuple[str, ...]
    sample_rate_hz: float
    path: str


def _read_text(p: Path) -> str:
    if not p.exists():
        raise RecordError(f"{p}: file not found")
    if not p.is_file():
        raise RecordError(f"{p}: not a regular file, expected a CSV record")
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise RecordError(f"{p}: cannot read file: {exc.strerror or exc}") from None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        hint = " (it looks like an HDF5 file: name it .h5)" if raw.startswith(b"\x89HDF") else ""
        raise RecordError(f"{p}: line {line} is not UTF-8 text (byte {exc.start}){hint}; expected a CSV "
                          f"record") from None


def _locate_bad_cell(p: Path, header: list[str], rows: list[tuple[int, str]]) -> str:
    for line_no, line in rows:
        cells = line.split(",")
        if len(cells) != len(header):
            return f"line {line_no} has {len(cells)} cells, the header has {len(header)}"
        for col, cell in zip(header, cells):
            try:
                float(cell)
            except ValueError:
                return f"line {line_no}, column '{col}': {cell.strip()[:40]!r} is not a number"
    return "a cell could not be read as a number"


def resolution_s(stamp: str) -> tuple[float, int]:
    """The place value of a printed number's last digit and its count of significant digits:
    '1.234567E+00' -> (1e-6, 7), '0.25' -> (0.01, 2). (0.0, 0) when the text is not a plain
    decimal number (it is then judged as exact)."""
    m = _NUMBER.fullmatch(stamp)
    if m is None or not (m.group(1) or m.group(2)):
        return 0.0, 0
    frac = m.group(2) or ""
    return 10.0 ** (int(m.group(3) or 0) - len(frac)), len(((m.group(1) or "") + frac).lstrip("0"))


def _resolutions(stamps: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """``resolution_s`` of every stamp, vectorised (the plain loop where the text is unusual)."""
    try:
        arr = np.strings.upper(np.strings.strip(np.array(stamps, dtype=np.str_)))
        mant, sep, exp = np.strings.partition(arr, "E")
        expo = np.where(sep == "E", np.where(exp == "", "0", exp), "0").astype(np.int64)
        whole, _, frac = np.strings.partition(np.strings.lstrip(mant, "+-"), ".")
        n_frac = np.strings.str_len(frac)
        sig = np.strings.str_len(np.strings.lstrip(np.strings.add(whole, frac), "0"))
        if not (np.strings.isdecimal(np.strings.add(whole, frac)) | (np.strings.add(whole, frac) == "")).all():
            raise ValueError("not plain decimal numbers")
        return 10.0 ** (expo - n_frac).astype(float), sig
    except (ValueError, OverflowError):
        pairs = [resolution_s(s) for s in stamps]
        return np.array([r for r, _ in pairs]), np.array([d for _, d in pairs])


def read_csv_record(path: str | Path) -> CsvRecord:
    p = Path(path)
    text = _read_text(p)
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        raise RecordError(f"{p}: empty file or empty first line; expected a header 'time_s,<channel>,...'")
    header = next(csv.reader([lines[0]]))
    names = [h.strip() for h in header]
    if names[0] != "time_s":
        raise RecordError(f"{p}: the first column must be 'time_s', found {names[0]!r}")
    if len(names) < 2:
        raise RecordError(f"{p}: no channel columns after 'time_s'")
    unnamed = [i + 1 for i, n in enumerate(names) if not n]
    if unnamed:
        raise RecordError(f"{p}: header column(s) {', '.join(map(str, unnamed))} have no name")
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise RecordError(f"{p}: duplicate column name(s) {', '.join(dupes)}")
    rows = [(no, ln) for no, ln in enumerate(lines[1:], start=2) if ln.strip()]
    if len(rows) < MIN_ROWS:
        raise RecordError(f"{p}: only {len(rows)} rows; a record needs many periods of the forcing")
    try:
        table = np.loadtxt([ln for _, ln in rows], delimiter=",", ndmin=2, dtype=float)
    except Exception:  # numpy raises ValueError for bad cells, others for stranger text
        raise RecordError(f"{p}: {_locate_bad_cell(p, names, rows)}") from None
    if table.shape != (len(rows), len(names)):
        raise RecordError(f"{p}: rows have {table.shape[1]} cells, the header has {len(names)}")
    if not np.isfinite(table).all():
        row, col = np.argwhere(~np.isfinite(table))[0]
        raise RecordError(f"{p}: line {rows[row][0]} (sample {row}), column '{names[col]}' is not a finite number "
                          f"({int((~np.isfinite(table[:, col])).sum())} such cell(s) in that column)")
    if table.shape[1] > 1 and not (np.abs(table[:, 1:]) <= VOLTS_MAX).all():
        row, col = np.argwhere(~(np.abs(table[:, 1:]) <= VOLTS_MAX))[0]
        raise RecordError(f"{p}: line {rows[row][0]}, column '{names[col + 1]}': {table[row, col + 1]:g} is not "
                          f"a voltage within ±{VOLTS_MAX:g} V")
    step = _time_step(p, table[:, 0], [ln.split(",", 1)[0] for _, ln in rows], [no for no, _ in rows])
    return CsvRecord(data=np.ascontiguousarray(table[:, 1:].T), channels=tuple(names[1:]),
                     sample_rate_hz=1.0 / step, path=str(p))


def _time_step(p: Path, t: np.ndarray, stamps: list[str], line_nos: list[int]) -> float:
    """The sample step (s) from a least-squares line through all stamps, after checking that
    every stamp lies on that grid within its printed resolution."""
    n = t.size
    span = float(t[-1] - t[0])
    if not span > 0:
        raise RecordError(f"{p}: the time column does not increase (first stamp {t[0]:g} s at line "
                          f"{line_nos[0]}, last {t[-1]:g} s at line {line_nos[-1]})")
    rough = span / (n - 1)
    if not 1 / SAMPLE_RATE_MAX_HZ <= rough <= 1 / SAMPLE_RATE_MIN_HZ:
        raise RecordError(f"{p}: the time column spans {span:g} s over {n} rows, a step of {rough:g} s, i.e. "
                          f"a sample rate of {1 / rough:g} Hz; expected {SAMPLE_RATE_MIN_HZ:g} to "
                          f"{SAMPLE_RATE_MAX_HZ:g} Hz with the time column in seconds")
    res, sig = _resolutions(stamps)
    # printed with trailing zeros dropped ('%g'), a stamp shows fewer digits than it was rounded to:
    # judge the column's resolution by the stamps that show all its digits
    full = np.where(sig == sig.max(), res, 0.0)
    coarse = int(np.argmax(full))
    if res[coarse] > RESOLUTION_STEPS * rough:
        top = math.floor(math.log10(max(abs(t[0]), abs(t[-1]))))
        digits = top + 1 - math.floor(math.log10(RESOLUTION_STEPS * rough))
        raise RecordError(f"{p}: the time column is printed too coarsely to show that the samples are evenly "
                          f"spaced: line {line_nos[coarse]} ({stamps[coarse].strip()!r}) is rounded to "
                          f"{res[coarse]:g} s, the sample step is {rough:g} s; export the time column with at "
                          f"least {digits} significant digits (e.g. %.{digits - 1}E)")
    i = np.arange(n, dtype=float)
    x = t - t[0]
    ic = i - i.mean()
    step = float(np.dot(ic, x - x.mean()) / np.dot(ic, ic))
    offset = float(x.mean() - step * i.mean())
    ulp = 4 * np.spacing(np.abs(t))
    allowed_stamp = 0.5 * res + JITTER_STEPS * step + ulp
    d = np.diff(t)
    allowed_diff = 0.5 * (res[1:] + res[:-1]) + JITTER_STEPS * step + ulp[1:]
    bad_diff = np.abs(d - step) > allowed_diff
    if bad_diff.any():
        k = int(np.argmax(bad_diff))
        ratio = d[k] / step
        if ratio <= 0:
            what = "the time goes backwards or repeats (a row repeated or out of order)"
        elif abs(ratio - round(ratio)) < 0.2 and round(ratio) >= 2:
            what = f"{round(ratio) - 1} sample(s) seem to be missing"
        else:
            what = "the step changes there"
        raise RecordError(f"{p}: uneven time steps: from line {line_nos[k]} to line {line_nos[k + 1]} the time "
                          f"goes from {stamps[k].strip()} to {stamps[k + 1].strip()} s, a step of {d[k]:.6g} s "
                          f"where all stamps together give {step:.6g} s, more than their printed precision "
                          f"allows: {what}. flamebode needs records sampled at one constant rate")
    off = x - (offset + step * i)
    bad_stamp = np.abs(off) > allowed_stamp
    if bad_stamp.any():
        k = int(np.argmax(np.abs(off) / allowed_stamp))
        raise RecordError(f"{p}: uneven time steps: the stamp at line {line_nos[k]} ({stamps[k].strip()} s) "
                          f"lies {off[k]:.3g} s ({off[k] / step:+.2f} steps) off the uniform grid fitted "
                          f"through all {n} stamps (step {step:.6g} s), more than its printed precision "
                          f"allows: the sample rate drifts during the record. flamebode needs records "
                          f"sampled at one constant rate")
    return step
