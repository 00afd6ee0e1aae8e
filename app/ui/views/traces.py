"""Live traces of every channel, grouped by role (pressures, light, drive reference).

Curves are created once per channel set; ``refresh`` (called by the window's ~30 Hz
timer) hands them copies of the ring buffer, never the buffer itself. ``show_record``
draws a stored record in review.

Imports: PySide6, pyqtgraph, numpy, ``app.ui.models`` and ``.style`` only.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QVBoxLayout, QWidget

from ..models import TraceBuffer
from .style import CHANNEL_COLOURS, new_plot, pen

ROLE_TITLES = {"pressure": ("Pressures", "V at the ADC"), "light": ("Heat-release light", "V"),
               "drive": ("Drive reference", "V"), "other": ("Other channels", "V")}


class TracesView(QWidget):
    def __init__(self, title: str = "Live signals", parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.layout_widget = pg.GraphicsLayoutWidget()
        self.layout_widget.ci.setContentsMargins(2, 2, 2, 2)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.layout_widget)
        self.title = title
        self.curves: dict[str, pg.PlotDataItem] = {}
        self.plots: dict[str, pg.PlotItem] = {}
        self._channels: tuple[str, ...] = ()
        self._drawn_version: object = None
        self.frames = 0                  # redraws done (for the benchmark)

    def configure(self, channels: tuple[str, ...], roles: dict[str, str], x_label: str = "time (s)",
                  window_s: float = 0.2) -> None:
        """Create the plots and one curve per channel (only when the channel set changes)."""
        if tuple(channels) == self._channels:
            return
        self.layout_widget.clear()
        self.curves, self.plots, self._channels = {}, {}, tuple(channels)
        self.window_s = window_s
        order = [r for r in ("pressure", "light", "drive", "other") if any(roles.get(c, "other") == r
                                                                           for c in channels)]
        first = None
        for row, role in enumerate(order):
            title, unit = ROLE_TITLES[role]
            p = new_plot(self.layout_widget, title, unit, x_label if row == len(order) - 1 else "", row=row, col=0,
                         live=True)
            p.showGrid(x=False, y=False)   # blended grid lines cost more to paint than the curves
            p.enableAutoRange(x=False)          # the time axis is fixed: no range search per frame
            p.setXRange(-self.window_s, 0.0, padding=0.0)
            if len([c for c in channels if roles.get(c, "other") == role]) > 1:
                p.addLegend(offset=(-5, 2), labelTextSize="8pt", colCount=8, brush=pg.mkBrush(255, 255, 255, 215),
                            pen=pg.mkPen("#B0B0B0"))
            if first is None:
                first = p
            else:
                p.setXLink(first)
            self.plots[role] = p
        for i, ch in enumerate(channels):
            p = self.plots[roles.get(ch, "other")]
            curve = p.plot(pen=pen(CHANNEL_COLOURS[i % len(CHANNEL_COLOURS)]), name=ch, skipFiniteCheck=True)
            curve.setDownsampling(auto=True, method="peak")
            curve.setClipToView(True)
            self.curves[ch] = curve
        self._drawn_version = None

    def refresh(self, buffer: TraceBuffer | None) -> bool:
        """Redraw from ``buffer`` when there is something new to show; True when drawn."""
        if buffer is None or not self.curves:
            return False
        state = (buffer.version, buffer.held_back())
        if state == self._drawn_version:
            return False
        t, data = buffer.snapshot()
        for ch, row in zip(buffer.channels, data):
            curve = self.curves.get(ch)
            if curve is not None:
                curve.setData(t, row, skipFiniteCheck=True)
        self._drawn_version = state
        self.frames += 1
        return True

    def show_record(self, data: np.ndarray, channels: tuple[str, ...], sample_rate_hz: float,
                    roles: dict[str, str]) -> None:
        """A stored record (review): the whole record against time from its start."""
        self.configure(channels, roles)
        t = np.arange(data.shape[1]) / sample_rate_hz
        for ch, row in zip(channels, data):
            self.curves[ch].setData(t, np.array(row, copy=True), skipFiniteCheck=True)
        for p in self.plots.values():
            p.setXRange(0.0, data.shape[1] / sample_rate_hz, padding=0.0)
            p.enableAutoRange(y=True)


def channel_roles(rig: object) -> dict[str, str]:
    """channel -> 'pressure' | 'light' | 'drive' from a rig description."""
    roles: dict[str, str] = {}
    for s in getattr(rig, "pressure_sensors", ()):
        roles[s.channel] = "pressure"
    light = getattr(rig, "light", None)
    if light is not None:
        roles[light.channel] = "light"
    drive = getattr(rig, "drive", None)
    if drive is not None and getattr(drive, "reference_channel", None):
        roles[drive.reference_channel] = "drive"
    return roles
