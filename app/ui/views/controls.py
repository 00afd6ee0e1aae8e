"""The run controls strip at the top of the window: the back-end label, the run buttons and
the emergency halt.

Deliberately not a ``QToolBar``: a tool bar moves the buttons that no longer fit into an
overflow menu, and the halt must never be one click away. The strip is a plain layout
whose minimum width holds every button at full size (the window's minimum size follows
from it), with the halt button at the right, two rows high, never shrunk.

Imports: PySide6 and ``.style`` only.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QAction
from PySide6.QtWidgets import QFrame, QGridLayout, QHBoxLayout, QLabel, QSizePolicy, QToolButton, QWidget

from .style import HALT_STYLE, SIM_STYLE

HALT_TEXT = "■ EMERGENCY HALT\nF12 · Esc"


class ControlStrip(QFrame):
    """``run_actions`` become buttons in one row; ``None`` in the list is a gap."""

    def __init__(self, run_actions: list[QAction | None], halt_action: QAction,
                 parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("controlStrip")
        self.sim_label = QLabel()
        self.sim_label.setWordWrap(True)
        self.sim_label.setStyleSheet(SIM_STYLE)
        row = QHBoxLayout()
        row.setContentsMargins(0, 0, 0, 0)
        self.buttons: dict[str, QToolButton] = {}
        for act in run_actions:
            if act is None:
                row.addSpacing(14)
                continue
            b = QToolButton()
            b.setDefaultAction(act)
            b.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonTextOnly)
            b.setMinimumHeight(30)
            row.addWidget(b)
            self.buttons[act.text()] = b
        row.addStretch(1)
        self.halt_button = QToolButton()
        self.halt_button.setObjectName("haltButton")
        self.halt_button.setDefaultAction(halt_action)
        self.halt_button.setText(HALT_TEXT)
        self.halt_button.setStyleSheet(HALT_STYLE)
        self.halt_button.setMinimumHeight(58)
        self.halt_button.setSizePolicy(QSizePolicy.Policy.Fixed, QSizePolicy.Policy.Expanding)
        grid = QGridLayout(self)
        grid.setContentsMargins(6, 4, 6, 4)
        grid.setHorizontalSpacing(10)
        grid.addWidget(self.sim_label, 0, 0)
        grid.addLayout(row, 1, 0)
        grid.addWidget(self.halt_button, 0, 1, 2, 1)
        grid.setColumnStretch(0, 1)
        self.halt_button.setMinimumWidth(self.halt_button.sizeHint().width())

    def button_for(self, action: QAction) -> QToolButton | None:
        for b in self.buttons.values():
            if b.defaultAction() is action:
                return b
        return None

    def show_backend(self, simulated: bool, name: str) -> None:
        if simulated:
            self.sim_label.setText("SIMULATED BURNER — rehearsal, no hardware is driven")
            self.sim_label.setStyleSheet(SIM_STYLE)
            self.sim_label.setToolTip("The built-in simulated burner: nothing outside this computer is driven.")
        else:
            self.sim_label.setText(f"REAL HARDWARE: {name} — the speakers and the flame are live")
            self.sim_label.setStyleSheet(SIM_STYLE.replace("#FFE08A", "#F4B6B0"))
            self.sim_label.setToolTip("Forcing is loud; the drive ceiling protects the speakers only if it is set "
                                      "from their ratings; flamebode does not control the fuel or the detector "
                                      "supply. Your laboratory's rules come first.")
