"""Review of a stored run: point list, response curve, the selected point's record and
figures, and the actions (accept, reject, re-acquire, reprocess with another rig file,
export). The window carries the actions out on its worker thread.

Imports: PySide6, ``app.ui.models`` and the sibling views only.
"""

from __future__ import annotations

import html
import math
from typing import Any

from PySide6.QtCore import Qt
from PySide6.QtWidgets import (QComboBox, QGridLayout, QGroupBox, QHBoxLayout, QLabel, QPushButton, QSplitter,
                               QTabWidget, QTextBrowser, QVBoxLayout, QWidget)

from ..models import PointTable, TuningHistory, format_volts, quality_rows, run_thresholds
from .points import PointListView
from .response import ResponseView
from .spectrum import SpectrumView
from .traces import TracesView


class ReviewView(QWidget):
    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.points = PointTable()
        self.tuning = TuningHistory()
        self.run: Any = None
        self.title = QLabel("No run open. Use “Open run…” (Ctrl+O), or finish a sweep.")
        self.title.setWordWrap(True)
        self.title.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.point_list = PointListView(self.points)
        self.response = ResponseView(self.points)
        self.record = TracesView("Record")
        self.spectrum = SpectrumView()
        self.details = QTextBrowser()
        self.details.setMinimumHeight(120)
        self.accept_button = QPushButton("Accept attempt")
        self.reject_button = QPushButton("Reject attempt")
        self.reacquire_button = QPushButton("Re-acquire selected")
        self.reacquire_flagged_button = QPushButton("Re-acquire flagged")
        self.reprocess_button = QPushButton("Reprocess with rig file…")
        self.export_button = QPushButton("Export")
        self.compare_button = QPushButton("Compare with run…")
        self.compare_button.setToolTip("Draw this run and another on one gain/phase figure (RUN/export/compare.png)")
        self.accept_button.setToolTip("Use this attempt for the point (A)")
        self.reject_button.setToolTip("Do not use this attempt (R)")
        self.reacquire_button.setToolTip("Measure the selected points again; old attempts are kept")
        self.export_button.setToolTip("Write CSV, JSON summary and gain/phase plots into RUN/export (Ctrl+E)")
        self.attempt_box = QComboBox()
        self.attempt_box.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
        self.attempt_box.setMinimumContentsLength(20)
        self.attempt_box.setToolTip("The attempt that Accept / Reject act on, and whose record is drawn")
        grid = QGridLayout()
        for k, b in enumerate((self.accept_button, self.reject_button, self.reacquire_button,
                               self.reacquire_flagged_button, self.reprocess_button, self.export_button,
                               self.compare_button)):
            grid.addWidget(b, k // 2, k % 2)      # two columns: the tab fits a half-screen window
        attempt_row = QHBoxLayout()
        attempt_row.addWidget(QLabel("Attempt:"))
        attempt_row.addWidget(self.attempt_box, 1)
        grid.addLayout(attempt_row, 4, 0, 1, 2)
        actions = QGroupBox("Decisions and actions")
        actions.setLayout(grid)
        self.message = QLabel("")
        self.message.setWordWrap(True)

        left = QWidget()
        ll = QVBoxLayout(left)
        ll.setContentsMargins(0, 0, 0, 0)
        ll.addWidget(self.title)
        ll.addWidget(self.point_list, 3)
        ll.addWidget(actions)
        ll.addWidget(self.message)
        ll.addWidget(self.details, 2)
        right = QSplitter(Qt.Orientation.Vertical)
        right.addWidget(self.response)
        self.record_tabs = QTabWidget()          # the record against time, or its spectrum
        self.record_tabs.addTab(self.record, "Record")
        self.record_tabs.addTab(self.spectrum, "Spectrum")
        right.addWidget(self.record_tabs)
        split = QSplitter()
        split.addWidget(left)
        split.addWidget(right)
        split.setSizes([620, 780])
        lay = QVBoxLayout(self)
        lay.addWidget(split)
        self.response.point_clicked.connect(lambda i: self.point_list.select_points([i]))
        self.point_list.selection_changed.connect(self.response.select)
        self.set_enabled(False)

    def set_enabled(self, on: bool) -> None:
        for b in (self.accept_button, self.reject_button, self.reacquire_button, self.reacquire_flagged_button,
                  self.reprocess_button, self.export_button, self.compare_button):
            b.setEnabled(on)

    def load(self, run: Any, summary: str = "", notes: tuple[str, ...] = (), amplitude: tuple[str, ...] = ()) -> None:
        """Show a run; ``summary`` is the run's count line as ``review`` prints it, ``notes`` the
        snapshot notes, ``amplitude`` the amplitude-dependence lines of an FDF run (all from
        ``app.services.runs.review``)."""
        self.run = run
        self.thresholds = run_thresholds(run)
        self.points.load_run(run)
        kind = run.kind
        if not summary:
            summary = (f"{len(run.accepted())} of {len(run.points)} points with an accepted attempt, "
                       f"{len(run.flagged_points())} flagged")
        shown = list(run.problems) + list(notes)
        problems = f" — {len(shown)} problem(s): " + "; ".join(shown[:3]) if shown else ""
        amp = "<br>" + "<br>".join(html.escape(line.strip()) for line in amplitude) if amplitude else ""
        self.title.setText(f"<b>{kind} run</b> {run.run_dir} — {summary}{problems}{amp}")
        self.set_enabled(run.index_readable)
        self.attempt_box.clear()
        self.details.clear()
        for i in self.point_list.selected()[:1]:     # the selection survives a reload: show it afresh
            self.show_attempts(i)

    def show_attempts(self, point_index: int) -> None:
        """Figures and decisions of every attempt of one point."""
        if self.run is None:
            return
        lines = [f"<b>Point {point_index + 1}</b>"]
        on_curve = self.points.shown_phase_rad().get(point_index)
        for a in self.run.attempts_of(point_index):
            an = a.get("analysis") or {}
            q = an.get("quality") or {}
            gain, phase = an.get("gain"), an.get("phase_rad")
            if phase is not None and on_curve is not None:     # the branch the curve and the table show
                phase = phase + 2 * math.pi * round((on_curve - phase) / (2 * math.pi))
            res = (f"gain {gain:.4f} ± {an.get('gain_ci95') or math.nan:.4f}, phase "
                   f"{math.degrees(phase):.1f}° ± {math.degrees(an.get('phase_ci95_rad') or math.nan):.1f}° (95 %)"
                   if gain is not None and phase is not None else "no result")
            reason = f" ({a['decision_reason']})" if a.get("decision_reason") else ""
            lines.append(f"<b>attempt {a['seq']}</b> — <b>{a['decision'] or 'not used'}</b>{reason}; drive "
                         f"{format_volts(a['drive_v'])}; {res}; flags: {', '.join(a['flags']) or 'none'}; "
                         f"record {a['record_status']}")
            rows = quality_rows(q, getattr(self, "thresholds", None))
            if rows:
                cells = "".join(
                    f"<tr><td>{r.label}</td><td align='right'>{r.value}</td><td>{r.limit}</td>"
                    f"<td style='color:{'#2E7D32' if r.ok else '#C62828' if r.ok is False else '#555'}'>"
                    f"{'pass' if r.ok else 'FAIL' if r.ok is False else '–'}</td></tr>" for r in rows)
                lines.append("<table cellspacing='0' cellpadding='2'><tr><th align='left'>figure</th><th>value</th>"
                             f"<th>limit</th><th></th></tr>{cells}</table>")
            steps = a.get("tuning") or an.get("tuning") or ()
            if steps:
                lines.append("tuning: " + "; ".join(f"{format_volts(float(d))} → {float(r):.4f}" for d, r, *_ in steps))
        self.details.setHtml("<br>".join(lines))
        atts = self.run.attempts_of(point_index)
        accepted = [k for k, a in enumerate(atts) if a["decision"] == "accepted"]
        blocked = self.attempt_box.blockSignals(True)
        self.attempt_box.clear()
        for a in atts:
            self.attempt_box.addItem(f"point {point_index + 1}, attempt {a['seq']} — {a['decision'] or 'not used'}",
                                     a["attempt_id"])
        if atts:
            self.attempt_box.setCurrentIndex(accepted[-1] if accepted else len(atts) - 1)
        self.attempt_box.blockSignals(blocked)

    def current_attempt(self) -> dict[str, Any] | None:
        """The attempt chosen for the first selected point (by default the accepted one, else the newest)."""
        sel = self.point_list.selected()
        if self.run is None or not sel:
            return None
        atts = self.run.attempts_of(sel[0])
        chosen = self.attempt_box.currentData()
        for a in atts:
            if a["attempt_id"] == chosen:
                return a
        accepted = [a for a in atts if a["decision"] == "accepted"]
        return (accepted or atts or [None])[-1]
