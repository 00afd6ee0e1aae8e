"""Running the pressure sensors' relative calibration from the window (the Sensors tab's left side).

Common plane (every sensor in the calibration holder) or sensor swap (in the duct): the same
run as ``flamebode calibrate`` (``app.services.pressure_calibration.run_calibration``), on a
thread of its own so that the window and its worker stay free during the minutes it drives.
What the run says streams into the panel's log; on real hardware each swap waits for the
operator's "Swap made" button with the drive at zero; "Stop" (and the window's emergency halt,
its stop signals and its closing) halts the pass at once through the holder's latched halt,
and nothing is written. A finished run's file is shown beside the panel (``shown`` signal),
with the line that makes the rig use it.

A mistake in an entry (a band without a dash, a pressure without its unit, an unknown sensor)
is said in the panel's message line, naming the field; nothing is driven then.

Imports: PySide6, ``app.services.pressure_calibration``, ``app.errors``, ``.style``. Never
storage, commands or a back-end.
"""

from __future__ import annotations

import datetime as _dt
import html
import threading
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QFontDatabase
from PySide6.QtWidgets import (QComboBox, QFileDialog, QFormLayout, QGroupBox, QHBoxLayout, QLabel, QLineEdit,
                               QPlainTextEdit, QPushButton, QVBoxLayout, QWidget)

from app.errors import FlamebodeError
from app.services import pressure_calibration as svc

from .style import CAUTION_STYLE

CAUTION_TEXT = ("<b>Caution.</b> The speaker is driven loud (hearing protection for everyone near the rig), "
                "never above the rig's drive ceiling. Common plane: every sensor mounted in the calibration "
                "holder. Sensor swap: the flame off; each swap is made with the drive at zero. Your "
                "laboratory's own rules come first.")
METHOD_CHOICES = (("common plane", "common-plane", "every sensor in the calibration holder, at one plane"),
                  ("sensor swap", "sensor-swap", "in the duct: each sensor exchanged with the reference in turn"))
FIELD_NAMES = {"method": "Method", "band": "Band (Hz)", "step_hz": "Step", "reference": "Reference sensor",
               "check_reference": "Check against", "pressure": "Pressure at reference",
               "record": "Record per frequency", "segments": "Segments", "out": "Calibration file"}
HALT_WHY_STOP = "stopped in the window"


@dataclass(frozen=True)
class RunContext:
    """What the window says when a calibration is asked for (as for the commissioning checks)."""

    rig_path: Path | None
    rig_unsaved: bool
    backend: str
    scenario: Path | None
    fast: bool
    other_activity: str = ""          # why nothing else may drive now (a sweep, a commissioning check)


def default_output(rig_path: Path, now: _dt.datetime | None = None) -> Path:
    """A new calibration file's name beside the rig file, dated (never an older file's name)."""
    when = (now or _dt.datetime.now(_dt.timezone.utc)).strftime("%Y%m%d-%H%M%S")
    return rig_path.with_name(f"{rig_path.stem}.pressure-calibration-{when}.toml")


class ThreadedOperator:
    """The service's Operator for a run on its own thread: lines and the swap request are handed
    to ``tell(kind, text)`` (a queued Qt signal), the swap waits on an event, and :meth:`halt`
    (any thread) halts the pass in progress at once and ends a wait. Qt-free."""

    def __init__(self, tell: Callable[[str, str], None]) -> None:
        self._tell = tell
        self._go = threading.Event()
        self._holder: Any = None
        self._out: Path | None = None
        self.why: str | None = None
        self.waiting = False

    def say(self, line: str) -> None:
        self._tell("line", line)

    def warn(self, line: str) -> None:
        self._tell("warning", line)

    def wait_for_swap(self, instruction: str) -> None:
        self._go.clear()
        self.waiting = True
        self._tell("swap", instruction)
        try:
            while not self._go.wait(0.1):
                pass
        finally:
            self.waiting = False
        if self.why is not None:
            raise svc.CalibrationStopped(self.why, self._out or Path("the calibration file"))

    def go_on(self) -> None:
        self._go.set()

    def halt(self, why: str) -> None:
        """Output to zero at once (the holder's latched halt; lock-free) and stop; any thread."""
        if self.why is None:
            self.why = why
        holder = self._holder
        if holder is not None:
            holder.halt(why)
        self._go.set()

    def stop_scope(self, holder: Any, out: Path) -> "_Scope":
        return _Scope(self, holder, out)


class _Scope:
    def __init__(self, op: ThreadedOperator, holder: Any, out: Path) -> None:
        self.op, self.holder, self.out = op, holder, out

    def __enter__(self) -> "_Scope":
        self.op._out = self.out
        self.op._holder = self.holder
        if self.op.why is not None:           # stopped between passes: this one never drives
            self.holder.halt(self.op.why)
        return self

    def __exit__(self, *exc: Any) -> None:
        self.op._holder = None
        if self.op.why is not None:
            raise svc.CalibrationStopped(self.op.why, self.out)


