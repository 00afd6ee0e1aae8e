"""Set-up: the rig and plan files in editors with validation, the back-end choice, the
simulator's options, the safety note and the pre-run checklist.

Validation runs the core's own loaders on the editor text (``rig_from_dict`` /
``plan_from_dict``) a moment after each change (debounced) and lists each ConfigError line
(file: key: problem) beside the editor; a form of the main keys (``config_form``) sits beside
the text, shows each problem at its key, and edits the text. Saving is handed to the window
(file writes never run on the GUI thread).

Imports: PySide6, the standard library and the rig/plan loaders only.
"""

from __future__ import annotations

import html
import tomllib
from pathlib import Path
from typing import Any, Callable

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QFont, QStandardItemModel
from PySide6.QtWidgets import (QCheckBox, QComboBox, QFileDialog, QFormLayout, QFrame, QGroupBox, QHBoxLayout, QLabel,
                               QLineEdit, QListWidget, QListWidgetItem, QPlainTextEdit, QPushButton, QScrollArea,
                               QSizePolicy, QSplitter, QTabWidget, QVBoxLayout, QWidget)

from app.errors import ConfigError
from app.plan import plan_from_dict
from app.rig import rig_from_dict

from .config_form import PLAN_FIELDS, RIG_FIELDS, ConfigForm
from .style import scroll_column

CHECK_DELAY_MS = 300                 # validate this long after the last keystroke
STACK_BELOW_PX = 620                 # narrower than this: the form above the text, not beside it

SAFETY_NOTE = (
    "<b>Safety first.</b> flamebode keeps the drive under its voltage ceiling and brings it to zero on every "
    "stop, fault and exit, but it does not replace your laboratory's own safety rules, permits and local codes "
    "— follow those first.")

CHECKLIST = (
    ("flame", "Flame and fuel: gas-safety measures in place (leak check, ventilation, flame supervision, "
              "emergency fuel shut-off); hydrogen flames are nearly invisible and flash back easily; "
              "surfaces stay hot after the flame is out."),
    ("hv", "Detector high voltage: the photomultiplier supply is set for this flame; switch it off before "
           "touching cables; never power it while exposed to room light."),
    ("hearing", "Hearing: everyone near the rig wears hearing protection; the forcing amplitude is no higher "
                "than the test needs."),
    ("ceiling", "Speaker ceiling: the drive ceiling in the rig file (and the plan) is set from the speaker's "
                "and the amplifier's ratings; a speaker driven above its rating burns out, sometimes only after "
                "minutes."),
)


