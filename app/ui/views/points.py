"""The point list: one row per planned point with its status, attempts, result and flags.

``PointTableQt`` adapts the Qt-free ``PointTable`` to a table view (it holds no data of
its own); selecting rows emits ``selection_changed`` with the plan indices. Phase reads as on the
response curve: degrees, unwrapped along frequency, with its 95 % interval.

Imports: PySide6, ``app.ui.models`` and ``.style`` only.
"""

from __future__ import annotations

import math
from typing import Any

from PySide6.QtCore import QAbstractTableModel, QModelIndex, QPersistentModelIndex, Qt, Signal
from PySide6.QtGui import QColor
from PySide6.QtWidgets import QAbstractItemView, QHeaderView, QTableView, QVBoxLayout, QWidget

from ..models import PointRow, PointTable
from .style import STATUS_COLOURS, Coalesced

# short headers, so that the flags stay in view beside the curves; the header's tooltip says it whole
COLUMNS = ("#", "f (Hz)", "Target", "Status", "Tries", "Gain", "Phase (deg)", "Flags")
COLUMN_TIPS = ("point number in the plan (from 1)", "forcing frequency (Hz)",
               "target |u'|/ū at the reference plane", "the point's state", "attempts stored for this point",
               "gain |F| ± its 95 % interval", "phase of F in degrees, unwrapped along frequency as on the curve, "
               "± its 95 % interval", "quality flags and warnings (the row's tooltip lists them)")
Index = QModelIndex | QPersistentModelIndex


def _num(v: float, fmt: str) -> str:
    return format(v, fmt) if math.isfinite(v) else ""


def cell_text(r: PointRow, col: int, phase_rad: float | None = None) -> str:
    """One cell; ``phase_rad`` is the phase as the curve shows it (unwrapped), when it shows the point."""
    phase = r.phase_rad if phase_rad is None else phase_rad
    ci = f" ± {math.degrees(r.phase_ci95_rad):.1f}" if math.isfinite(r.phase_ci95_rad) else ""
    values = (str(r.index + 1), f"{r.freq_hz:g}", f"{r.target_ratio:g}", r.status, str(r.attempts),
              _num(r.gain, ".3f") + (f" ± {r.gain_ci95:.3f}" if math.isfinite(r.gain_ci95) and math.isfinite(r.gain)
                                     else ""),
              (_num(math.degrees(phase), ".1f") + ci) if math.isfinite(phase) and math.isfinite(r.gain) else "",
              ", ".join(r.flags))
    return values[col]


class PointTableQt(QAbstractTableModel):
    rows_changed = Signal()

    def __init__(self, table: PointTable, parent: Any = None) -> None:
        super().__init__(parent)
        self.table = table
        self._rows = len(table.rows)
        self._phase: dict[int, float] = {}
        table.subscribe(Coalesced(self._changed, parent=self))

    def _changed(self) -> None:
        self._phase = self.table.shown_phase_rad()
        self.beginResetModel()
        self.endResetModel()
        if len(self.table.rows) != self._rows:
            self._rows = len(self.table.rows)
            self.rows_changed.emit()

    def rowCount(self, parent: Index = QModelIndex()) -> int:  # noqa: B008 (Qt's signature)
        return 0 if parent.isValid() else len(self.table.rows)

    def columnCount(self, parent: Index = QModelIndex()) -> int:  # noqa: B008
        return 0 if parent.isValid() else len(COLUMNS)

    def data(self, index: Index, role: int = Qt.ItemDataRole.DisplayRole) -> Any:
        if not index.isValid():
            return None
        r = self.table.rows[index.row()]
        if role == Qt.ItemDataRole.DisplayRole:
            return cell_text(r, index.column(), self._phase.get(r.index))
        if role == Qt.ItemDataRole.BackgroundRole:
            return QColor(STATUS_COLOURS.get(r.status, "#FFFFFF"))
        if role == Qt.ItemDataRole.ToolTipRole and index.column() == 7 and r.flags:
            return "\n".join(r.flags)
        return None

    def headerData(self, section: int, orientation: Qt.Orientation, role: int = Qt.ItemDataRole.DisplayRole) -> Any:
        if orientation == Qt.Orientation.Horizontal and role == Qt.ItemDataRole.DisplayRole:
            return COLUMNS[section]
        if orientation == Qt.Orientation.Horizontal and role == Qt.ItemDataRole.ToolTipRole:
            return COLUMN_TIPS[section]
        return None


class PointListView(QWidget):
    selection_changed = Signal(list)

    def __init__(self, table: PointTable, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.qt_model = PointTableQt(table, self)
        self.view = QTableView()
        self.view.setModel(self.qt_model)
        self.view.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.view.setSelectionMode(QAbstractItemView.SelectionMode.ExtendedSelection)
        self.view.verticalHeader().setVisible(False)
        self.view.verticalHeader().setDefaultSectionSize(20)
        header = self.view.horizontalHeader()
        header.setSectionResizeMode(QHeaderView.ResizeMode.Interactive)   # sized once per new row set, not per change
        header.setStretchLastSection(True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.view)
        self._selected: list[int] = []
        self.qt_model.modelAboutToBeReset.connect(self._remember)
        self.qt_model.modelReset.connect(self._restore)
        self.view.selectionModel().selectionChanged.connect(self._emit)
        self.qt_model.rows_changed.connect(self._size_columns)

    def _size_columns(self) -> None:
        """Fit the columns once per new row set, leaving room for results still to come."""
        self.view.resizeColumnsToContents()
        fm = self.view.fontMetrics()
        for col, sample in ((5, "0.000 ± 0.000"), (6, "+000.0"), (3, "measuring")):
            self.view.setColumnWidth(col, max(self.view.columnWidth(col), fm.horizontalAdvance(sample) + 16))

    def selected(self) -> list[int]:
        rows = sorted({i.row() for i in self.view.selectionModel().selectedRows()})
        return [self.qt_model.table.rows[r].index for r in rows if r < len(self.qt_model.table.rows)]

    def select_points(self, indices: list[int]) -> None:
        self.view.clearSelection()
        sel = self.view.selectionModel()
        for row, r in enumerate(self.qt_model.table.rows):
            if r.index in indices:
                sel.select(self.qt_model.index(row, 0), sel.SelectionFlag.Select | sel.SelectionFlag.Rows)
                self.view.scrollTo(self.qt_model.index(row, 0))

    def _remember(self) -> None:
        self._selected = self.selected()

    def _restore(self) -> None:
        if self._selected:
            blocked = self.view.selectionModel().blockSignals(True)
            self.select_points(self._selected)
            self.view.selectionModel().blockSignals(blocked)

    def _emit(self, *_: object) -> None:
        self.selection_changed.emit(self.selected())
