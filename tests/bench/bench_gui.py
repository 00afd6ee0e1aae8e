"""Window benchmark: redraw rate and GUI event-loop latency while a sweep streams 8 channels
at 51.2 kS/s from the simulated burner.

Plain script (not collected by pytest): ``python tests/bench/bench_gui.py [--repeat N]
[--only fast|real]``. Offscreen unless a Qt platform is set; under X:
``QT_QPA_PLATFORM=xcb xvfb-run -a python tests/bench/bench_gui.py``. The machine is often
shared: run with ``--repeat 3`` and read the spread, not one row.

Rows: the simulator faster than real time (the GUI flooded with blocks) and in real time
(as at a rig). Measured: new frames handed to the trace curves per second (target >= 30),
the paint events of their view, the lateness of a 10 ms probe timer on the GUI thread (p50,
p99; target p99 <= 30 ms), whether every acquired sample reached the plot buffer, and the
"speed": simulated seconds per wall second (how much the window slows a fast rehearsal).

Imports: PySide6, numpy and the app's window.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
CONFIGS = ROOT / "configs"
PROBE_MS = 10


def eight_channel_rig(folder: Path) -> Path:
    """The demo rig with 6 pressure sensors + light + drive reference at 51.2 kS/s."""
    text = (CONFIGS / "demo-rig.toml").read_text(encoding="utf-8")
    head = text[:text.index("[[pressure_sensors]]")]
    tail = text[text.index("[light]"):]
    sensors = "".join(f'[[pressure_sensors]]\nchannel = "p{i + 1}"\nposition = "{x} mm"\nsensitivity = "14.5 mV/Pa"\n\n'
                      for i, x in enumerate((-820, -700, -560, -420, -280, -140)))
    tail = tail[:tail.index("[acquisition]")] + ('[acquisition]\nsample_rate = "51.2 kHz"\ninput_range = "10 V"\n'
                                                 'block_duration = "0.1 s"\n')
    path = folder / "rig-8ch.toml"
    path.write_text(head + sensors + tail, encoding="utf-8")
    return path


def plan(folder: Path, rig: Path, record_s: float) -> Path:
    path = folder / "plan.toml"
    path.write_text(f'name = "gui bench"\nrig = "{rig}"\n[frequencies]\nlinear = {{ start = "100 Hz", stop = "1000 Hz", '
                    f'step = "100 Hz" }}\n[amplitude]\nvalues = [0.05]\nbasis = "peak"\n[timing]\nrecord = "{record_s} s"\n'
                    f'settle = "0.3 s"\ntuning_window = "0.3 s"\ntuning_discard = "0.05 s"\n', encoding="utf-8")
    return path


class PaintCounter:
    """Counts paint events of a widget (what the user sees redrawn)."""

    def __init__(self, widget) -> None:
        from PySide6.QtCore import QEvent, QObject

        class Filter(QObject):
            def __init__(self, outer) -> None:
                super().__init__()
                self.outer = outer

            def eventFilter(self, obj, event) -> bool:
                if event.type() == QEvent.Type.Paint:
                    self.outer.count += 1
                return False

        self.count = 0
        self.filter = Filter(self)
        widget.viewport().installEventFilter(self.filter)


def run_case(app, label: str, rig: Path, plan_path: Path, runs: Path, fast: bool, limit_s: float) -> dict:
    from PySide6.QtCore import QElapsedTimer, QEventLoop, Qt, QTimer

    from app.ui.window import MainWindow

    win = MainWindow(rig, plan_path, runs_root=runs, fast=fast)
    win.resize(1400, 900)
    win.show()
    paints = PaintCounter(win.traces.layout_widget)
    lateness: list[float] = []
    clock = QElapsedTimer()
    probe = QTimer()
    probe.setTimerType(Qt.TimerType.PreciseTimer)
    probe.setInterval(PROBE_MS)
    last = [0]

    def tick() -> None:
        now = clock.nsecsElapsed()
        if last[0]:
            lateness.append((now - last[0]) / 1e6 - PROBE_MS)
        last[0] = now

    probe.timeout.connect(tick)
    win.start_sweep()
    while win.traces_buffer is None:                       # streaming has begun
        app.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 20)
    clock.start()
    probe.start()
    p0, f0, t0 = paints.count, win.traces.frames, time.perf_counter()
    while win.sweeps_closed < 1 and time.perf_counter() - t0 < limit_s:
        app.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 20)
    wall = time.perf_counter() - t0
    probe.stop()
    frames = paints.count - p0
    drawn = win.traces.frames - f0
    if win.sweeps_closed < 1:
        win.abort_sweep()
    while win.sweeps_closed < 1:
        app.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 20)
    dev = win.session.device
    complete = win.traces_buffer.total_samples == round(dev.time_s * dev.sample_rate_hz)
    simulated_s = dev.time_s
    win.close()
    lat = np.array(lateness) if lateness else np.array([np.nan])
    return {"case": label, "wall_s": wall, "sim_s": simulated_s, "speed": simulated_s / wall, "fps": drawn / wall, "paints": frames / wall,
            "p50": float(np.percentile(lat, 50)), "p99": float(np.percentile(lat, 99)),
            "max": float(np.max(lat)), "complete": complete}


def main() -> int:
    from PySide6.QtWidgets import QApplication

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=1, help="run each case this many times")
    parser.add_argument("--fast-record-s", type=float, default=3.0,
                        help="record length of the fast case (longer: more probe samples)")
    parser.add_argument("--only", choices=("fast", "real"), help="run one case only")
    args = parser.parse_args()
    app = QApplication.instance() or QApplication(sys.argv[:1])
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        rig = eight_channel_rig(folder)
        for _ in range(args.repeat if args.only != "real" else 0):
            rows.append(run_case(app, "fast simulator", rig, plan(folder, rig, args.fast_record_s), folder / "runs",
                                 True, 120.0))
        for _ in range(args.repeat if args.only != "fast" else 0):
            rows.append(run_case(app, "real time, 12 s", rig, plan(folder, rig, 1.0), folder / "runs", False, 12.0))
    print(f"window benchmark: 8 channels at 51.2 kS/s, platform {os.environ.get('QT_QPA_PLATFORM', 'default')}")
    print(f"{'case':<18}{'wall s':>8}{'sim s':>8}{'speed':>7}{'frames/s':>10}{'paints/s':>10}{'lat p50 ms':>12}"
          f"{'lat p99 ms':>12}{'lat max ms':>12}{'all samples':>13}")
    for r in rows:
        print(f"{r['case']:<18}{r['wall_s']:>8.1f}{r['sim_s']:>8.1f}{r['speed']:>6.1f}x{r['fps']:>10.1f}"
              f"{r['paints']:>10.1f}{r['p50']:>12.2f}{r['p99']:>12.2f}{r['max']:>12.1f}"
              f"{'yes' if r['complete'] else 'NO':>13}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
