"""The response curve growing point by point: gain and phase against frequency with 95 %
bars, one curve per forcing amplitude (FDF), and the simulator's true answer as an
optional dashed overlay in rehearsal. Flagged points are drawn as open markers, good ones
filled. The frequency axis is fixed to the plan's range from the first point on. Clicking a
point selects it; the selected point's values and 95 % intervals are read out above.

Phase is shown in degrees, unwrapped along frequency, with the e^{+iωt} convention of
the core. Items are created once per amplitude and updated with ``setData``.

Imports: PySide6, pyqtgraph, numpy, ``app.ui.models`` and ``.style`` only.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QCheckBox, QHBoxLayout, QLabel, QVBoxLayout, QWidget

from ..models import PointTable
from .style import CHANNEL_COLOURS, Coalesced, new_plot, pen

TruthFn = Callable[[np.ndarray, float], np.ndarray]   # (freq_hz, amplitude_ratio) -> complex FTF


class ResponseView(QWidget):
    point_clicked = Signal(int)

    def __init__(self, model: PointTable, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.model = model
        self.layout_widget = pg.GraphicsLayoutWidget()
        self.gain_plot = new_plot(self.layout_widget, "Gain", "|F|", row=0, col=0)
        self.phase_plot = new_plot(self.layout_widget, "Phase (unwrapped; e^(+iωt))", "deg", "frequency (Hz)", row=1,
                                   col=0)
        self.phase_plot.setXLink(self.gain_plot)
        self.legend = self.gain_plot.addLegend(offset=(-5, 5), labelTextSize="8pt")
        self.truth_box = QCheckBox("Show the simulator's true answer")
        self.truth_box.setToolTip("Rehearsal only: the dashed line is the simulated flame's true response")
        self.truth_box.toggled.connect(self._truth_toggled)
        self.truth_box.setEnabled(False)
        self.caption = QLabel("No points yet")
        self.readout = QLabel("")
        self.readout.setWordWrap(True)
        top = QHBoxLayout()
        top.addWidget(self.caption, 1)
        top.addWidget(self.truth_box)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addLayout(top)
        lay.addWidget(self.readout)
        lay.addWidget(self.layout_widget)
        self._items: dict[float, tuple[pg.PlotDataItem, pg.ErrorBarItem, pg.PlotDataItem, pg.ErrorBarItem]] = {}
        self._truth_items: dict[float, tuple[pg.PlotDataItem, pg.PlotDataItem]] = {}
        self._truth: TruthFn | None = None
        self._truth_phase: dict[float, np.ndarray] = {}
        self._freq_range = (0.0, 0.0)
        self._selected = pg.ScatterPlotItem(size=14, pen=pen("#000000"), brush=None, symbol="o")
        self._selected_phase = pg.ScatterPlotItem(size=14, pen=pen("#000000"), brush=None, symbol="o")
        self.gain_plot.addItem(self._selected)
        self.phase_plot.addItem(self._selected_phase)
        self._drawn = -1
        model.subscribe(Coalesced(self.refresh, parent=self))

    def set_truth(self, truth: TruthFn | None, freq_range_hz: tuple[float, float]) -> None:
        """Enable the overlay (rehearsal) or disable it (real hardware, stored run without scenario)."""
        self._truth, self._freq_range = truth, freq_range_hz
        self.set_frequency_range(freq_range_hz)
        self.truth_box.setEnabled(truth is not None)
        if truth is None:
            self.truth_box.setChecked(False)
        self._clear_truth()
        self._truth_toggled(self.truth_box.isChecked())

    def set_frequency_range(self, freq_range_hz: tuple[float, float]) -> None:
        """Fix the frequency axis to the plan's range (the curve grows into it instead of rescaling)."""
        lo, hi = freq_range_hz
        if hi > lo > 0:
            self.gain_plot.setXRange(lo, hi, padding=0.02)
            self.gain_plot.enableAutoRange(x=False)

    def reset(self) -> None:
        for g, ge, p, pe in self._items.values():
            self.gain_plot.removeItem(g)
            self.gain_plot.removeItem(ge)
            self.phase_plot.removeItem(p)
            self.phase_plot.removeItem(pe)
        self._items.clear()
        self.legend.clear()
        self._selected.setData([], [])
        self._selected_phase.setData([], [])
        self.readout.setText("")
        self._drawn = -1
        self.refresh()

    def _item_for(self, amp: float, colour: str) -> tuple[pg.PlotDataItem, pg.ErrorBarItem, pg.PlotDataItem,
                                                           pg.ErrorBarItem]:
        if amp not in self._items:
            kw = dict(pen=pen(colour), symbol="o", symbolSize=7, symbolBrush=colour, symbolPen=None)
            g = self.gain_plot.plot(name=f"|u'|/ū = {amp:g}", **kw)
            ge = pg.ErrorBarItem(pen=pen(colour), beam=0.0)
            self.gain_plot.addItem(ge)
            p = self.phase_plot.plot(**kw)
            pe = pg.ErrorBarItem(pen=pen(colour), beam=0.0)
            self.phase_plot.addItem(pe)
            for item in (g, p):
                item.sigPointsClicked.connect(self._clicked)
            self._items[amp] = (g, ge, p, pe)
        return self._items[amp]

    def refresh(self) -> None:
        if self.model.version == self._drawn:
            return
        self._drawn = self.model.version
        curves = self.model.curves()
        colour_of = {amp: CHANNEL_COLOURS[k % len(CHANNEL_COLOURS)] for k, amp in enumerate(curves)}
        for amp, c in curves.items():
            g, ge, p, pe = self._item_for(amp, colour_of[amp])
            f, phase_deg = c["freq_hz"], np.degrees(c["phase_rad"])
            fill = [pg.mkBrush("#FFFFFF") if flagged else pg.mkBrush(colour_of[amp]) for flagged in c["flagged"]]
            g.setData(f, c["gain"], data=c["index"], symbolBrush=fill, symbolPen=pen(colour_of[amp]))
            ge.setData(x=f, y=c["gain"], height=2 * c["gain_ci95"])
            p.setData(f, phase_deg, data=c["index"], symbolBrush=fill, symbolPen=pen(colour_of[amp]))
            pe.setData(x=f, y=phase_deg, height=2 * np.degrees(c["phase_ci95_rad"]))
        n = sum(len(c["freq_hz"]) for c in curves.values())
        kind = "FDF, one curve per amplitude" if len(curves) > 1 else "FTF"
        n_flagged = sum(int(c["flagged"].sum()) for c in curves.values())
        note = f" ({n_flagged} flagged: open markers)" if n_flagged else ""
        self.caption.setText(f"{kind}: {n} of {len(self.model.rows)} points{note}")
        if self.truth_box.isChecked():
            self._draw_truth()

    def select(self, indices: list[int]) -> None:
        """Ring the selected points."""
        gx, gy, py = [], [], []
        for c in self.model.curves().values():
            mask = np.isin(c["index"], indices)
            gx += list(c["freq_hz"][mask])
            gy += list(c["gain"][mask])
            py += list(np.degrees(c["phase_rad"][mask]))
        self._selected.setData(gx, gy)
        self._selected_phase.setData(gx, py)
        self.readout.setText(self._readout(indices))

    def _readout(self, indices: list[int]) -> str:
        """The selected points' values with their 95 % intervals, phase as on the curve (unwrapped)."""
        lines = []
        for c in self.model.curves().values():
            for k in np.flatnonzero(np.isin(c["index"], indices)):
                flag = ", flagged" if c["flagged"][k] else ""
                lines.append(f"point {int(c['index'][k]) + 1}: {c['freq_hz'][k]:g} Hz, gain {c['gain'][k]:.3f} ± "
                             f"{c['gain_ci95'][k]:.3f}, phase {np.degrees(c['phase_rad'][k]):.1f}° ± "
                             f"{np.degrees(c['phase_ci95_rad'][k]):.1f}° (95 %){flag}")
        return "\n".join(lines[:3]) + (f"\n… and {len(lines) - 3} more" if len(lines) > 3 else "")

    def _clicked(self, _item: object, points: object, *_args: object) -> None:
        pts = list(points) if points is not None else []
        if pts:
            self.point_clicked.emit(int(pts[0].data()))

    # -------------------------------------------------------------- truth overlay
    def _truth_toggled(self, on: bool) -> None:
        if on and self._truth is not None:
            self._draw_truth()
        for g, p in self._truth_items.values():
            g.setVisible(on)
            p.setVisible(on)

    def _clear_truth(self) -> None:
        for g, p in self._truth_items.values():
            self.gain_plot.removeItem(g)
            self.phase_plot.removeItem(p)
        self._truth_items.clear()
        self._truth_phase.clear()

    def _draw_truth(self) -> None:
        if self._truth is None:
            return
        lo, hi = self._freq_range
        f = np.linspace(lo, hi, 300)
        curves = self.model.curves()
        amps = sorted({round(r.target_ratio, 9) for r in self.model.rows})
        for k, amp in enumerate(amps):
            if amp not in self._truth_items:
                colour = CHANNEL_COLOURS[k % len(CHANNEL_COLOURS)]
                ftf = np.asarray(self._truth(f, amp))
                g = self.gain_plot.plot(f, np.abs(ftf), pen=pen(colour, Qt.PenStyle.DashLine))
                p = self.phase_plot.plot(pen=pen(colour, Qt.PenStyle.DashLine))
                self._truth_items[amp] = (g, p)
                self._truth_phase[amp] = np.unwrap(np.angle(ftf))
            phase = _on_branch(f, self._truth_phase[amp], curves.get(amp))
            self._truth_items[amp][1].setData(f, np.degrees(phase))


def _on_branch(f: np.ndarray, phase: np.ndarray, measured: dict[str, np.ndarray] | None) -> np.ndarray:
    """True phase shifted by whole turns onto the measured curve's branch (at its first point)."""
    if measured is None or not len(measured["freq_hz"]):
        return phase
    at = float(np.interp(measured["freq_hz"][0], f, phase))
    return phase + 2 * np.pi * np.round((measured["phase_rad"][0] - at) / (2 * np.pi))
