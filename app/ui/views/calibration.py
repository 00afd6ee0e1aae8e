"""The sensors' relative calibration as the rig uses it: each pressure sensor's factor (gain and
phase against frequency, with 95 % intervals) from the calibration file the rig names,
and the sensors the commissioning record says drifted since the previous calibration.

``show_rig(path)`` reads the rig file, its calibration file and the commissioning record (all
description files, app.rig / app.calibration_file / app.commissioning_record) and redraws; any
problem is said in the caption; ``show_file(cal, rig)`` shows a file just written (saying when the
rig does not name it yet). ``side``: a widget beside the plots (the calibration run's controls,
``.calibration_run``). Imports: PySide6, pyqtgraph, numpy, the description modules and
``.style``. Never storage or commands.
"""

from __future__ import annotations

import html
from pathlib import Path
from typing import Callable

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QLabel, QPushButton, QSplitter, QTabWidget, QVBoxLayout, QWidget

from .style import CHANNEL_COLOURS, new_plot, pen, scroll_column

Z95 = 1.959963984540054      # 95 % bars, as every other view (normal coverage factor)


class CalibrationView(QWidget):
    def __init__(self, parent: QWidget | None = None, side: QWidget | None = None) -> None:
        super().__init__(parent)
        self.caption = QLabel("No rig file loaded")
        self.caption.setWordWrap(True)
        self.reload = QPushButton("Read again")
        self.layout_widget = pg.GraphicsLayoutWidget()
        plots = QWidget()
        lay = QVBoxLayout(plots)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.addWidget(self.caption)
        lay.addWidget(self.reload)
        lay.addWidget(self.layout_widget, 1)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(0, 0, 0, 0)
        if side is None:
            outer.addWidget(plots)
        else:                                    # e.g. the calibration run's controls, scrolling when short
            split = QSplitter()
            split.setObjectName("sensors-split")
            split.addWidget(scroll_column(side))
            split.addWidget(plots)
            split.setStretchFactor(0, 2)
            split.setStretchFactor(1, 3)
            split.setChildrenCollapsible(False)
            outer.addWidget(split)
        self.gain_plot = new_plot(self.layout_widget, "Relative calibration factor: gain", "gain (1)",
                                  "frequency (Hz)", row=0, col=0)
        self.phase_plot = new_plot(self.layout_widget, "Relative calibration factor: phase", "phase (deg)",
                                   "frequency (Hz)", row=1, col=0)
        self.legend = pg.LegendItem()            # beside the plots, never over the data
        self.layout_widget.addItem(self.legend, row=0, col=1)
        self.path: Path | None = None
        self.drifted: tuple[str, ...] = ()
        self.sensors: tuple[str, ...] = ()
        self.reload.clicked.connect(lambda: self.show_rig(self.path) if self.path else None)

    @classmethod
    def as_tab(cls, tabs: QTabWidget, rig_path: Callable[[], Path | None], title: str = "Sensors",
               side: QWidget | None = None) -> "CalibrationView":
        """A view added to ``tabs`` that reads the rig ``rig_path()`` names each time it is shown
        (``side``: a widget beside the plots)."""
        view = cls(side=side)
        tabs.addTab(view, title)

        def shown(_i: int) -> None:
            path = rig_path()
            if tabs.currentWidget() is view and path:
                view.show_rig(path)

        tabs.currentChanged.connect(shown)
        return view

    def _clear(self) -> None:
        self.gain_plot.clear()
        self.phase_plot.clear()
        self.legend.clear()
        self.layout_widget.hide()              # shown again only with factors to draw
        self.sensors, self.drifted = (), ()

    def show_rig(self, rig_path: str | Path) -> None:
        from app.calibration_file import resolve
        from app.errors import FlamebodeError
        from app.rig import load_rig

        self.path = Path(rig_path)
        self._clear()
        try:
            rig = load_rig(self.path)
            cal_path = resolve(rig)
            if cal_path is None:
                self.caption.setText(f"{html.escape(str(self.path))} names no calibration file: the sensors' nominal "
                                     "sensitivities are used (see 'flamebode calibrate').")
                return
        except (FlamebodeError, OSError) as exc:
            self.caption.setText(f"<b>Calibration not shown:</b> {html.escape(str(exc))}")
            return
        self._show_file(Path(cal_path), "")

    def show_file(self, cal_path: str | Path, rig_path: str | Path) -> None:
        """A calibration file just written for ``rig_path``, which may not name it yet."""
        from app.calibration_file import resolve
        from app.errors import FlamebodeError
        from app.rig import load_rig

        self.path = Path(rig_path)
        try:
            named = resolve(load_rig(self.path))
        except (FlamebodeError, OSError):
            named = None
        used = named is not None and Path(named).resolve() == Path(cal_path).resolve()
        self._show_file(Path(cal_path), "" if used else " <b>Newly written; the rig file does not name it yet</b> "
                                                         "(until it does, the sweeps use the file it names, or none).")

    def _show_file(self, cal_path: Path, note: str) -> None:
        from app.calibration_file import read_calibration
        from app.commissioning_record import read_record, record_path_for
        from app.errors import FlamebodeError

        self._clear()
        try:
            cal = read_calibration(cal_path)
        except (FlamebodeError, OSError) as exc:
            self.caption.setText(f"<b>Calibration not shown:</b> {html.escape(str(exc))}")
            return
        f = np.asarray(cal.frequency_hz, dtype=float)
        for j, s in enumerate(cal.sensors):
            colour = CHANNEL_COLOURS[j % len(CHANNEL_COLOURS)]
            g, ug = np.asarray(s.gain), Z95 * np.asarray(s.u_gain) * np.asarray(s.gain)   # 95 % bars, as elsewhere
            ph, up = np.asarray(s.phase_deg), Z95 * np.asarray(s.u_phase_deg)
            curve = self.gain_plot.plot(f, g, pen=pen(colour), symbol="o", symbolSize=5, symbolBrush=colour)
            self.legend.addItem(curve, s.name)
            self.gain_plot.addItem(pg.ErrorBarItem(x=f, y=g, top=ug, bottom=ug, pen=pen(colour), beam=0.0))
            self.phase_plot.plot(f, ph, pen=pen(colour), symbol="o", symbolSize=5, symbolBrush=colour)
            self.phase_plot.addItem(pg.ErrorBarItem(x=f, y=ph, top=up, bottom=up, pen=pen(colour), beam=0.0))
        # the names packed at the top of the legend's column, not spread down the plot's height
        self.legend.layout.setRowStretchFactor(len(cal.sensors), 1)
        self.sensors = tuple(s.name for s in cal.sensors)
        self.layout_widget.show()
        drift_text = ""
        try:
            last = read_record(record_path_for(self.path)).latest("pressure-calibration")
        except FlamebodeError as exc:
            last, drift_text = None, f" The commissioning record cannot be read: {html.escape(str(exc))}"
        if last is not None and Path(str(last.result.get("file", ""))).resolve() == Path(cal_path).resolve():
            self.drifted = tuple(str(d) for d in last.result.get("drifted", ()))
            drift_text = (f" <b style='color:#C62828'>Drifted since the previous calibration: "
                          f"{html.escape(', '.join(self.drifted))}</b> — check mounting, cable and certificate."
                          if self.drifted else _no_drift_text(last.result.get("compared_with")))
        self.caption.setText(f"{html.escape(str(cal_path))}: {html.escape(cal.method)} against "
                             f"{html.escape(cal.reference)}, {html.escape(cal.created)}, {f.size} frequencies "
                             f"{f[0]:g}-{f[-1]:g} Hz (bars: 95 % intervals).{drift_text}{note}")


def _no_drift_text(compared_with: object) -> str:
    """What the caption says when no sensor drifted: since which calibration, or that there was none."""
    if compared_with is None:              # a record written before the date was kept
        return " No sensor drifted since the previous calibration."
    if not compared_with:
        return " The first calibration in the commissioning record: no earlier one to compare with."
    return f" No sensor drifted since the calibration of {html.escape(str(compared_with))}."
