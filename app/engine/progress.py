"""Headless progress display: a bus subscriber that shows a live status line and results.

The subscriber (``ProgressDisplay.__call__``) runs on the engine's thread and only copies
the few numbers it needs and enqueues them; a display thread renders them with rich: a
live line (point i/N, state, frequency, amplitude error, drive voltage against the ceiling,
ETA) on a terminal, and one result line per settled point and one line per fault
everywhere (plain lines when the output is not a terminal).

Result lines number points from 1 and show the phase as people read it everywhere
(app.core.phase: degrees, unwrapped along frequency per forcing amplitude, ±95 %), over
the points settled so far plus the run's kept points given as ``known`` (re-acquire,
resume), so a line reads what ``review`` and the export will show for an ascending sweep.
The finish line counts flagged points among those settled by the rule the run's index and
export count with (``app.core.flagging``: the attempt the acceptance rule takes is flagged). The pre-scan's transfer is shown
as one summary line and a text plot of its gain per volt against frequency (log scale).

Imports: standard library, numpy, rich, ``app.core.phase``, ``app.core.flagging`` and
``app.engine.events`` only.
"""

from __future__ import annotations

import math
import queue
import threading
import time
from typing import IO, Any, Iterable

from rich.console import Console
from rich.live import Live
from rich.text import Text

from ..core.flagging import point_flagged
from ..core.phase import phase_as_read_deg
from .events import (DriveChanged, Event, FaultRaised, PointSettled, StateChanged, SweepFinished,
                     SweepStarted, TransferMeasured, TuningStep, Notice)

_STOP = object()


class ProgressDisplay:
    """Subscribe with ``bus.subscribe(display)``; ``start()`` before the sweep, ``close()`` after."""

    def __init__(self, file: IO[str] | None = None, estimated_s: float | None = None,
                 known: Iterable[tuple[int, float, float, float]] = ()):
        """``known``: (point_index, freq_hz, target_ratio, phase_rad) of points the run already keeps."""
        self.console = Console(file=file, highlight=False, soft_wrap=True)
        self._queue: queue.Queue[Any] = queue.Queue()
        self._thread: threading.Thread | None = None
        self._estimated_s = estimated_s
        self.status: dict[str, Any] = {"point": None, "n": 0, "state": "idle", "freq_hz": math.nan,
                                       "error": math.nan, "drive_v": 0.0, "ceiling_v": math.nan,
                                       "settled": 0}
        self._t0 = time.monotonic()
        self.lines: list[str] = []     # every result/fault line printed (for the caller's summary)
        # point index -> (freq_hz, target_ratio, wrapped phase_rad): the curve the phase is unwrapped on
        self._phases: dict[int, tuple[float, float, float]] = {int(i): (float(f), float(a), float(ph))
                                                               for i, f, a, ph in known}
        # points settled in this sweep -> (flags, warnings) of each attempt, counted by app.core.flagging
        self._attempts: dict[int, list[tuple[tuple[str, ...], tuple[str, ...]]]] = {}
        self._unevaluated: set[int] = set()     # point numbers (from 1) whose record failed evaluation

    # -- engine thread: copy and enqueue only
    def __call__(self, event: Event) -> None:
        if isinstance(event, PointSettled):
            r = event.result
            self._queue.put(("settled", event.point_index, event.freq_hz, event.target_ratio,
                             float(r.velocity.amplitude_ratio), float(r.gain), float(r.gain_ci95),
                             float(r.phase_rad), float(r.phase_ci95_rad), event.drive_v,
                             tuple(dict.fromkeys((*event.flags, *map(str, getattr(r, "warnings", ()) or ())))),
                             tuple(event.flags), tuple(map(str, getattr(r, "warnings", ()) or ()))))
        elif isinstance(event, (StateChanged, DriveChanged, TuningStep, FaultRaised, SweepStarted, SweepFinished,
                                TransferMeasured, Notice)):
            self._queue.put(event if not isinstance(event, SweepStarted)
                            else ("started", event.n_points, event.run_label, event.backend))

    def start(self) -> "ProgressDisplay":
        self._t0 = time.monotonic()
        self._thread = threading.Thread(target=self._loop, name="progress-display", daemon=True)
        self._thread.start()
        return self

    def close(self) -> None:
        if self._thread is not None:
            self._queue.put(_STOP)
            self._thread.join(10.0)
            self._thread = None

    # -- display thread
    def _loop(self) -> None:
        live = None
        if self.console.is_terminal:
            live = Live(self._status_text(), console=self.console, refresh_per_second=8, transient=True)
            live.start()
        try:
            while True:
                item = self._queue.get()
                if item is _STOP:
                    return
                line = self._apply(item)
                if line is not None:
                    self.lines.append(line.plain)
                    self.console.print(line)
                if live is not None:
                    live.update(self._status_text())
        finally:
            if live is not None:
                live.stop()

    def _apply(self, item: Any) -> Text | None:
        s = self.status
        if isinstance(item, tuple) and item[0] == "started":
            s["n"] = item[1]
            return Text(f"sweep {item[2]}: {item[1]} point{'' if item[1] == 1 else 's'} on {item[3] or 'back-end'} "
                        f"(a = |u'|/u_mean reached; phase in degrees, unwrapped, e^(+iωt))", style="bold")
        if isinstance(item, tuple) and item[0] == "settled":
            return self._result_line(item)
        if isinstance(item, StateChanged):
            s["state"], s["point"] = item.new, item.point_index
        elif isinstance(item, DriveChanged):
            s["drive_v"], s["ceiling_v"], s["freq_hz"] = item.amplitude_v, item.ceiling_v, item.freq_hz
        elif isinstance(item, TuningStep):
            s["error"] = item.measured_ratio / item.target_ratio - 1.0
        elif isinstance(item, TransferMeasured):
            return transfer_text(item)
        elif isinstance(item, Notice):
            return Text(f"  note {item.name}: {item.message}", style="cyan")
        elif isinstance(item, FaultRaised):
            if item.name == "evaluation-failed" and item.point_index is not None:
                self._unevaluated.add(item.point_index + 1)
            style = "bold red" if item.fatal else "yellow"
            where = f"point {item.point_index + 1}: " if item.point_index is not None else ""
            return Text(f"  {'FAULT' if item.fatal else 'flag '} {item.name}: {where}{item.message}. "
                        f"{item.action}. {item.advice}", style=style)
        elif isinstance(item, SweepFinished):
            flagged = [i + 1 for i, a in sorted(self._attempts.items()) if point_flagged(a)]
            which = (f"{len(flagged)} flagged: point{'s' if len(flagged) > 1 else ''} {', '.join(map(str, flagged))}"
                     if flagged else "none flagged")
            lost = sorted(self._unevaluated - {i + 1 for i in self._attempts})
            if lost:
                which += (f"; not stored: point{'s' if len(lost) > 1 else ''} {', '.join(map(str, lost))}, whose "
                          f"record could not be evaluated (see the flags above)")
            return Text(f"sweep {item.reason}: {item.n_settled} of {item.n_points} points settled and kept "
                        f"({which})", style="bold")
        return None

    def _result_line(self, item: tuple) -> Text:
        _, index, freq, target, achieved, gain, gain_ci, phase, phase_ci, drive_v, flags, own, warnings = item
        self.status["settled"] += 1
        n = self.status["n"] or "?"
        self._attempts.setdefault(index, []).append((own, warnings))
        interrupted = "interrupted" in flags
        if not interrupted:          # a record cut short is never kept: it does not join the curve
            self._phases[index] = (freq, target, phase)
        shown = self._phase_deg(index, freq, target, phase)
        text = (f"  {self.status['settled']:>3} of {n}  point {index + 1:<4}{freq:8.1f} Hz  a {achieved:.4f} ({(achieved / target - 1) * 100:+5.1f} %)  "
                f"gain {gain:.3f} ± {gain_ci:.3f}  phase {shown:+7.1f}° ± {math.degrees(phase_ci):.1f}°  "
                f"drive {drive_v:.3f} V peak")
        if flags:
            text += f"  [{', '.join(flags)}]"
        return Text(text, style="yellow" if flags else "")

    def _phase_deg(self, index: int, freq: float, target: float, phase: float) -> float:
        """This point's phase unwrapped along frequency with the other points of its amplitude."""
        curve = {**self._phases, index: (freq, target, phase)}
        keys = list(curve)
        f, a, ph = (list(col) for col in zip(*(curve[k] for k in keys)))
        return float(phase_as_read_deg(f, ph, a)[keys.index(index)])

    def _status_text(self) -> Text:
        s = self.status
        n = s["n"] or 0
        done = s["settled"]
        point = "-" if s["point"] is None else f"{s['point'] + 1} ({done}/{n} done)"
        elapsed = time.monotonic() - self._t0
        eta = "?"
        if done and n:
            eta = f"{elapsed / done * (n - done):.0f} s"
        elif self._estimated_s:
            eta = f"~{max(0.0, self._estimated_s - elapsed):.0f} s"
        err = "" if math.isnan(s["error"]) else f"  amplitude error {s['error'] * 100:+.1f} %"
        ceiling = s["ceiling_v"]
        bar = ""
        if ceiling and not math.isnan(ceiling):
            filled = int(round(20 * min(1.0, s["drive_v"] / ceiling)))
            bar = f" [{'#' * filled}{'.' * (20 - filled)}] of {ceiling:g} V"
        freq = "" if math.isnan(s["freq_hz"]) else f"  {s['freq_hz']:.1f} Hz"
        return Text(f"point {point}  {s['state']}{freq}{err}  drive {s['drive_v']:.3f} V{bar}  ETA {eta}")


