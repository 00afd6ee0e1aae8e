"""A form view of a rig or plan file beside its TOML text; the text stays the source of truth.

Each field shows the value at one dotted key of the text. Editing a field rewrites that one
value in the text (``app.ui.toml_edit.set_value``: comments and layout kept); editing the
text refreshes the fields. The editor validates its text a moment after each change (the
rig/plan loaders' own messages, which name the key) and the form shows each message beside
the field of the key it names; messages about other keys go to the form's status line.

Imports: PySide6 and ``app.ui.toml_edit``. No loaders (the editor validates), no storage.
"""

from __future__ import annotations

import tomllib
from typing import Any

from PySide6.QtGui import QTextCursor
from PySide6.QtWidgets import QFormLayout, QLabel, QLineEdit, QPlainTextEdit, QVBoxLayout, QWidget

from ..toml_edit import display, literal, read_values, set_value

# (dotted key, label): the scalars a person changes most; tables of sensors and flows stay in the text
RIG_FIELDS: tuple[tuple[str, str], ...] = (
    ("name", "Rig name"), ("duct.diameter", "Duct diameter"), ("duct.area_ratio", "Area ratio"),
    ("duct.reference_plane", "Reference plane"), ("drive.ceiling", "Drive ceiling (peak)"),
    ("drive.ramp_time", "Ramp time"), ("light.safe_max", "Light safe maximum"),
    ("gas.temperature", "Gas temperature"), ("gas.pressure", "Gas pressure"),
    ("acquisition.sample_rate", "Sample rate"), ("acquisition.block_duration", "Block duration"),
)
PLAN_FIELDS: tuple[tuple[str, str], ...] = (
    ("name", "Plan name"), ("amplitude.values", "Amplitudes |u'|/ū"), ("amplitude.basis", "Amplitude basis"),
    ("timing.record", "Record length"), ("timing.settle", "Settle time"), ("tuning.tolerance", "Tuning tolerance"),
    ("tuning.max_steps", "Tuning steps (max)"), ("tuning.ceiling", "Plan drive ceiling"),
    ("quality.snr_db_min", "Minimum SNR (dB)"), ("faults.pressure_max", "Pressure limit"),
)
ERROR_STYLE = "color: #B00020;"


class ConfigForm(QWidget):
    """Fields bound to the TOML text of one ``QPlainTextEdit``."""

    def __init__(self, editor: QPlainTextEdit, fields: tuple[tuple[str, str], ...],
                 parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.text_edit = editor
        self.keys = [k for k, _ in fields]
        self.fields: dict[str, QLineEdit] = {}
        self.errors: dict[str, QLabel] = {}
        self._values: dict[str, Any] = {}
        form = QFormLayout()
        form.setRowWrapPolicy(QFormLayout.RowWrapPolicy.WrapLongRows)
        for key, label in fields:
            edit = QLineEdit()
            edit.setToolTip(key)
            edit.setObjectName(f"field:{key}")
            err = QLabel()
            err.setWordWrap(True)
            err.setStyleSheet(ERROR_STYLE)
            err.hide()
            cell = QWidget()
            lay = QVBoxLayout(cell)
            lay.setContentsMargins(0, 0, 0, 0)
            lay.setSpacing(1)
            lay.addWidget(edit)
            lay.addWidget(err)
            form.addRow(label + ":", cell)
            edit.textEdited.connect(lambda text, k=key: self._field_edited(k, text))
            self.fields[key], self.errors[key] = edit, err
        self.status = QLabel()
        self.status.setWordWrap(True)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(2, 2, 2, 2)
        outer.addLayout(form)
        outer.addWidget(self.status)
        outer.addStretch(1)

    def resizeEvent(self, event: Any) -> None:
        super().resizeEvent(event)
        self._fit_height()

    def _fit_height(self) -> None:
        """A scroll area sizes its widget by the size hint, not by the height wrapped messages
        need at the width it really has: ask the layout for that height and keep it."""
        need = self.layout().heightForWidth(self.width())
        if need > 0 and need != self.minimumHeight():
            self.setMinimumHeight(need)

    # -------------------------------------------------------------- text -> form
    def refresh(self, problems: list[str]) -> list[str]:
        """Fields from the text (the one being typed in keeps its text); problems beside their keys.
        Returns the keys whose problem is new (to bring into view)."""
        try:
            self._values = read_values(self.text_edit.toPlainText(), self.keys)
        except tomllib.TOMLDecodeError:
            pass                                  # keep the last readable values; the problem is listed
        for key, edit in self.fields.items():
            if not edit.hasFocus() and edit.text() != display(self._values.get(key)):
                edit.setText(display(self._values.get(key)))
                edit.setCursorPosition(0)         # the start of a long value in view, not its end
        placed: set[int] = set()
        new: list[str] = []
        for key, err in self.errors.items():
            mine = [i for i, p in enumerate(problems) if p.startswith(f"{key}:") or p.startswith(f"{key}[")]
            placed.update(mine)
            if mine and err.isHidden():
                new.append(key)
            err.setText("\n".join(problems[i][len(key) + 1:].strip() for i in mine))
            err.setVisible(bool(mine))
        others = [p for i, p in enumerate(problems) if i not in placed]
        self.status.setText("" if not others else "<span style='%s'>%s</span>" % (
            ERROR_STYLE, "<br>".join(_html(p) for p in others)))
        self._fit_height()
        return new

    # -------------------------------------------------------------- form -> text
    def _field_edited(self, key: str, typed: str) -> None:
        old = self.text_edit.toPlainText()
        try:
            new = set_value(old, key, literal(typed, self._values.get(key)))
        except ValueError as exc:
            self.errors[key].setText(str(exc))
            self.errors[key].show()
            return
        self._replace_text(old, new)

    def _replace_text(self, old: str, new: str) -> None:
        """Replace only the changed span (the editor keeps its undo history and scroll position)."""
        start = 0
        while start < min(len(old), len(new)) and old[start] == new[start]:
            start += 1
        end_old, end_new = len(old), len(new)
        while end_old > start and end_new > start and old[end_old - 1] == new[end_new - 1]:
            end_old, end_new = end_old - 1, end_new - 1
        cursor = QTextCursor(self.text_edit.document())
        cursor.setPosition(start)
        cursor.setPosition(end_old, QTextCursor.MoveMode.KeepAnchor)
        cursor.insertText(new[start:end_new])


def _html(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
