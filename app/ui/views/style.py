"""Colours, pens and pyqtgraph settings shared by the plots (our own palette).

Plots follow the project's rules for live drawing: pen width 1, no antialiasing, no
OpenGL, curves created once and updated with copies from a timer.

Imports: pyqtgraph and PySide6 only.
"""

from __future__ import annotations

import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QFrame, QGraphicsItem, QScrollArea, QWidget

# colour-blind-safe hues (Okabe & Ito, "Color Universal Design", 2008), dark enough on white
CHANNEL_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#56B4E9", "#E69F00", "#555555", "#000000")
STATUS_COLOURS = {"planned": "#FFFFFF", "measuring": "#DCEBFA", "kept": "#E3F4E1", "flagged": "#FFF1C9",
                  "not kept": "#EFE3F6", "fault": "#F9D6D2", "rejected": "#E4E4E4", "record damaged": "#F9D6D2"}
HALT_STYLE = ("QToolButton { background: #C62828; color: white; font-weight: bold; font-size: 15px; "
              "padding: 8px 18px; border: 2px solid #7F0000; border-radius: 6px; } "
              "QToolButton:pressed { background: #8E0000; }")
SIM_STYLE = "QLabel { background: #FFE08A; color: #3A2A00; padding: 4px 10px; font-weight: bold; border-radius: 4px; }"
HALT_BANNER_STYLE = ("QFrame#haltBanner { background: #C62828; border: 2px solid #7F0000; border-radius: 6px; } "
                     "QFrame#haltBanner QLabel { color: white; } "
                     "QLabel#haltTitle { font-weight: bold; font-size: 16px; }")
STOPPED_PEN = "#9E9E9E"           # live traces after the sweep ended: grey, no longer live
STOPPED_STYLE = ("QLabel { background: rgba(255, 255, 255, 225); color: #424242; border: 1px solid #9E9E9E; "
                 "border-radius: 4px; padding: 4px 12px; font-weight: bold; font-size: 14px; }")
CAUTION_STYLE = "QLabel { color: #7A4A00; padding: 0px 6px; }"
FAULT_FATAL_STYLE = "QFrame#faultBanner { background: #FBE3E0; border: 2px solid #C62828; border-radius: 6px; }"
FAULT_FLAG_STYLE = "QFrame#faultBanner { background: #FFF4D6; border: 2px solid #B7791F; border-radius: 6px; }"


def configure_pyqtgraph() -> None:
    pg.setConfigOptions(antialias=False, useOpenGL=False, background="w", foreground="#202020")


def pen(colour: str, style: object = None) -> object:
    from PySide6.QtCore import Qt

    return pg.mkPen(colour, width=1, style=style or Qt.PenStyle.SolidLine)


def new_plot(layout: pg.GraphicsLayoutWidget, title: str, y_label: str, x_label: str = "",
             row: int | None = None, col: int | None = None, live: bool = False) -> pg.PlotItem:
    """A plot with our labels and grid; ``live`` plots (long traces) get peak downsampling and
    clipping to the view (pyqtgraph's own advice for fast updates). Point plots do not: their
    per-point data (clicked point's index) must stay aligned with the points."""
    p = layout.addPlot(row=row, col=col, title=title)
    p.setLabel("left", y_label)
    if x_label:
        p.setLabel("bottom", x_label)
    p.showGrid(x=True, y=True, alpha=0.25)
    for side in ("left", "bottom"):
        p.getAxis(side).enableAutoSIPrefix(False)   # the unit in the label stays true
    for side in ("left", "bottom", "right", "top"):
        # an axis (with its grid lines across the plot) is repainted with every curve update
        # it overlaps; a cached pixmap, redrawn only when its ticks change, costs a blit
        # (a response plot's paint drops from ~18 ms to ~1.5 ms, offscreen)
        p.getAxis(side).setCacheMode(QGraphicsItem.CacheMode.DeviceCoordinateCache)
        # grid lines at the major and minor ticks only: the third level doubles the cost of
        # every axis redraw (a new range) and is too fine to read anyway
        p.getAxis(side).setStyle(maxTickLevel=1)
    if live:
        p.setDownsampling(auto=True, mode="peak")
        p.setClipToView(True)
    hold_minimum_width(layout)
    return p


def hold_minimum_width(layout: pg.GraphicsLayoutWidget) -> None:
    """Give the widget its plots' minimum width (axes, labels): pyqtgraph does not pass it on,
    so a splitter or a narrow window would squeeze the widget and clip the plots."""
    from PySide6.QtCore import Qt

    need = int(layout.ci.effectiveSizeHint(Qt.SizeHint.MinimumSize).width()) + 2
    if need > layout.minimumWidth():
        layout.setMinimumWidth(need)


class Coalesced:
    """Calls ``fn`` once, ``interval_ms`` after the first of any number of requests (GUI thread).

    Views subscribe this to their model: a burst of model changes (a fast sweep) costs one
    redraw per frame, not one per change.
    """

    def __init__(self, fn: object, interval_ms: int = 33, parent: object = None) -> None:
        from PySide6.QtCore import QTimer

        self.timer = QTimer(parent)
        self.timer.setSingleShot(True)
        self.timer.setInterval(interval_ms)
        self.timer.timeout.connect(fn)

    def __call__(self) -> None:
        if not self.timer.isActive():
            self.timer.start()


def captioned_plots(widget: object, caption: str) -> tuple[object, object]:
    """A word-wrapped caption above a plot layout, filling ``widget``: (QLabel, GraphicsLayoutWidget)."""
    from PySide6.QtWidgets import QLabel, QVBoxLayout

    label = QLabel(caption)
    label.setWordWrap(True)
    plots = pg.GraphicsLayoutWidget()
    lay = QVBoxLayout(widget)
    lay.setContentsMargins(0, 0, 0, 0)
    lay.addWidget(label)
    lay.addWidget(plots)
    return label, plots


def scroll_column(widget: QWidget) -> QScrollArea:
    """``widget`` in a frameless scroll area that scrolls up and down only and is never narrower
    than the widget's controls (a short window scrolls instead of squeezing or clipping them)."""
    scroll = QScrollArea()
    scroll.setWidget(widget)
    scroll.setWidgetResizable(True)
    scroll.setFrameShape(QFrame.Shape.NoFrame)
    scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
    scroll.setMinimumWidth(widget.minimumSizeHint().width() + 16)
    return scroll
