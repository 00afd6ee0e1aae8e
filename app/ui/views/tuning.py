"""Tuning of the current point: measured amplitude per step against the target band, and
the drive voltage per step against the ceiling, on a logarithmic axis (a soft start opens
at millivolts under a ceiling of volts: on a linear axis those steps look like zero).

Items are created once; ``refresh`` redraws from the Qt-free ``TuningHistory``.

Imports: PySide6, pyqtgraph, numpy, ``app.ui.models`` and ``.style`` only.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QWidget

from ..models import TuningHistory, format_volts
from .style import Coalesced, captioned_plots, new_plot, pen


class TuningView(QWidget):
    def __init__(self, model: TuningHistory, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.model = model
        self.caption, self.layout_widget = captioned_plots(self, "Tuning: waiting for the first point")
        self.amp_plot = new_plot(self.layout_widget, "Amplitude reached", "|u'|/ū", "tuning step", row=0, col=0)
        self.drive_plot = new_plot(self.layout_widget, "Drive voltage (log)", "V peak", "tuning step", row=0, col=1)
        self.drive_plot.setLogMode(y=True)
        for plot in (self.amp_plot, self.drive_plot):
            plot.getAxis("bottom").setTickSpacing(1, 1)      # tuning steps are whole numbers
        self.band = pg.LinearRegionItem(orientation="horizontal", movable=False,
                                        brush=pg.mkBrush(0, 158, 115, 50), pen=pen("#009E73"))
        self.amp_plot.addItem(self.band)
        self.target_line = pg.InfiniteLine(angle=0, pen=pen("#009E73", Qt.PenStyle.DashLine))
        self.amp_plot.addItem(self.target_line)
        self.amp_curve = self.amp_plot.plot(pen=pen("#0072B2"), symbol="o", symbolSize=7,
                                            symbolBrush="#0072B2", symbolPen=None)
        self.ceiling_line = pg.InfiniteLine(angle=0, pen=pen("#C62828", Qt.PenStyle.DashLine),
                                            label="ceiling", labelOpts={"position": 0.15, "color": "#C62828"})
        self.drive_plot.addItem(self.ceiling_line)
        self.drive_curve = self.drive_plot.plot(pen=pen("#D55E00"), symbol="s", symbolSize=7,
                                                symbolBrush="#D55E00", symbolPen=None)
        self._drawn = -1
        model.subscribe(Coalesced(self.refresh, parent=self))

    def set_ceiling(self, ceiling_v: float) -> None:
        self.model.ceiling_v = ceiling_v
        self.ceiling_line.setValue(math.log10(ceiling_v))     # a log axis: view coordinates are log10
        self._drive_range(np.zeros(0))

    def _drive_range(self, drive_v: np.ndarray) -> None:
        """From a decade below the smallest step (at least 1/1000 of the ceiling) to above the ceiling."""
        ceiling = self.model.ceiling_v if math.isfinite(self.model.ceiling_v) else 1.0
        positive = drive_v[drive_v > 0] if drive_v.size else drive_v
        low = min(float(positive.min()) / 3.0 if positive.size else ceiling * 1e-2, ceiling * 1e-2)
        low = max(low, ceiling * 1e-4)
        self.drive_plot.setYRange(math.log10(low), math.log10(1.3 * ceiling), padding=0)

    def refresh(self) -> None:
        m = self.model
        if m.version == self._drawn:
            return
        self._drawn = m.version
        steps, drive_v, ratio = m.arrays()
        self.amp_curve.setData(steps, ratio)
        shown = drive_v > 0                  # a log axis cannot show a zero drive
        self.drive_curve.setData(steps[shown], drive_v[shown])
        self._drive_range(drive_v)
        if math.isfinite(m.target_ratio):
            lo, hi = m.target_ratio * (1 - m.tolerance), m.target_ratio * (1 + m.tolerance)
            self.band.setRegion((lo, hi))
            self.target_line.setValue(m.target_ratio)
            top = max(hi, float(np.max(ratio)) if ratio.size else hi)
            self.amp_plot.setYRange(0.0, 1.15 * top)
        n = max(3.0, float(steps.max()) + 0.5 if steps.size else 3.0)
        for p in (self.amp_plot, self.drive_plot):
            p.setXRange(0.5, n)
        label = f"Tuning point {m.point_index + 1}" if m.point_index is not None else "Tuning"
        if m.steps:
            step, d, r, ok = m.steps[-1]
            verdict = "within the band" if ok else "outside the band"
            of = f" of {m.max_steps}" if m.max_steps else ""
            self.caption.setText(f"{label}: step {step}{of}, {format_volts(d)} gives |u'|/ū = {r:.4f} (target "
                                 f"{m.target_ratio:.4f} ± {m.tolerance:.0%}, {verdict})")
        elif m.point_index is not None:
            self.caption.setText(f"{label}: first tuning window under way (target |u'|/ū = {m.target_ratio:.4f})")
        else:
            self.caption.setText("Tuning: waiting for the first point")
