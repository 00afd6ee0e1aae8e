"""The pre-scan's transfer: drive-to-velocity gain per volt against frequency, on a log axis,
with each line's ±1 standard uncertainty, and a caption with its duration, level and lines
(or why there was no pre-scan).

Built once; ``show_transfer`` (GUI thread: the window's bridge delivers the engine's
``TransferMeasured``) redraws it. Lines lost in the noise (NaN) are left out and counted.

Imports: PySide6, pyqtgraph, numpy, ``app.engine.events`` (the event type) and ``.style`` only.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QLabel, QWidget

from app.engine.events import TransferMeasured

from .style import captioned_plots, new_plot, pen


class PrescanView(QWidget):
    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.caption, self.layout_widget = captioned_plots(self, "Pre-scan: none yet")
        self.plot = new_plot(self.layout_widget, "Drive-to-velocity transfer (pre-scan)", "|u'|/ū per V peak",
                             "frequency (Hz)", row=0, col=0)
        self.plot.setLogMode(y=True)
        self.curve = self.plot.plot(pen=pen("#0072B2"), symbol="o", symbolSize=6, symbolBrush="#0072B2",
                                    symbolPen=None)
        self.bars = pg.ErrorBarItem(x=np.zeros(0), y=np.zeros(0), top=np.zeros(0), bottom=np.zeros(0),
                                    pen=pen("#0072B2"), beam=0.0)
        self.plot.addItem(self.bars)

    def show_transfer(self, ev: TransferMeasured) -> None:
        if ev.skipped:
            self.caption.setText(f"Pre-scan skipped: {ev.skipped}")
            self.curve.setData([], [])
            self.bars.setData(x=np.zeros(0), y=np.zeros(0), top=np.zeros(0), bottom=np.zeros(0))
            return
        f = np.asarray(ev.freqs_hz, dtype=float)
        g = np.asarray(ev.ratio_per_volt, dtype=float)
        r = np.asarray(ev.rel_sigma, dtype=float)
        ok = np.isfinite(g) & (g > 0)
        lost = int(np.count_nonzero(~ok))
        self.curve.setData(f[ok], g[ok])
        # a log axis: the bars live in log10 coordinates
        rel = np.clip(np.where(np.isfinite(r[ok]), r[ok], 0.0), 0.0, 0.9)
        y = np.log10(g[ok])
        self.bars.setData(x=f[ok], y=y, top=np.log10(1.0 + rel), bottom=-np.log10(1.0 - rel))
        median = float(np.median(r[ok])) if ok.any() else math.nan
        self.caption.setText(
            f"Pre-scan: {len(f)} lines {f.min():g}-{f.max():g} Hz, {ev.levels} level(s), {ev.duration_s:.1f} s, "
            f"peak drive {ev.peak_drive_v:.3g} V, sum of the lines |u'|/ū {ev.total_ratio:.3g}; median "
            f"uncertainty {median * 100:.1f} %" + (f"; {lost} line(s) lost in the noise" if lost else ""))


def show_engine_news(ev: object, view: PrescanView, notice: QLabel, plan: object = None) -> None:
    """The pre-scan's transfer into ``view`` (shown only for a pre-scan made) and the engine's
    notices into ``notice``; a pre-scan the plan asked for but the sweep skipped says why there."""
    import html

    if isinstance(ev, TransferMeasured):
        view.show_transfer(ev)
        view.setVisible(not ev.skipped)
        asked = bool(getattr(getattr(plan, "prescan", None), "enabled", False))
        if not (ev.skipped and asked):
            return
        text = f"<b>pre-scan skipped</b>: {html.escape(ev.skipped)}"
    else:
        text = f"<b>{html.escape(getattr(ev, 'name', ''))}</b>: {html.escape(getattr(ev, 'message', ''))}"
    notice.setText(text)
    notice.show()
