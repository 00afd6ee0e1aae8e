"""The Commissioning tab: run the rig's commissioning checks from the window and see the record.

Dark offset (optionally written into the rig file), a light step at a typed thermal power, the
linearity fit, a lamp position with a typed label, the uniformity summary, King's law from a
CSV table, and the record's status (what was checked when, what is missing or old). Every check
is the function ``flamebode commission`` calls (``app.services.commissioning``), handed to the
window's worker thread through ``submit``; the drive is never asked for anything but zero. Its
result is shown as numbers with units (read from the entry the record now holds) with the
service's own words, the linearity and uniformity beside it as plots, and the status refreshes.
A mistake (an empty power, a bad unit, an unreadable table, a corrupt record) is said in the
panel's message line; nothing is stored then.

Imports: PySide6, pyqtgraph, numpy, ``app.services.commissioning``, the bridge's task result and
``.style``. Never storage or commands.
"""

from __future__ import annotations

import datetime as _dt
import html
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QAbstractItemView, QCheckBox, QFileDialog, QFormLayout, QFrame, QGroupBox,
                               QHBoxLayout, QHeaderView, QLabel, QLineEdit, QPushButton, QScrollArea, QSplitter,
                               QTabWidget, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget)

from app.errors import FlamebodeError
from app.services import commissioning as svc

from ..bridge import TaskResult
from .style import CAUTION_STYLE, CHANNEL_COLOURS, new_plot, pen, scroll_column

CAUTIONS_TEXT = (
    "<b>Cautions.</b> Your laboratory's own rules come first. <b>Dark offset</b>: flame off, the "
    "photomultiplier's high voltage set as for a run. <b>Photomultiplier</b>: never expose it to room light "
    "with the high voltage on; only trained people open its housing, with the high voltage off. "
    "<b>Light steps</b>: a lit flame, within the rig's operating envelope. <b>Lamp</b>: in the flame region "
    "only with the burner cold and the fuel shut; surfaces stay hot after the flame is out. "
    "The drive stays at zero in every check.")
KIND_WORDS = {"dark-offset": "dark offset", "light-step": "light step", "light-linearity": "light-chain linearity",
              "light-uniformity": "spatial uniformity", "hot-wire": "hot-wire King's law",
              "pressure-calibration": "pressure-sensor calibration"}
PANEL_HINTS = {"linearity": "with 'Record light step'", "uniformity": "with 'Record lamp position'"}


# ----------------------------------------------------------------------------- Qt-free helpers
@dataclass(frozen=True)
class PanelContext:
    """What the window says when a check is asked for: the saved rig file, whether its editor has
    unsaved changes, the back-end and the simulator's options."""

    rig_path: Path | None
    rig_unsaved: bool
    backend: str
    scenario: Path | None
    fast: bool


@dataclass(frozen=True)
class PanelState:
    """What the status view draws, read on the worker: the status, the newest linearity fit's
    deviations and the lamp positions since the newest dark offset (dark-corrected)."""

    status: svc.Status
    linearity_kw: tuple[float, ...] = ()
    linearity_dev_pct: tuple[float, ...] = ()
    lamp_labels: tuple[str, ...] = ()
    lamp_dev_pct: tuple[float, ...] = ()


def read_state(rig_path: Path, max_age_days: float = 30.0) -> PanelState:
    target = svc.open_target(rig_path)
    record = target.record
    lin = record.latest("light-linearity")
    kw: tuple[float, ...] = ()
    dev: tuple[float, ...] = ()
    if lin is not None and isinstance(lin.result.get("power_w"), list):
        kw = tuple(float(p) / 1e3 for p in lin.result["power_w"])
        dev = tuple(100.0 * float(d) for d in lin.result.get("deviation_rel", []))[: len(kw)]
        kw = kw[: len(dev)]
    lamps = svc.lamp_positions(record, target.rig)
    labels, lamp_dev = (), ()
    if len(lamps) >= 1:
        dark = svc.dark_in_force(record, target.rig)[0]
        r = np.array([float(c.result["mean_v"]) for c in lamps]) - dark
        if r.mean() > 0:
            labels = tuple(str(c.result.get("position", "")) for c in lamps)
            lamp_dev = tuple(float(x) for x in 100.0 * (r / r.mean() - 1.0))
    return PanelState(svc.status(target, max_age_days), kw, dev, labels, lamp_dev)