class CalibrationRunPanel(QWidget):
    """``context()`` says which rig and back-end. Signals: ``busy_changed`` (a run started or
    ended), ``written`` (path of the calibration file written)."""

    busy_changed = Signal(bool)
    written = Signal(str)
    _told = Signal(str, str)
    _finished = Signal(object, object)

    def __init__(self, context: Callable[[], RunContext], parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.context = context
        self.seed: int | None = None          # simulator only: a fixed seed (rehearsals, tests)
        self.busy = False
        self.blocked = ""                     # a sweep or a check is running: nothing starts here
        self.operator: ThreadedOperator | None = None
        self.warnings: list[str] = []
        self.thread: threading.Thread | None = None
        self.outcome: svc.Outcome | None = None
        self._build()
        queued = Qt.ConnectionType.QueuedConnection        # emitted on the run's thread, shown on the GUI's
        self._told.connect(self._on_told, queued)
        self._finished.connect(self._on_finished, queued)

    # -------------------------------------------------------------- building
    def _build(self) -> None:
        self.caution = QLabel(CAUTION_TEXT)
        self.caution.setWordWrap(True)
        self.caution.setStyleSheet(CAUTION_STYLE)
        self.method = QComboBox()
        for i, (words, key, tip) in enumerate(METHOD_CHOICES):
            self.method.addItem(words, key)
            self.method.setItemData(i, tip, Qt.ItemDataRole.ToolTipRole)
        self.band = QLineEdit("100-2000")
        self.step = QLineEdit("50 Hz")
        self.pressure = QLineEdit("20 Pa")
        self.record = QLineEdit("1 s")
        self.reference = QLineEdit()
        self.reference.setPlaceholderText("the rig's first pressure sensor")
        self.check_reference = QLineEdit()
        self.check_reference.setPlaceholderText("optional: a second reference")
        self.out = QLineEdit()
        self.out.setPlaceholderText("new dated file beside the rig file")
        self.choose_out = QPushButton("Choose…")
        form = QFormLayout()
        form.addRow("Method:", self.method)
        form.addRow("Band (Hz):", self.band)
        form.addRow("Step:", self.step)
        form.addRow("Pressure at reference:", self.pressure)
        form.addRow("Record per frequency:", self.record)
        form.addRow("Reference sensor:", self.reference)
        form.addRow("Check against:", self.check_reference)
        out_row = QWidget()
        out_lay = QHBoxLayout(out_row)
        out_lay.setContentsMargins(0, 0, 0, 0)
        out_lay.addWidget(self.out, 1)
        out_lay.addWidget(self.choose_out)
        form.addRow("Calibration file:", out_row)
        self.run_button = QPushButton("Calibrate")
        self.swap_button = QPushButton("Swap made — go on")
        self.stop_button = QPushButton("Stop (drive to zero)")
        buttons = QWidget()
        b_lay = QHBoxLayout(buttons)
        b_lay.setContentsMargins(0, 0, 0, 0)
        for b in (self.run_button, self.swap_button):
            b_lay.addWidget(b)
        self.message = QLabel("Set the band and the pressure, then 'Calibrate'.")
        self.message.setWordWrap(True)
        self.log = QPlainTextEdit()
        self.log.setReadOnly(True)
        self.log.setMinimumHeight(120)
        self.log.setLineWrapMode(QPlainTextEdit.LineWrapMode.NoWrap)      # the lines are columns
        self.log.setFont(QFontDatabase.systemFont(QFontDatabase.SystemFont.FixedFont))
        box = QGroupBox("Calibrate the pressure sensors")
        lay = QVBoxLayout(box)
        lay.addWidget(self.caution)
        lay.addLayout(form)
        lay.addWidget(buttons)
        lay.addWidget(self.stop_button)
        lay.addWidget(self.message)
        lay.addWidget(self.log, 1)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(0, 0, 0, 0)
        outer.addWidget(box)
        self.run_button.clicked.connect(self.start)
        self.swap_button.clicked.connect(self.go_on)
        self.stop_button.clicked.connect(lambda: self.halt(HALT_WHY_STOP))
        self.choose_out.clicked.connect(self._choose_out)
        self._update_buttons()

    def _choose_out(self) -> None:
        name, _f = QFileDialog.getSaveFileName(self, "Calibration file to write", self.out.text() or ".",
                                               "Calibration files (*.toml);;All files (*)")
        if name:
            self.out.setText(name)

    # -------------------------------------------------------------- state
    def set_blocked(self, why: str) -> None:
        """A sweep or a commissioning check is running (``why``), or nothing ("")."""
        self.blocked = why
        self._update_buttons()

    def _update_buttons(self) -> None:
        free = not self.busy and not self.blocked
        for w in (self.run_button, self.method, self.choose_out):
            w.setEnabled(free)
        self.stop_button.setEnabled(self.busy)
        self.swap_button.setEnabled(self.busy and self.operator is not None and self.operator.waiting)

    def _set_busy(self, busy: bool) -> None:
        self.busy = busy
        self._update_buttons()
        self.busy_changed.emit(busy)

    # -------------------------------------------------------------- running
    def request(self, ctx: RunContext) -> svc.Request:
        """The entries as a service request (the step read as Hz; fields named as on the panel)."""
        if ctx.rig_path is None:
            raise svc.CalibrationRunError("No rig file is loaded (Set-up tab).")
        out = self.out.text().strip() or str(default_output(Path(ctx.rig_path)))
        sim = ctx.backend == "simulated"
        return svc.Request(rig=ctx.rig_path, out=out, method=self.method.currentData(), band=self.band.text().strip(),
                           step_hz=svc.parse_step(self.step.text().strip(), FIELD_NAMES["step_hz"]),
                           reference=self.reference.text().strip() or None,
                           check_reference=self.check_reference.text().strip() or None,
                           pressure=self.pressure.text().strip(), record=self.record.text().strip(),
                           backend=ctx.backend, scenario=ctx.scenario if sim else None, fast=ctx.fast and sim,
                           seed=self.seed if sim else None, names=FIELD_NAMES)

    def start(self) -> bool:
        """Start a run (False, with the reason in the message line, when it cannot)."""
        ctx = self.context()
        refusal = (self.blocked or ctx.other_activity or
                   ("A calibration is running." if self.busy else "") or
                   ("No rig file is loaded (Set-up tab)." if ctx.rig_path is None else "") or
                   ("Save the rig file first (Set-up tab): the calibration reads the saved file."
                    if ctx.rig_unsaved else ""))
        if refusal:
            self._problem(refusal)
            return False
        try:
            req = self.request(ctx)
        except FlamebodeError as exc:
            self._problem(str(exc))
            return False
        self.log.clear()
        self.warnings = []                  # said again under the result, so none scrolls out of sight
        self.outcome = None
        op = ThreadedOperator(self._told.emit)
        self.operator = op

        def work() -> None:
            try:
                result: Any = svc.run_calibration(req, op)
                error: BaseException | None = None
            except BaseException as exc:    # handed to the GUI thread, never raised on this thread
                result, error = None, exc
            self._finished.emit(result, error)

        self.message.setText(html.escape(f"calibrating on {ctx.backend} ({req.method})…"))
        self._set_busy(True)
        self.thread = threading.Thread(target=work, name="ui-calibration", daemon=True)
        self.thread.start()
        return True

    def go_on(self) -> None:
        if self.operator is not None and self.operator.waiting:
            self.message.setText("swap made: the next pass starts")
            self.operator.go_on()
            self.swap_button.setEnabled(False)

    def halt(self, why: str) -> bool:
        """Any thread: the pass in progress halted at once (output to zero), nothing written;
        False when no calibration runs."""
        op = self.operator
        if op is None or not self.busy:
            return False
        op.halt(why)
        return True

    def shutdown(self, why: str, timeout_s: float = 10.0) -> None:
        self.halt(why)
        t = self.thread
        if t is not None and t.is_alive():
            t.join(timeout_s)

    # -------------------------------------------------------------- what the run says
    def _on_told(self, kind: str, text: str) -> None:
        if kind == "swap":
            self.log.appendPlainText(text)
            self.message.setText(f"<b>{html.escape(text)}</b>, then press 'Swap made — go on' ('Stop' ends the "
                                 "calibration; nothing is written).")
            self._update_buttons()
            return
        self.log.appendPlainText(text)
        if kind == "warning":
            self.warnings.append(text)
            self.message.setText(f"<b style='color:#7A4A00'>{html.escape(text)}</b>")

    def _on_finished(self, outcome: Any, error: BaseException | None) -> None:
        self.operator = None
        self.thread = None
        self._set_busy(False)
        if error is not None:
            text = str(error) if isinstance(error, FlamebodeError) else \
                f"internal error ({type(error).__name__}: {error}); nothing was written"
            self._problem(f"calibration not written: {text}")
            return
        self.outcome = outcome
        drift = (f" Drifted since the previous calibration: {', '.join(outcome.drifted)} — check mounting, cable "
                 "and certificate." if outcome.drifted else "")
        self.message.setText(f"<b>Calibration written</b>: {html.escape(str(outcome.path))} ({len(outcome.freq_hz)} "
                             f"frequencies {outcome.freq_hz[0]:g}-{outcome.freq_hz[-1]:g} Hz, against "
                             f"{html.escape(outcome.reference)}).{html.escape(drift)}<br>To use it, add to the rig "
                             f"file (before its first table): <code>{html.escape(outcome.use_line)}</code>"
                             + "".join(f"<br><b style='color:#7A4A00'>{html.escape(w)}</b>" for w in self.warnings))
        self.written.emit(str(outcome.path))

    def _problem(self, text: str) -> None:
        self.message.setText(f"<b style='color:#C62828'>{html.escape(text)}</b>")
