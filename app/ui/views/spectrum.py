"""The amplitude spectrum of one channel of a stored record (review), with the forcing frequency
and its 2nd and 3rd harmonics marked (up to six times the forcing): where the energy is,
beside the time traces.

The spectrum is ``app.ui.models.amplitude_spectrum`` (Qt-free): a Hann-windowed FFT scaled so
that a sine reads its peak amplitude, in the channel's display unit (Pa for pressures when
the record gives their sensitivities, else V).

Imports: PySide6, pyqtgraph, numpy, ``app.ui.models`` and ``.style`` only.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QLabel, QVBoxLayout, QWidget

from ..models import amplitude_spectrum
from .style import new_plot, pen


class SpectrumView(QWidget):
    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.channel = QComboBox()
        self.channel.currentIndexChanged.connect(lambda _i: self._draw())
        top = QHBoxLayout()
        top.addWidget(QLabel("Spectrum of"))
        top.addWidget(self.channel, 1)
        self.layout_widget = pg.GraphicsLayoutWidget()
        self.plot = new_plot(self.layout_widget, "Amplitude spectrum", "peak amplitude", "frequency (Hz)", row=0, col=0)
        self.plot.setLogMode(y=True)
        self.curve = self.plot.plot(pen=pen("#0072B2"))
        self.marks: list[pg.InfiniteLine] = []
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addLayout(top)
        lay.addWidget(self.layout_widget)
        self._data: np.ndarray | None = None
        self._fs = 0.0
        self._freq = 0.0
        self._units: list[str] = []

    def show_record(self, data: np.ndarray, channels: tuple[str, ...], sample_rate_hz: float, freq_hz: float,
                    units: dict[str, str] | None = None) -> None:
        """``data`` already in display units per channel (``units`` names them; V by default)."""
        self._data, self._fs, self._freq = np.asarray(data, dtype=float), float(sample_rate_hz), float(freq_hz)
        self._units = [(units or {}).get(c, "V") for c in channels]
        keep = self.channel.currentText()
        blocked = self.channel.blockSignals(True)
        self.channel.clear()
        self.channel.addItems(list(channels))
        if keep in channels:
            self.channel.setCurrentIndex(list(channels).index(keep))
        self.channel.blockSignals(blocked)
        self._draw()

    def _draw(self) -> None:
        for m in self.marks:
            self.plot.removeItem(m)
        self.marks = []
        i = self.channel.currentIndex()
        if self._data is None or i < 0 or i >= self._data.shape[0]:
            self.curve.setData([], [])
            return
        f, amp = amplitude_spectrum(self._data[i], self._fs)
        keep = (f > 0) & (amp > 0)
        self.curve.setData(f[keep], amp[keep])
        self.plot.setLabel("left", f"peak amplitude ({self._units[i]})")
        top = min(self._fs / 2, max(6.0 * self._freq, 100.0)) if self._freq > 0 else self._fs / 2
        self.plot.setXRange(0.0, top, padding=0.02)     # the forcing and its harmonics, not the empty top
        for k in (1, 2, 3):
            if self._freq > 0 and k * self._freq < self._fs / 2:
                line = pg.InfiniteLine(pos=k * self._freq, angle=90,
                                       pen=pen("#C62828" if k == 1 else "#999999", Qt.PenStyle.DashLine),
                                       label="forcing" if k == 1 else None, labelOpts={"position": 0.9})
                self.plot.addItem(line)
                self.marks.append(line)
