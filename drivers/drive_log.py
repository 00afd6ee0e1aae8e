"""The drive log: an audit trail of every drive block the ceiling guard puts out.

When the environment variable ``FLAMEBODE_DRIVE_LOG`` names a file (or :func:`open_log` is
called), every block rendered by a :class:`drivers.guard.CeilingGuard` and every amplitude
schedule of an instrument set by commands adds one CSV line::

    wall_time_s,peak_v,n_samples,rate_hz,ceiling_v,latched,end_v

``wall_time_s`` is ``time.time()`` when the guard produced the block, ``peak_v`` the
largest |sample| (peak volts at the amplifier input), ``latched`` 1 after an emergency halt,
``end_v`` the |last sample| (a ramp to zero that ends inside a block shows 0 there). A
halt taking effect adds a line of its own with ``peak_v`` 0 and ``n_samples`` 0 (the
output is at zero from then on, whether or not the back-end renders another block).
A lab can keep it beside the run as evidence of what reached the speakers; the safety tests
read it from outside the process (a signal at time t: no non-zero line after t).

Lines are buffered and written by the calling thread at most every 50 ms (and at exit), so
a render loop never waits on the disk for long. The log appends: several processes may
share one file (each line is written whole).

Imports: standard library and numpy only.
"""

from __future__ import annotations

import atexit
import os
import threading
import time
from pathlib import Path

import numpy as np

ENV = "FLAMEBODE_DRIVE_LOG"
HEADER = "wall_time_s,peak_v,n_samples,rate_hz,ceiling_v,latched,end_v\n"
FLUSH_S = 0.05

_lock = threading.Lock()
_path: Path | None = None
_lines: list[str] = []
_last_flush = 0.0


def open_log(path: str | Path | None) -> None:
    """Start logging to ``path`` (appending; a header is written to a new file); None stops."""
    global _path
    flush()
    with _lock:
        _path = Path(path) if path else None
        if _path is not None and (not _path.exists() or _path.stat().st_size == 0):
            _path.parent.mkdir(parents=True, exist_ok=True)
            with open(_path, "a", encoding="ascii") as fh:
                fh.write(HEADER)


def is_open() -> bool:
    return _path is not None


def note(samples: np.ndarray, rate_hz: float, ceiling_v: float, latched: bool) -> None:
    """One block (volts) or amplitude schedule; cheap no-op when no log is open."""
    if _path is None or samples.size == 0:
        return
    peak = float(np.max(np.abs(samples)))
    end = float(abs(samples[-1]))
    line = (f"{time.time():.6f},{peak:.9g},{samples.size},{rate_hz:.9g},{ceiling_v:.9g},{int(bool(latched))},"
            f"{end:.9g}\n")
    with _lock:
        _lines.append(line)
    if time.monotonic() - _last_flush >= FLUSH_S:
        flush()


def note_halt(rate_hz: float, ceiling_v: float) -> None:
    """A halt has taken effect: the output is at zero from now (a line with 0 samples)."""
    if _path is None:
        return
    with _lock:
        _lines.append(f"{time.time():.6f},0,0,{rate_hz:.9g},{ceiling_v:.9g},1,0\n")
    flush()


def flush() -> None:
    """Write the buffered lines now."""
    global _last_flush
    with _lock:
        _last_flush = time.monotonic()
        if _path is None or not _lines:
            _lines.clear()
            return
        text = "".join(_lines)
        _lines.clear()
        try:
            with open(_path, "a", encoding="ascii") as fh:
                fh.write(text)
        except OSError:
            pass   # an audit file must never stop the drive from being zeroed


def read_log(path: str | Path) -> np.ndarray:
    """The log as a structured array (for tests and for a lab's own checks)."""
    names = HEADER.strip().split(",")
    rows = [line.split(",") for line in Path(path).read_text(encoding="ascii").splitlines()[1:] if line]
    data = np.array([tuple(float(v) for v in r) for r in rows if len(r) == len(names)],
                    dtype=[(n, "f8") for n in names])
    return data


if os.environ.get(ENV):
    open_log(os.environ[ENV])
atexit.register(flush)
