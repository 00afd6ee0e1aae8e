"""The fault banner: the named fault, what the tool did and what the operator can do.

Fatal faults (the sweep ended, drive at zero) show in red; flags (the point is marked and
the sweep goes on) in amber. The newest fault replaces the text; a counter says how many
came before.

Imports: PySide6 and ``.style`` only.
"""

from __future__ import annotations

from typing import Any

from PySide6.QtWidgets import QFrame, QGridLayout, QLabel, QPushButton, QWidget

from .style import FAULT_FATAL_STYLE, FAULT_FLAG_STYLE


class FaultBanner(QFrame):
    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("faultBanner")
        self.title = QLabel()
        self.title.setStyleSheet("font-weight: bold; font-size: 14px;")
        self.message, self.action, self.advice = QLabel(), QLabel(), QLabel()
        for lab in (self.title, self.message, self.action, self.advice):
            lab.setWordWrap(True)
        self.dismiss = QPushButton("Dismiss")
        self.dismiss.clicked.connect(self.hide)
        grid = QGridLayout(self)
        grid.addWidget(self.title, 0, 0)
        grid.addWidget(self.dismiss, 0, 1)
        grid.addWidget(self.message, 1, 0, 1, 2)
        grid.addWidget(self.action, 2, 0, 1, 2)
        grid.addWidget(self.advice, 3, 0, 1, 2)
        grid.setColumnStretch(0, 1)
        self.count = 0
        self.last: Any = None
        self.hide()

    def show_fault(self, ev: Any) -> None:
        """Show a FaultRaised event (name, message, action, advice, fatal)."""
        self.count += 1
        self.last = ev
        kind = "Fault — sweep ended" if ev.fatal else ("Point flagged" if ev.point_index is not None else "Warning")
        more = f"   ({self.count - 1} earlier)" if self.count > 1 else ""
        point = f" at point {ev.point_index + 1}" if ev.point_index is not None else ""
        self.title.setText(f"{kind}: {ev.name}{point}{more}")
        self.message.setText(f"What happened: {ev.message}")
        self.action.setText(f"What the tool did: {ev.action}")
        self.advice.setText(f"What you can do: {ev.advice}")
        self.setStyleSheet(FAULT_FATAL_STYLE if ev.fatal else FAULT_FLAG_STYLE)
        self.show()

    def show_problem(self, title: str, what: str, did: str, advice: str) -> None:
        """A problem that is not an engine fault (e.g. a Start that failed), in the same three lines."""
        self.count += 1
        self.last = None
        self.title.setText(title)
        self.message.setText(f"What happened: {what}")
        self.action.setText(f"What the tool did: {did}")
        self.advice.setText(f"What you can do: {advice}")
        self.setStyleSheet(FAULT_FATAL_STYLE)
        self.show()

    def reset(self) -> None:
        self.count, self.last = 0, None
        self.hide()