SPARK = "▁▂▃▄▅▆▇█"


def transfer_text(ev: TransferMeasured) -> Text:
    """The pre-scan in two lines: a summary, and |u'/u_mean| per volt along frequency (log scale,
    one character per line; '·' where a line was lost in the noise)."""
    if ev.skipped:
        return Text(f"  pre-scan skipped: {ev.skipped}", style="dim")
    g = [x for x in ev.ratio_per_volt if math.isfinite(x) and x > 0]
    rel = sorted(r for r in ev.rel_sigma if math.isfinite(r))
    head = (f"  pre-scan: {len(ev.freqs_hz)} lines {min(ev.freqs_hz):g}-{max(ev.freqs_hz):g} Hz, {ev.levels} "
            f"level{'s' if ev.levels != 1 else ''}, {ev.duration_s:.1f} s, peak drive {ev.peak_drive_v:.3g} V, "
            f"total |u'|/u {ev.total_ratio:.3g}")
    if not g:
        return Text(head + "; every line lost in the noise", style="yellow")
    head += (f"; gain {min(g):.3g}-{max(g):.3g} per V, median uncertainty "
             f"{rel[len(rel) // 2] * 100 if rel else math.nan:.1f} %")
    lo, hi = math.log(min(g)), math.log(max(g))
    chars = []
    for x in ev.ratio_per_volt:
        if not (math.isfinite(x) and x > 0):
            chars.append("·")
            continue
        level = 0 if hi <= lo else int(round((math.log(x) - lo) / (hi - lo) * (len(SPARK) - 1)))
        chars.append(SPARK[level])
    return Text(head + "\n  gain per volt (log): " + "".join(chars))
