"""Tuning of the current point: measured amplitude per step against the target band, and
the drive voltage per step against the ceiling.

Items are created once; ``refresh`` redraws from the Qt-free ``TuningHistory``.

Imports: PySide6, pyqtgraph, numpy, ``app.ui.models`` and ``.style`` only.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel, QVBoxLayout, QWidget

from ..models import TuningHistory
from .style import Coalesced, new_plot, pen


class TuningView(QWidget):
    def __init__(self, model: TuningHistory, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.model = model
        self.caption = QLabel("Tuning: waiting for the first point")
        self.caption.setWordWrap(True)
        self.layout_widget = pg.GraphicsLayoutWidget()
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.caption)
        lay.addWidget(self.layout_widget)
        self.amp_plot = new_plot(self.layout_widget, "Amplitude reached", "|u'|/ū", "tuning step", row=0, col=0)
        self.drive_plot = new_plot(self.layout_widget, "Drive voltage", "V peak", "tuning step", row=0, col=1)
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
        self.ceiling_line.setValue(ceiling_v)
        self.drive_plot.setYRange(0.0, 1.1 * ceiling_v)

    def refresh(self) -> None:
        m = self.model
        if m.version == self._drawn:
            return
        self._drawn = m.version
        steps, drive_v, ratio = m.arrays()
        self.amp_curve.setData(steps, ratio)
        self.drive_curve.setData(steps, drive_v)
        if math.isfinite(m.target_ratio):
            lo, hi = m.target_ratio * (1 - m.tolerance), m.target_ratio * (1 + m.tolerance)
            self.band.setRegion((lo, hi))
            self.target_line.setValue(m.target_ratio)
            top = max(hi, float(np.max(ratio)) if ratio.size else hi)
            self.amp_plot.setYRange(0.0, 1.15 * top)
        n = max(3.0, float(steps.max()) + 0.5 if steps.size else 3.0)
        for p in (self.amp_plot, self.drive_plot):
            p.setXRange(0.5, n)
        if m.steps:
            step, d, r, ok = m.steps[-1]
            verdict = "within the band" if ok else "outside the band"
            self.caption.setText(f"Tuning point {m.point_index + 1 if m.point_index is not None else '–'}: "
                                 f"step {step}, {d:.3f} V gives |u'|/ū = {r:.4f} (target {m.target_ratio:.4f} "
                                 f"± {m.tolerance:.0%}, {verdict})")
