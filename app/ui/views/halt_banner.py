"""The red banner shown above every tab after an emergency halt: that the outputs are at
zero, why the sweep was halted, and what to do next.

Imports: PySide6 and ``.style`` only.
"""

from __future__ import annotations

from PySide6.QtWidgets import QFrame, QGridLayout, QLabel, QPushButton, QWidget

from .style import HALT_BANNER_STYLE

WHAT_TO_DO = (
    "Drive set to zero without a ramp; it stays off until the next Start. Fuel, flame and detector supply are "
    "not switched off by flamebode: make the rig safe by your lab's procedure. Stored points are kept (a record "
    "cut short is marked interrupted, never used). Then fix the cause and Start, or re-acquire in Review.")


class HaltBanner(QFrame):
    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("haltBanner")
        self.setStyleSheet(HALT_BANNER_STYLE)
        self.title = QLabel()
        self.title.setObjectName("haltTitle")
        self.advice = QLabel(WHAT_TO_DO)
        self.advice.setWordWrap(True)
        self.title.setWordWrap(True)
        self.dismiss = QPushButton("Dismiss")
        self.dismiss.clicked.connect(self.hide)
        grid = QGridLayout(self)
        grid.setContentsMargins(10, 6, 10, 6)
        grid.addWidget(self.title, 0, 0)
        grid.addWidget(self.dismiss, 0, 1)
        grid.addWidget(self.advice, 1, 0, 1, 2)
        grid.setColumnStretch(0, 1)
        self.why = ""
        self.hide()

    def show_halt(self, why: str) -> None:
        self.why = why
        self.title.setText(f"HALTED: outputs zeroed — {why}" if why else "HALTED: outputs zeroed")
        self.show()

    def reset(self) -> None:
        self.why = ""
        self.hide()
