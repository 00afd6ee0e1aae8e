"""The emulator's two output files: its truth (read by tests only) and its status log.

* truth (JSON, rewritten whole through a temporary file and a rename): one entry per
  frequency the emulator was driven at steadily, with the FTF its physics applied there
  (``drivers.simulated.truth.true_ftf`` at the amplitude ratio the received drive gave).
  flamebode never reads it.
* status (JSON lines, appended about four times a second): what the emulator received
  (peak and rms of the drive in volts, its frequency), its counts (overflow/underflow flags of
  the audio stream, output starved, samples clipped at full scale) and events
  ("audio-server-lost", "audio-server-back").

Imports: json, os, time only.
"""

from __future__ import annotations

import json
import os
import time
from pathlib import Path
from typing import Any


def write_json_atomic(path: Path, value: Any) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(value, indent=1), encoding="utf-8")
    os.replace(tmp, path)


class TruthFile:
    """Steady drive segments → the truth at each frequency (the latest segment wins)."""

    def __init__(self, path: Path | None, point_fn, min_blocks: int = 8) -> None:
        self.path = path
        self._point_fn = point_fn          # (freq_hz, drive_peak_v) -> dict
        self._min_blocks = min_blocks
        self._points: dict[str, dict[str, Any]] = {}
        self._seg_f = 0.0
        self._seg_peaks: list[float] = []

    def add(self, freq_hz: float, peak_v: float) -> None:
        """One block's received drive: extends the steady segment or starts a new one."""
        steady = (freq_hz > 0 and self._seg_f > 0 and abs(freq_hz - self._seg_f) <= 0.05
                  and self._seg_peaks and abs(peak_v - self._seg_peaks[-1]) <= 0.01 * max(peak_v, 1e-9))
        if steady:
            self._seg_peaks.append(peak_v)
            if len(self._seg_peaks) == self._min_blocks or len(self._seg_peaks) % 50 == 0:
                self._record()
        else:
            self._seg_f, self._seg_peaks = freq_hz, ([peak_v] if freq_hz > 0 else [])

    def _record(self) -> None:
        peaks = sorted(self._seg_peaks)
        point = self._point_fn(self._seg_f, peaks[len(peaks) // 2])
        point["blocks"] = len(self._seg_peaks)
        point["time"] = time.time()
        self._points[f"{self._seg_f:.2f}"] = point
        if self.path is not None:
            write_json_atomic(self.path, {"points": sorted(self._points.values(), key=lambda p: p["freq_hz"])})

    @property
    def points(self) -> list[dict[str, Any]]:
        return sorted(self._points.values(), key=lambda p: p["freq_hz"])


class StatusLog:
    """Append-only JSON lines; each line is complete when written (flushed)."""

    def __init__(self, path: Path | None) -> None:
        self._fh = open(path, "a", encoding="utf-8") if path is not None else None

    def write(self, **fields: Any) -> None:
        if self._fh is None:
            return
        self._fh.write(json.dumps({"time": time.time(), **fields}) + "\n")
        self._fh.flush()

    def close(self) -> None:
        if self._fh is not None:
            self._fh.close()
            self._fh = None


def read_status(path: Path) -> list[dict[str, Any]]:
    """Every complete line of a status log (a torn last line is left out)."""
    out = []
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError:
        return out
    for line in text.splitlines():
        try:
            out.append(json.loads(line))
        except json.JSONDecodeError:
            pass
    return out