def _mv(v: Any, fmt: str) -> str:
    return f"{float(v) * 1e3:{fmt}} mV"


def result_rows(kind: str, result: dict[str, Any]) -> list[tuple[str, str]]:
    """A stored check's numbers as (quantity, value with unit), as the panel shows them."""
    r = result
    if kind == "dark-offset":
        return [("dark offset", _mv(r["mean_v"], ".6g")), ("its standard uncertainty", _mv(r["u_mean_v"], ".3g")),
                ("noise (rms)", _mv(r.get("noise_rms_v", float("nan")), ".3g")),
                ("samples", str(r.get("n_samples", "")))]
    if kind == "light-step":
        return [("thermal power", f"{float(r['power_w']) / 1e3:.4g} kW"), ("mean light", _mv(r["mean_v"], ".5g")),
                ("its standard uncertainty", _mv(r["u_mean_v"], ".2g"))]
    if kind == "light-uniformity" and r.get("stage") == "position":
        return [("lamp position", str(r.get("position", ""))), ("mean light", _mv(r["mean_v"], ".5g")),
                ("its standard uncertainty", _mv(r["u_mean_v"], ".2g"))]
    if kind == "light-uniformity":
        return [("spread (std / mean)", f"{float(r['spread_rel']) * 100:.2f} %"),
                ("furthest from the mean", f"{r.get('worst_position', '')} ({float(r['max_deviation_rel']) * 100:+.2f} %)"),
                ("positions", str(r.get("n_positions", "")))]
    if kind == "light-linearity":
        return [("slope", f"{float(r['slope_v_per_w']) * 1e6:.4g} mV/kW"),
                ("its standard uncertainty", f"{float(r['u_slope_v_per_w']) * 1e6:.2g} mV/kW"),
                ("largest deviation", f"{float(r['max_deviation_rel']) * 100:.2f} %"),
                ("p (χ² of the line)", f"{float(r['p_value']):.2g}"), ("steps", str(r.get("n_steps", "")))]
    if kind == "hot-wire":
        return [("A", f"{float(r['a_v2']):.5g} V²"), ("B", f"{float(r['b']):.5g} V² (m/s)^-n"),
                ("n", f"{float(r['n']):.4g}"), ("velocity residual (rms)", f"{float(r['residual_rms_m_s']):.3g} m/s"),
                ("table points", str(r.get("n_points", ""))), ("table", str(r.get("table", "")))]
    return [(str(k), str(v)) for k, v in r.items()]


def age_words(date: str | None, now: _dt.datetime | None = None) -> str:
    if date is None:
        return "never"
    try:
        when = _dt.datetime.strptime(date, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=_dt.timezone.utc)
    except ValueError:
        return "?"
    days = ((now or _dt.datetime.now(_dt.timezone.utc)) - when).total_seconds() / 86400.0
    return f"{days:.0f} days" if days >= 2 else f"{max(days, 0.0) * 24:.1f} hours"


def problem_text(exc: BaseException) -> str:
    """A refusal or failure in words, never a traceback."""
    if isinstance(exc, (FlamebodeError, OSError)):
        return str(exc)
    return f"internal error ({type(exc).__name__}: {exc}); nothing was stored by this check"


