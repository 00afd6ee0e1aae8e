"""Live traces of every channel, grouped by role (pressures, light, drive reference).

Pressures are drawn in pascals when the sensors' sensitivities are known (``set_scales``),
otherwise in volts at the ADC. Channel names sit in each plot's title in their curves'
colours (a legend box would cover the data). The light's title shows its mean level, and
its value at the start of the sweep, so a flame-out is seen at a glance.

While the drive runs at a known frequency, the live window shows a few forcing periods
(``PERIODS_SHOWN``, at least 10 ms, at most the buffer's 0.2 s) and is triggered on the drive
reference: the newest rising zero crossing sits at t = 0, so a steady sine stands still and a
1 kHz trace is readable (``trigger``).

Curves are created once per channel set; ``show_frame`` (called by the window's ~30 Hz
timer) hands them a ``TraceFrame``: copies of the ring buffer's visible window, never the
buffer itself. ``show_record`` draws a stored record in review. ``mark_stopped`` greys the
curves and lays a label over them once no new signal arrives (the sweep ended, was halted
or paused), so the last frame cannot be taken for a live one; ``mark_live`` undoes it.

Imports: PySide6, pyqtgraph, numpy, ``app.ui.models`` and ``.style`` only.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtGui import QResizeEvent
from PySide6.QtWidgets import QLabel, QVBoxLayout, QWidget

from ..models import TraceFrame
from .style import CHANNEL_COLOURS, STOPPED_PEN, STOPPED_STYLE, new_plot, pen

ROLE_TITLES = {"pressure": ("Pressures", "V at the ADC"), "light": ("Heat-release light", "V"),
               "drive": ("Drive reference", "V"), "other": ("Other channels", "V")}
PASCAL_UNIT = "Pa"
PERIODS_SHOWN = 6
MIN_WINDOW_S = 0.01


def trigger(time_s: np.ndarray, data: np.ndarray, drive_row: int | None, freq_hz: float,
            full_window_s: float) -> tuple[np.ndarray, float]:
    """(time axis, window) for a frame: shifted so the drive reference's newest rising zero
    crossing with a whole window before it is at t = 0, and a window of PERIODS_SHOWN periods.
    Without a drive row or frequency: the frame's own time axis and the full window."""
    if drive_row is None or not (freq_hz > 0) or time_s.size < 4:
        return time_s, full_window_s
    window = float(min(full_window_s, max(MIN_WINDOW_S, PERIODS_SHOWN / freq_hz)))
    ref = data[drive_row] - float(np.mean(data[drive_row]))
    rising = np.flatnonzero((ref[:-1] < 0.0) & (ref[1:] >= 0.0))
    usable = rising[time_s[rising] - time_s[0] >= window]
    if usable.size == 0:
        return time_s, window
    k = int(usable[-1])
    frac = -ref[k] / (ref[k + 1] - ref[k]) if ref[k + 1] != ref[k] else 0.0     # linear between the samples
    t0 = time_s[k] + frac * (time_s[k + 1] - time_s[k])
    return time_s - t0, window


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
        self._roles: dict[str, str] = {}
        self._rows_of: dict[str, list[int]] = {}             # role -> rows of the frame it draws
        self._y_range: dict[str, tuple[float, float]] = {}
        self._scale: dict[str, float] = {}     # channel -> display units per volt (pressures: Pa/V)
        self._scale_rows: np.ndarray | None = None
        self.light_start_v: float | None = None   # the light's mean at the start, for its title
        self.light_mean_v: float | None = None    # the light's mean over the frame drawn last
        self._light_title = ""
        self.window_s = 0.2
        self._shown_window_s = 0.2
        self.drawn_state: object = None    # state of the last frame drawn
        self.frames = 0                  # redraws done (for the benchmark)
        self.stopped_text = ""            # non-empty while the traces are marked as not live
        self.overlay = QLabel(self)
        self.overlay.setStyleSheet(STOPPED_STYLE)
        self.overlay.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.overlay.setAttribute(Qt.WidgetAttribute.WA_TransparentForMouseEvents)
        self.overlay.hide()

    # -------------------------------------------------------------- live or not
    def mark_stopped(self, text: str) -> None:
        """Grey every curve and show ``text`` over the plots (no new signal is coming)."""
        self.stopped_text = text
        for curve in self.curves.values():
            curve.setPen(pen(STOPPED_PEN))
        self.overlay.setText(text)
        self.overlay.adjustSize()
        self._place_overlay()
        self.overlay.show()
        self.overlay.raise_()

    def mark_live(self) -> None:
        self.stopped_text = ""
        for i, ch in enumerate(self._channels):
            if ch in self.curves:
                self.curves[ch].setPen(pen(CHANNEL_COLOURS[i % len(CHANNEL_COLOURS)]))
        self.overlay.hide()

    def _place_overlay(self) -> None:
        w, h = self.overlay.width(), self.overlay.height()
        self.overlay.move(max(0, (self.width() - w) // 2), max(0, (self.height() - h) // 2))

    def resizeEvent(self, event: QResizeEvent) -> None:
        super().resizeEvent(event)
        self._place_overlay()

    def set_scales(self, pascal_per_volt: dict[str, float]) -> None:
        """Pressure channels drawn in pascals: ``pascal_per_volt`` = 1 / sensitivity (V/Pa) per channel."""
        scale = {c: float(v) for c, v in pascal_per_volt.items() if np.isfinite(v) and v > 0}
        if scale != self._scale:
            self._scale = scale
            self._channels = ()             # rebuild the plots with the new unit on the next configure

    def configure(self, channels: tuple[str, ...], roles: dict[str, str], x_label: str = "time (s)",
                  window_s: float = 0.2) -> None:
        """Create the plots and one curve per channel (only when the channels or their roles change:
        the first blocks may be drawn before the sweep's rig, and so the roles, are known)."""
        roles = {c: roles.get(c, "other") for c in channels}
        if tuple(channels) == self._channels and roles == self._roles:
            return
        self.layout_widget.clear()
        self.curves, self.plots, self._channels, self._roles = {}, {}, tuple(channels), roles
        self._rows_of, self._y_range = {}, {}
        self.window_s = self._shown_window_s = window_s
        order = [r for r in ("pressure", "light", "drive", "other") if any(roles.get(c, "other") == r
                                                                           for c in channels)]
        first = None
        pressures = [c for c in channels if roles.get(c) == "pressure"]
        in_pascal = bool(pressures) and all(c in self._scale for c in pressures)
        self._scale_rows = (np.array([self._scale.get(c, 1.0) if in_pascal else 1.0 for c in channels])[:, None]
                            if in_pascal else None)
        colour_of = {c: CHANNEL_COLOURS[i % len(CHANNEL_COLOURS)] for i, c in enumerate(channels)}
        for row, role in enumerate(order):
            title, unit = ROLE_TITLES[role]
            if role == "pressure" and in_pascal:
                unit = PASCAL_UNIT
            mine = [c for c in channels if roles.get(c, "other") == role]
            p = new_plot(self.layout_widget, title, unit, x_label if row == len(order) - 1 else "", row=row, col=0,
                         live=True)
            if len(mine) > 1:             # names in the title, in their colours: nothing covers the data
                p.setTitle(f"{title}: " + "  ".join(f'<span style="color:{colour_of[c]}">{c}</span>' for c in mine))
            p.showGrid(x=False, y=False)   # blended grid lines cost more to paint than the curves
            p.enableAutoRange(x=False, y=False)  # ranges set from each frame (below): no search per paint
            p.setXRange(-self.window_s, 0.0, padding=0.0)
            if first is None:
                first = p
            else:
                p.setXLink(first)
            self.plots[role] = p
            self._rows_of[role] = [i for i, c in enumerate(channels) if roles.get(c, "other") == role]
        for i, ch in enumerate(channels):
            p = self.plots[roles.get(ch, "other")]
            # peak downsampling to one bin (a min and a max) per pixel column: pyqtgraph's default
            # of five samples per pixel draws ~5x more line segments for the same picture
            curve = p.plot(pen=pen(CHANNEL_COLOURS[i % len(CHANNEL_COLOURS)]), name=ch, skipFiniteCheck=True,
                           autoDownsampleFactor=1.0)
            curve.setDownsampling(auto=True, method="peak")
            curve.setClipToView(True)
            self.curves[ch] = curve
        self.drawn_state = None
        if self.stopped_text:                  # curves made after the mark are not live either
            self.mark_stopped(self.stopped_text)

    def _scaled(self, channels: tuple[str, ...], data: np.ndarray) -> np.ndarray:
        if self._scale_rows is None or tuple(channels) != self._channels:
            return data
        return data * self._scale_rows

    def show_frame(self, frame: TraceFrame, freq_hz: float = 0.0) -> None:
        """Draw a live frame (copies, owned by the curves from now on); ``freq_hz`` > 0 (the
        drive's frequency) shows a few periods triggered on the drive reference."""
        data = self._scaled(frame.channels, frame.data)
        drive = self._rows_of.get("drive")
        t, window = trigger(frame.time_s, frame.data, drive[0] if drive else None, freq_hz, self.window_s)
        if window != self._shown_window_s and self.plots:
            self._shown_window_s = window
            first = next(iter(self.plots.values()))
            first.setXRange(-window, 0.0, padding=0.0)     # the others are linked to it
        for ch, row in zip(frame.channels, data):
            curve = self.curves.get(ch)
            if curve is not None:
                curve.setData(t, row, skipFiniteCheck=True)
        if frame.channels == self._channels and data.shape[1]:
            self._follow_y(data)
            self._light_level(data)
        self.drawn_state = frame.state
        self.frames += 1

    def _light_level(self, data: np.ndarray) -> None:
        rows = self._rows_of.get("light")
        if not rows or "light" not in self.plots:
            return
        mean_v = self.light_mean_v = float(data[rows[0]].mean())
        start = f" (start {self.light_start_v:.3g} V)" if self.light_start_v is not None else ""
        text = f"{ROLE_TITLES['light'][0]}: mean {mean_v:.3g} V{start}"
        if text != self._light_title:      # the title is redrawn only when its text changes
            self._light_title = text
            self.plots["light"].setTitle(text)

    def _follow_y(self, data: np.ndarray) -> None:
        """Each plot's y range follows its curves with hysteresis: it changes (and the axis is
        redrawn) only when a curve leaves the range or fills less than a third of it."""
        for role, rows in self._rows_of.items():
            lo, hi = float(data[rows].min()), float(data[rows].max())
            new = stable_range(self._y_range.get(role), lo, hi)
            if new != self._y_range.get(role):
                self._y_range[role] = new
                self.plots[role].setYRange(*new, padding=0.0)

    def show_record(self, data: np.ndarray, channels: tuple[str, ...], sample_rate_hz: float,
                    roles: dict[str, str]) -> None:
        """A stored record (review): the whole record against time from its start."""
        self.configure(channels, roles)
        t = np.arange(data.shape[1]) / sample_rate_hz
        data = self._scaled(tuple(channels), np.asarray(data, dtype=float))
        for ch, row in zip(channels, data):
            self.curves[ch].setData(t, np.array(row, copy=True), skipFiniteCheck=True)
        for p in self.plots.values():
            p.setXRange(0.0, data.shape[1] / sample_rate_hz, padding=0.0)
            p.enableAutoRange(y=True)


def stable_range(current: tuple[float, float] | None, lo: float, hi: float,
                 margin: float = 0.15) -> tuple[float, float]:
    """A display range holding [lo, hi]: ``current`` when it still fits well, else a new one
    with ``margin`` of the span on each side (never empty)."""
    span = max(hi - lo, 1e-6 * max(abs(lo), abs(hi)), 1e-9)
    if current is not None:
        c_lo, c_hi = current
        if c_lo <= lo and hi <= c_hi and (hi - lo) >= (c_hi - c_lo) / 3.0:
            return current
    return (lo - margin * span, hi + margin * span)


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