class ConfigEditor(QWidget):
    """A text editor for one TOML file with Check and Save; problems listed beside it."""

    save_requested = Signal(str, str)      # path, text
    checked = Signal(list)                 # the problems of the last check (key: problem), [] when valid

    def __init__(self, kind: str, validate: Callable[[str, str], None],
                 fields: tuple[tuple[str, str], ...] = (), parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.kind, self._validate = kind, validate
        self.problem_lines: list[str] = []
        self.path: Path | None = None
        self.path_label = QLabel("(no file)")
        self.path_label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        # a long path must not set the window's minimum width: it is cut at the right, whole in the tooltip
        self.path_label.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        self.open_button, self.check_button, self.save_button = (QPushButton("Open…"), QPushButton("Check"),
                                                                 QPushButton("Save"))
        self.editor = QPlainTextEdit()
        self.editor.setFont(QFont("DejaVu Sans Mono", 9))
        self.editor.setLineWrapMode(QPlainTextEdit.LineWrapMode.NoWrap)
        self.problems = QListWidget()
        self.problems.setMaximumHeight(110)
        self.status = QLabel("")
        self.form = ConfigForm(self.editor, fields)
        self.form_scroll = form_scroll = QScrollArea()
        form_scroll.setWidget(self.form)
        form_scroll.setWidgetResizable(True)
        form_scroll.setFrameShape(QFrame.Shape.NoFrame)
        form_scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.split = QSplitter()
        self.split.setObjectName(f"{kind}-form-split")
        self.split.addWidget(form_scroll)
        self.split.addWidget(self.editor)
        self.split.setStretchFactor(0, 2)
        self.split.setStretchFactor(1, 3)
        self.split.setChildrenCollapsible(False)
        self.check_timer = QTimer(self)
        self.check_timer.setSingleShot(True)
        self.check_timer.setInterval(CHECK_DELAY_MS)
        self.check_timer.timeout.connect(self.check)
        top = QHBoxLayout()
        top.addWidget(QLabel(f"<b>{kind.capitalize()} file:</b>"))
        top.addWidget(self.path_label, 1)
        for b in (self.open_button, self.check_button, self.save_button):
            top.addWidget(b)
        lay = QVBoxLayout(self)
        lay.addLayout(top)
        lay.addWidget(self.split, 1)
        lay.addWidget(self.status)
        lay.addWidget(self.problems)
        self.open_button.clicked.connect(self._choose)
        self.check_button.clicked.connect(self.check)
        self.save_button.clicked.connect(self._save)
        self.editor.modificationChanged.connect(self._dirty)
        self.editor.textChanged.connect(self.check_timer.start)      # validated as you type

    def resizeEvent(self, event: Any) -> None:
        narrow = self.width() < STACK_BELOW_PX
        self.split.setOrientation(Qt.Orientation.Vertical if narrow else Qt.Orientation.Horizontal)
        self.problems.setMaximumHeight(60 if self.height() < 560 else 110)   # each message is in the form too
        super().resizeEvent(event)

    def load(self, path: Path) -> None:
        self.path = Path(path)
        self.editor.setPlainText(self.path.read_text(encoding="utf-8"))
        self.editor.document().setModified(False)
        self.path_label.setText(str(self.path))
        self.path_label.setToolTip(str(self.path))
        self.check()

    @property
    def dirty(self) -> bool:
        return self.editor.document().isModified()

    def text(self) -> str:
        return self.editor.toPlainText()

    def check(self) -> bool:
        """Validate the editor text; list the problems (and show them in the form); True when valid."""
        self.check_timer.stop()
        self.problems.clear()
        where = str(self.path) if self.path else f"<{self.kind}>"
        try:
            self._validate(self.text(), where)
        except ConfigError as exc:
            for p in exc.problems:
                item = QListWidgetItem(f"{exc.path}: {p}")
                item.setForeground(Qt.GlobalColor.darkRed)
                self.problems.addItem(item)
            self.status.setText(f"<span style='color:#B00020'>{len(exc.problems)} problem(s); "
                                f"fix them before saving</span>")
            self._checked(list(exc.problems))
            return False
        self.status.setText("<span style='color:#1B5E20'>valid</span>")
        self._checked([])
        return True

    def _checked(self, problems: list[str]) -> None:
        self.problem_lines = problems
        self.problems.setVisible(bool(problems))          # no empty box taking room from the text
        new = self.form.refresh(problems)
        if new and not any(f.hasFocus() for f in self.form.fields.values()):
            self.form_scroll.ensureWidgetVisible(self.form.fields[new[0]].parentWidget())   # field and message
        self.checked.emit(problems)

    def mark_saved(self) -> None:
        self.editor.document().setModified(False)
        self.status.setText(f"<span style='color:#1B5E20'>saved to {self.path}</span>")

    def _dirty(self, modified: bool) -> None:
        self.path_label.setText(f"{self.path}{' (unsaved changes)' if modified else ''}")

    def _save(self) -> None:
        if self.path is not None and self.check():
            self.save_requested.emit(str(self.path), self.text())

    def _choose(self) -> None:
        start = str(self.path.parent) if self.path else "."
        name, _ = QFileDialog.getOpenFileName(self, f"Open a {self.kind} file", start, "TOML files (*.toml)")
        if name:
            self.load(Path(name))


def parse_toml_text(text: str, where: str) -> dict[str, Any]:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(where, [f"not valid TOML: {exc}"]) from None


class SetupView(QWidget):
    """The set-up tab."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.rig_editor = ConfigEditor("rig", self._validate_rig, RIG_FIELDS)
        self.plan_editor = ConfigEditor("plan", self._validate_plan, PLAN_FIELDS)
        self.rig_editor.checked.connect(lambda _p: self.plan_editor.check_timer.start())   # the plan is checked
        files = QTabWidget()
        files.addTab(self.rig_editor, "Rig file")
        files.addTab(self.plan_editor, "Plan file")
        self.files = files

        self.backend = QComboBox()
        self.backend.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
        self.backend.setMinimumContentsLength(16)
        self.backend_reasons = QLabel()
        self.backend_reasons.setWordWrap(True)
        self.fast = QCheckBox("Run faster than real time (simulator only)")
        self.scenario = QLineEdit()
        self.scenario.setPlaceholderText("the plan's 'scenario' key, or the demo scenario")
        self.runs_root = QLineEdit()
        form = QFormLayout()
        form.addRow("Back-end:", self.backend)
        form.addRow("", self.backend_reasons)
        form.addRow("Simulator scenario:", self.scenario)
        form.addRow(self.fast)
        form.addRow("Store runs under:", self.runs_root)
        back = QGroupBox("Back-end and storage")
        back.setLayout(form)

        note = QLabel(SAFETY_NOTE)
        note.setWordWrap(True)
        self.checks: dict[str, QCheckBox] = {}
        check_lay = QVBoxLayout()
        check_lay.addWidget(note)
        for key, text in CHECKLIST:
            box = QCheckBox()
            lab = QLabel(text)
            lab.setWordWrap(True)
            lab.setBuddy(box)
            row = QHBoxLayout()
            row.addWidget(box, 0, Qt.AlignmentFlag.AlignTop)
            row.addWidget(lab, 1)
            check_lay.addLayout(row)
            self.checks[key] = box
        self.checklist_hint = QLabel()
        self.checklist_hint.setWordWrap(True)
        check_lay.addWidget(self.checklist_hint)
        self.commissioning = QLabel()        # what the rig's commissioning record lacks or has let age
        self.commissioning.setWordWrap(True)
        check_lay.addWidget(self.commissioning)
        self.rig_editor.checked.connect(lambda _p: self.refresh_commissioning())
        safety = QGroupBox("Before forcing the flame")
        safety.setLayout(check_lay)

        left = QWidget()
        left_lay = QVBoxLayout(left)
        left_lay.addWidget(back)
        left_lay.addWidget(safety)
        left_lay.addStretch(1)
        # scrolls in a short window instead of squeezing the wrapped checklist lines onto each other
        left_scroll = scroll_column(left)
        split = QSplitter()
        split.setObjectName("setup-split")
        split.addWidget(left_scroll)
        split.addWidget(files)
        split.setStretchFactor(0, 2)
        split.setStretchFactor(1, 3)
        lay = QVBoxLayout(self)
        lay.addWidget(split)
        self.backend.currentIndexChanged.connect(self._backend_changed)
        self.backends: list[Any] = []

    # -------------------------------------------------------------- back-ends
    def set_backends(self, infos: list[Any], choose: str = "simulated") -> None:
        """Fill the list; unavailable back-ends are greyed with the reason."""
        self.backends = list(infos)
        self.backend.clear()
        model = self.backend.model()
        reasons = []
        for i, info in enumerate(infos):
            sim = " — simulated burner, for rehearsal" if info.name == "simulated" else ""
            label = f"{info.name}{sim}" if info.availability.available else f"{info.name} (unavailable)"
            self.backend.addItem(label, info.name)
            if not info.availability.available:
                if isinstance(model, QStandardItemModel):
                    model.item(i).setEnabled(False)
                self.backend.setItemData(i, info.availability.reason, Qt.ItemDataRole.ToolTipRole)
                reasons.append(f"<i>{info.name}</i>: {info.availability.reason}")
        self.backend_reasons.setText("Not available here: " + "; ".join(reasons) if reasons else "")
        names = [i.name for i in infos]
        if choose in names:
            self.backend.setCurrentIndex(names.index(choose))

    def backend_name(self) -> str:
        return str(self.backend.currentData() or "simulated")

    def is_simulated(self) -> bool:
        return self.backend_name() == "simulated"

    def _backend_changed(self, _i: int) -> None:
        sim = self.is_simulated()
        self.fast.setEnabled(sim)
        self.scenario.setEnabled(sim)
        self.checklist_hint.setText(
            "Simulated burner: the checklist is shown for practice and is not required." if sim else
            "<b>Real hardware: tick every item before Start is allowed.</b>")
        self.refresh_commissioning()

    def refresh_commissioning(self) -> list[str]:
        """Say, below the checklist, what the rig's commissioning record (app.commissioning_record)
        lacks or has let age (30 days); a reminder, never a reason to refuse Start."""
        from app.commissioning_record import age_notes, read_record, record_path_for
        from app.errors import FlamebodeError

        path = self.rig_editor.path
        if path is None:
            self.commissioning.setText("")
            return []
        try:
            record = read_record(record_path_for(path))
            notes = age_notes(record, 30.0)
        except FlamebodeError as exc:
            notes = [f"the commissioning record cannot be read: {exc}"]
            record = None
        name = record.path.name if record is not None else record_path_for(path).name
        text = ("Commissioning (" + name + "): " + "; ".join(notes) + " — see docs/commissioning.md"
                if notes else f"Commissioning ({name}): dark offset, light-chain and calibration checks are recent.")
        text = html.escape(text)
        self.commissioning.setText(f"<b>{text}</b>" if notes and not self.is_simulated() else text)
        return notes

    def checklist_done(self) -> bool:
        return all(b.isChecked() for b in self.checks.values())

    # -------------------------------------------------------------- validation
    def _validate_rig(self, text: str, where: str) -> None:
        rig_from_dict(parse_toml_text(text, where), where, units_required=True)

    def _validate_plan(self, text: str, where: str) -> None:
        plan = plan_from_dict(parse_toml_text(text, where), where, units_required=True)
        try:
            where_rig = str(self.rig_editor.path) if self.rig_editor.path else "<rig>"
            rig = rig_from_dict(parse_toml_text(self.rig_editor.text(), where_rig), where_rig, units_required=True)
        except ConfigError:
            return                       # the rig's own problems are listed beside the rig editor
        plan.check_against(rig)