# ----------------------------------------------------------------------------- the panel
class CommissioningPanel(QWidget):
    """``submit(name, fn, on_done)`` runs ``fn`` on the window's worker; ``context()`` says which
    rig and back-end. Signals: ``busy_changed`` (a check started or ended), ``rig_written`` (the
    dark offset went into the rig file: reload its editor), ``recorded`` (a check was stored)."""

    busy_changed = Signal(bool)
    rig_written = Signal(str)
    recorded = Signal()

    def __init__(self, submit: Callable[..., Any], context: Callable[[], PanelContext],
                 parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.submit, self.context = submit, context
        self.seed: int | None = None          # simulator only: a fixed seed (rehearsals, tests)
        self.busy = False
        self.sweep_running = False
        self.blocked = ""                     # another activity drives the rig (a pressure calibration)
        self.last_outcome: svc.Outcome | None = None
        self.state: PanelState | None = None
        self._stop: svc.StopRequest | None = None
        self._build()

    # -------------------------------------------------------------- building
    def _build(self) -> None:
        self.caution = QLabel(CAUTIONS_TEXT)
        self.caution.setWordWrap(True)
        self.caution.setStyleSheet(CAUTION_STYLE)
        self.duration = QLineEdit("5 s")
        self.update_rig = QCheckBox("Write it into the rig file ([light] dark_offset)")
        self.dark_button = QPushButton("Record dark offset")
        self.power = QLineEdit()
        self.power.setPlaceholderText("e.g. 4 kW")
        self.step_button = QPushButton("Record light step")
        self.linearity_button = QPushButton("Fit linearity")
        self.position = QLineEdit()
        self.position.setPlaceholderText("e.g. r=10 mm z=20 mm")
        self.lamp_button = QPushButton("Record lamp position")
        self.uniformity_button = QPushButton("Summarise uniformity")
        self.table = QLineEdit()
        self.table.setPlaceholderText("CSV: voltage_v, velocity_m_s")
        self.choose_table = QPushButton("Choose…")
        self.hot_wire_button = QPushButton("Fit King's law")
        self.stop_button = QPushButton("Stop recording")
        self.refresh_button = QPushButton("Read the record again")

        form = QFormLayout()
        form.addRow("Recording length:", self.duration)
        rec = QGroupBox("Recording (drive at zero)")
        rec.setLayout(form)
        dark = self._group("Dark offset — flame off", [self.update_rig, self.dark_button])
        step_form = QFormLayout()
        step_form.addRow("Thermal power now burning:", self.power)
        light = self._group("Linearity — flame lit, one equivalence ratio",
                            [step_form, self._row(self.step_button, self.linearity_button)])
        lamp_form = QFormLayout()
        lamp_form.addRow("Lamp position:", self.position)
        lamp = self._group("Spatial uniformity — lamp, burner cold, fuel shut",
                           [lamp_form, self._row(self.lamp_button, self.uniformity_button)])
        wire = self._group("Hot-wire King's law (calibration table)",
                           [self._row(self.table, self.choose_table), self.hot_wire_button])
        left = QWidget()
        left_lay = QVBoxLayout(left)
        left_lay.setContentsMargins(0, 0, 4, 0)
        for w in (self.caution, rec, dark, light, lamp, wire):
            left_lay.addWidget(w)
        left_lay.addWidget(self._row(self.stop_button, self.refresh_button))
        left_lay.addStretch(1)
        scroll = scroll_column(left)                                   # the controls whole, never clipped

        self.message = QLabel("Choose a check on the left.")
        self.message.setWordWrap(True)
        self.message.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.results = self._table(("quantity", "value"))
        self.status_caption = QLabel()
        self.status_caption.setWordWrap(True)
        self.status_table = self._table(("check", "newest (UTC)", "age"))
        self.status_table.setMinimumHeight(self._rows_height(self.status_table, len(svc.STATUS_KINDS)))  # all, whole
        self.results.setMinimumHeight(self._rows_height(self.results, 4))
        self.to_do = QLabel()
        self.to_do.setWordWrap(True)
        # one plot at a time in a narrow window: side by side they would set its minimum width
        self.plot_tabs = QTabWidget()
        self.linearity_widget, self.uniformity_widget = pg.GraphicsLayoutWidget(), pg.GraphicsLayoutWidget()
        self.linearity_plot = new_plot(self.linearity_widget, "Newest linearity fit: deviation from proportionality",
                                       "deviation (%)", "thermal power (kW)")
        self.uniformity_plot = new_plot(self.uniformity_widget, "Lamp positions since the newest dark offset",
                                        "response − mean (%)", "position")
        self.plot_tabs.addTab(self.linearity_widget, "Linearity")
        self.plot_tabs.addTab(self.uniformity_widget, "Uniformity")
        self.plot_tabs.setMinimumHeight(150)
        result_box = self._box([self.message, self.results], stretch_last=True)
        status_box = self._box([self.status_caption, self.to_do, self.status_table], stretch_last=True)
        right = QSplitter(Qt.Orientation.Vertical)
        right.setObjectName("commissioning-right")
        for w in (result_box, status_box, self.plot_tabs):
            right.addWidget(w)
        right.setStretchFactor(0, 3)
        right.setStretchFactor(1, 3)
        right.setStretchFactor(2, 2)
        right.setChildrenCollapsible(False)
        # the results scroll in a window smaller than they need, so the window keeps its own minimum size
        right_scroll = QScrollArea()
        right_scroll.setWidget(right)
        right_scroll.setWidgetResizable(True)
        right_scroll.setFrameShape(QFrame.Shape.NoFrame)
        right_scroll.setMinimumWidth(200)
        split = QSplitter()
        split.setObjectName("commissioning-split")
        split.addWidget(scroll)
        split.addWidget(right_scroll)
        split.setStretchFactor(0, 2)
        split.setStretchFactor(1, 3)
        split.setChildrenCollapsible(False)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.addWidget(split)

        self.dark_button.clicked.connect(self.record_dark)
        self.step_button.clicked.connect(self.record_light_step)
        self.linearity_button.clicked.connect(self.fit_linearity)
        self.lamp_button.clicked.connect(self.record_lamp)
        self.uniformity_button.clicked.connect(self.summarise_uniformity)
        self.hot_wire_button.clicked.connect(self.fit_hot_wire)
        self.choose_table.clicked.connect(self._choose_table)
        self.stop_button.clicked.connect(lambda: self.stop_recording("stopped in the window"))
        self.refresh_button.clicked.connect(self.refresh)
        self.buttons = (self.dark_button, self.step_button, self.linearity_button, self.lamp_button,
                        self.uniformity_button, self.hot_wire_button, self.refresh_button)
        self._update_buttons()

    @staticmethod
    def _group(title: str, parts: list[Any]) -> QGroupBox:
        box = QGroupBox(title)
        lay = QVBoxLayout(box)
        for p in parts:
            if isinstance(p, QWidget):
                lay.addWidget(p)
            else:
                lay.addLayout(p)
        return box

    @staticmethod
    def _box(widgets: list[QWidget], stretch_last: bool = False, stretch_at: int = -1) -> QWidget:
        box = QWidget()
        lay = QVBoxLayout(box)
        lay.setContentsMargins(4, 0, 0, 0)
        for i, w in enumerate(widgets):
            lay.addWidget(w, 1 if (stretch_last and i == len(widgets) - 1) or i == stretch_at else 0)
        return box

    @staticmethod
    def _row(*widgets: QWidget) -> QWidget:
        w = QWidget()
        lay = QHBoxLayout(w)
        lay.setContentsMargins(0, 0, 0, 0)
        for x in widgets:
            lay.addWidget(x, 1 if isinstance(x, QLineEdit) else 0)
        return w

    @staticmethod
    def _rows_height(table: QTableWidget, rows: int) -> int:
        return table.horizontalHeader().sizeHint().height() + rows * table.verticalHeader().defaultSectionSize() + 10

    @staticmethod
    def _table(headers: tuple[str, ...]) -> QTableWidget:
        t = QTableWidget(0, len(headers))
        t.setHorizontalHeaderLabels(list(headers))
        t.verticalHeader().hide()
        t.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        t.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        t.horizontalHeader().setStretchLastSection(True)
        t.verticalHeader().setDefaultSectionSize(22)
        t.setMinimumHeight(80)
        return t

    @classmethod
    def as_tab(cls, tabs: Any, submit: Callable[..., Any], context: Callable[[], PanelContext],
               title: str = "Commissioning") -> "CommissioningPanel":
        """A panel added to ``tabs`` whose status is read again each time it is shown."""
        panel = cls(submit, context)
        tabs.addTab(panel, title)
        tabs.currentChanged.connect(lambda _i: panel.refresh() if tabs.currentWidget() is panel else None)
        return panel

    # -------------------------------------------------------------- state of the buttons
    def set_sweep_running(self, running: bool) -> None:
        self.sweep_running = bool(running)
        self._update_buttons()

    def set_blocked(self, why: str) -> None:
        """Another activity drives the rig (``why``), or nothing ("")."""
        self.blocked = why
        self._update_buttons()

    def _set_busy(self, busy: bool) -> None:
        self.busy = busy
        self._update_buttons()
        self.busy_changed.emit(busy)

    def _update_buttons(self) -> None:
        free = not self.busy and not self.sweep_running and not self.blocked
        for b in self.buttons:
            b.setEnabled(free)
        self.choose_table.setEnabled(free)
        self.stop_button.setEnabled(self.busy and self._stop is not None)
        waiting = "A sweep is running: the commissioning checks wait until it has ended."
        if self.sweep_running and not self.busy:
            self.message.setText(waiting)
        elif "A sweep is running" in self.message.text():
            self.message.setText("The sweep has ended: the checks can run again.")

    def stop_recording(self, why: str) -> None:
        """End a recording at its next block (nothing is stored); any thread may have asked."""
        if self._stop is not None:
            self._stop.set(why)

    # -------------------------------------------------------------- checks
    def record_dark(self) -> None:
        update = self.update_rig.isChecked()
        self._run("dark offset", lambda t, src, stop: svc.measure_dark(t, src, update_rig=update, stop=stop),
                  recording="dark", writes_rig=update)

    def record_light_step(self) -> None:
        try:
            power = svc.parse_power(self.power.text(), "Thermal power")
        except FlamebodeError as exc:
            self._problem(str(exc))
            return
        self._run("light step", lambda t, src, stop: svc.measure_light_step(t, src, power, stop=stop),
                  recording="light-step")

    def record_lamp(self) -> None:
        try:
            position = svc.parse_position(self.position.text(), "Lamp position")
        except FlamebodeError as exc:
            self._problem(str(exc))
            return
        self._run("lamp position", lambda t, src, stop: svc.measure_lamp(t, src, position, stop=stop),
                  recording="lamp")

    def fit_linearity(self) -> None:
        self._run("linearity", lambda t, src, _s: svc.fit_linearity(t, src.backend, PANEL_HINTS["linearity"]))

    def summarise_uniformity(self) -> None:
        self._run("uniformity", lambda t, src, _s: svc.summarise_uniformity(t, src.backend, PANEL_HINTS["uniformity"]))

    def fit_hot_wire(self) -> None:
        table = self.table.text()
        self._run("hot-wire", lambda t, src, _s: svc.fit_hot_wire(t, table, src.backend, "Calibration table"))

    def _choose_table(self) -> None:
        name, _f = QFileDialog.getOpenFileName(self, "Hot-wire calibration table", self.table.text() or ".",
                                               "CSV tables (*.csv);;All files (*)")
        if name:
            self.table.setText(name)

    def _refusal(self, ctx: PanelContext) -> str:
        if self.sweep_running:
            return "A sweep is running: the commissioning checks wait until it has ended."
        if self.blocked:
            return self.blocked
        if self.busy:
            return "A check is running: wait for it to end (or stop the recording)."
        if ctx.rig_path is None:
            return "No rig file is loaded (Set-up tab)."
        if ctx.rig_unsaved:
            return "Save the rig file first (Set-up tab): the checks read the saved file."
        return ""

    def _run(self, name: str, work: Callable[[svc.Target, svc.Source, svc.StopRequest | None], svc.Outcome],
             recording: str | None = None, writes_rig: bool = False) -> None:
        ctx = self.context()
        refusal = self._refusal(ctx)
        if refusal:
            self._problem(refusal)
            return
        try:
            duration = svc.parse_duration(self.duration.text(), "Recording length") if recording else 5.0
        except FlamebodeError as exc:
            self._problem(str(exc))
            return
        sim = ctx.backend == "simulated"
        source = svc.Source(backend=ctx.backend, scenario=ctx.scenario if sim else None, fast=ctx.fast and sim,
                            seed=self.seed if sim else None, duration_s=duration)
        stop = svc.StopRequest() if recording else None
        self._stop = stop
        rig_path = Path(ctx.rig_path)

        def job() -> svc.Outcome:
            return work(svc.open_target(rig_path), source, stop)

        words = f"{name}: recording {duration:g} s on {ctx.backend}… " + svc.CAUTIONS[recording] if recording \
            else f"{name}: fitting…"
        self.message.setText(html.escape(words))
        self._set_busy(True)
        self.submit(f"commission {name}", job, lambda result: self._done(name, result, writes_rig))

    def _done(self, name: str, result: TaskResult, writes_rig: bool) -> None:
        self._stop = None
        self._set_busy(False)
        if result.error is not None:
            self._problem(f"{name} not stored: {problem_text(result.error)}")
        else:
            self.show_outcome(result.value)
            if result.value.rig_written is not None:
                self.rig_written.emit(str(result.value.rig_written))
            self.recorded.emit()
        self.refresh(keep_message=True)

    # -------------------------------------------------------------- showing
    def _problem(self, text: str) -> None:
        self.results.setRowCount(0)         # never a previous check's numbers beside a refusal
        self.message.setText(f"<b style='color:#C62828'>{html.escape(text)}</b>")

    def show_outcome(self, outcome: svc.Outcome) -> None:
        self.last_outcome = outcome
        c = outcome.check
        head = f"<b>{html.escape(KIND_WORDS.get(c.kind, c.kind))} stored</b> ({html.escape(c.date)})"
        body = "<br>".join(html.escape(line).replace("  ", "&nbsp;&nbsp;") for line in outcome.lines)
        notes = "".join(f"<br><b style='color:#7A4A00'>{html.escape(n)}</b>" for n in outcome.notes)
        self.message.setText(f"{head}<br>{body}{notes}")
        rows = result_rows(c.kind, c.result)
        self.results.setRowCount(len(rows))
        for i, (what, value) in enumerate(rows):
            self.results.setItem(i, 0, QTableWidgetItem(what))
            self.results.setItem(i, 1, QTableWidgetItem(value))

    def shown_results(self) -> dict[str, str]:
        """The results table as {quantity: value} (what the operator reads)."""
        return {self.results.item(i, 0).text(): self.results.item(i, 1).text() for i in range(self.results.rowCount())}

    def refresh(self, keep_message: bool = False) -> None:
        """Read the record again (on the worker) and redraw the status and the plots."""
        ctx = self.context()
        if ctx.rig_path is None:
            self.status_caption.setText("No rig file is loaded.")
            return
        rig_path = Path(ctx.rig_path)

        def done(result: TaskResult) -> None:
            if result.error is not None:
                self.state = None
                self.status_caption.setText(f"<b style='color:#C62828'>The commissioning record cannot be read: "
                                            f"{html.escape(problem_text(result.error))}</b>")
                self.status_table.setRowCount(0)
                self.to_do.setText("Nothing is recorded until the record is repaired or moved aside; nothing in it "
                                   "was changed.")
                if not keep_message:
                    self._problem(problem_text(result.error))
                return
            self.show_state(result.value)

        self.submit("commission status", lambda: read_state(rig_path), done)

    def show_state(self, state: PanelState) -> None:
        self.state = state
        st = state.status
        where = html.escape(str(st.record_path)) + ("" if st.exists else " (none yet)")
        cal = f"; the rig names the calibration file {html.escape(st.calibration_file)}" if st.calibration_file else ""
        self.status_caption.setText(f"<b>Commissioning record</b> of {html.escape(st.rig_name)}: {where}{cal}")
        self.status_table.setRowCount(len(st.rows))
        for i, row in enumerate(st.rows):
            for j, text in enumerate((KIND_WORDS.get(row.kind, row.kind), row.date or "never", age_words(row.date))):
                self.status_table.setItem(i, j, QTableWidgetItem(text))
        self.to_do.setText("<b>To do:</b> " + html.escape("; ".join(st.to_do)) if st.to_do
                           else "Nothing missing or older than 30 days.")
        self._draw(state)

    def _draw(self, state: PanelState) -> None:
        self.linearity_plot.clear()
        self.uniformity_plot.clear()
        if state.linearity_kw:
            colour = CHANNEL_COLOURS[0]
            self.linearity_plot.addLine(y=0.0, pen=pen("#9E9E9E"))
            self.linearity_plot.plot(list(state.linearity_kw), list(state.linearity_dev_pct), pen=pen(colour),
                                     symbol="o", symbolSize=6, symbolBrush=colour)
        if state.lamp_labels:
            x = np.arange(len(state.lamp_labels), dtype=float)
            self.uniformity_plot.addItem(pg.BarGraphItem(x=x, height=list(state.lamp_dev_pct), width=0.6,
                                                         brush=CHANNEL_COLOURS[2], pen=pen(CHANNEL_COLOURS[2])))
            self.uniformity_plot.getAxis("bottom").setTicks([list(zip(x.tolist(), state.lamp_labels))])
        self.plot_tabs.setTabText(0, "Linearity" if state.linearity_kw else "Linearity (none yet)")
        self.plot_tabs.setTabText(1, "Uniformity" if state.lamp_labels else "Uniformity (no lamp positions)")
        self.plot_tabs.setVisible(bool(state.linearity_kw) or bool(state.lamp_labels))
        kind = self.last_outcome.check.kind if self.last_outcome is not None else ""
        if kind in ("light-linearity", "light-step"):
            self.plot_tabs.setCurrentWidget(self.linearity_widget)
        elif kind == "light-uniformity":
            self.plot_tabs.setCurrentWidget(self.uniformity_widget)
