"""The main window's review actions: open a run, show a point's attempts and record, accept or
reject, reprocess with another rig file, export. A mixin of ``app.ui.window.MainWindow`` (it
uses the window's review view, task runner and controls); split out to keep the window file
about the live sweep.

Everything that reads or writes the run folder runs on the window's worker thread, and every
operation is the run service the command line uses too (``app.services``: ``runs.open_run``,
``decisions.decide``, ``reprocess.reprocess``, ``export.export``, ``export.compare``,
``reacquire.prepare``); the
window never opens the index or builds a command's arguments.

Imports: PySide6, the window's bridge types and ``app.services``. Never ``app.storage`` or
``app.commands``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from PySide6.QtWidgets import QFileDialog

from app.services import decisions, export, reacquire, reprocess, runs
from app.services.types import (Choice, CompareRequest, DecideRequest, ExportRequest, ReacquirePlan,
                                ReacquireRequest, ReprocessRequest)

from .bridge import TaskResult


class ReviewActions:
    def choose_run(self) -> None:
        name = QFileDialog.getExistingDirectory(self, "Open a run folder", self.setup.runs_root.text() or ".")
        if name:
            self.open_review(Path(name))

    def open_review(self, run_dir: Path, show: bool = True) -> None:
        """Load a run into the review tab (``app.services.runs.review`` on the worker, as the
        ``review`` command reads it); ``show`` switches to the tab."""
        def done(result: TaskResult) -> None:
            if result.error is None:
                rv = result.value
                self.review.load(rv.run, rv.counts_text, tuple(n.text for n in rv.snapshot_notes if not n.accepted),
                                 rv.amplitude_lines)
                if show:
                    self.tabs.setCurrentWidget(self.review)
                self._update_controls()

        self.tasks.submit("open run", lambda: runs.review(run_dir), on_done=done)

    def _review_selected(self, indices: list[int]) -> None:
        if not indices or self.review.run is None:
            return
        self.review.show_attempts(indices[0])
        self._show_review_record()

    def _show_review_record(self) -> None:
        att = self.review.current_attempt()
        if att is None or att["record_status"] != "ok":
            return
        run = self.review.run

        def done(result: TaskResult) -> None:
            if result.error is None and self.review.run is run:
                rec = result.value
                scales = self._pascal_per_volt(rec)
                self.review.record.set_scales(scales)
                self.review.record.show_record(rec.data, rec.channels, rec.sample_rate_hz, self._roles_of(rec))
                factor = [scales.get(c, 1.0) for c in rec.channels]
                self.review.spectrum.show_record(rec.data * np.array(factor)[:, None], rec.channels,
                                                 rec.sample_rate_hz, rec.freq_hz,
                                                 {c: "Pa" for c in scales})

        self.tasks.submit("read record", lambda: run.read_record(att["attempt_id"]), on_done=done)

    @classmethod
    def _pascal_per_volt(cls, rec: Any) -> dict[str, float]:
        sens = rec.attrs.get("channel_sensitivity_v_per_unit")
        roles = cls._roles_of(rec)
        if sens is None or len(list(sens)) != len(rec.channels):
            return {}
        return {c: 1.0 / float(v) for c, v in zip(rec.channels, list(sens)) if roles.get(c) == "pressure" and float(v) > 0}

    @staticmethod
    def _roles_of(rec: Any) -> dict[str, str]:
        roles = rec.attrs.get("channel_roles")
        names = {"pressure": "pressure", "light": "light", "drive_reference": "drive"}
        if isinstance(roles, (list, tuple)) or hasattr(roles, "tolist"):
            return {c: names.get(str(r), "other") for c, r in zip(rec.channels, list(roles))}
        return {}

    def decide(self, accept: bool) -> None:
        """Accept or reject the selected attempt (``app.services.decisions.decide``, as ``accept``)."""
        run = self.review.run
        att = self.review.current_attempt()
        if run is None or att is None:
            self.review.message.setText("Select a point first.")
            return
        verb = "accepted" if accept else "rejected"
        by_number = isinstance(att.get("seq"), int)        # a run rebuilt from its records may lack numbers
        req = DecideRequest(run_dir=Path(run.run_dir),
                            choices=(Choice(att["point_index"] + 1, att["seq"]),) if by_number else (),
                            attempt_ids=() if by_number else (att["attempt_id"],),
                            accept=accept, reason=f"{verb} in the window")

        def done(result: TaskResult) -> None:
            if result.error is None:
                d = result.value[0]
                self.review.message.setText(f"point {d.point}: attempt {d.label} {d.verb}")
                self.open_review(Path(run.run_dir))

        self.review.message.setText(f"point {att['point_index'] + 1}: attempt {att['seq']} {verb}…")
        self.tasks.submit("decide", lambda: decisions.decide(req), on_done=done)

    def reacquire(self, indices: list[int]) -> bool:
        """Measure points of the reviewed run again (new attempts; old ones kept): the choice is
        checked by ``app.services.reacquire.prepare`` on the worker, then the sweep starts."""
        run = self.review.run
        if self.running() or run is None or not indices:
            self.review.message.setText("Select the points to re-acquire first." if not indices else
                                        "A sweep is running.")
            return False
        if not self._simulated_run(run) and not self.setup.checklist_done():
            self._say("Tick every item of the safety checklist (Set-up) before forcing on real hardware.")
            return False
        req = ReacquireRequest(run_dir=Path(run.run_dir), point_indices=tuple(sorted(indices)))

        def done(result: TaskResult) -> None:
            if result.error is None and not self.running():
                self._launch_reacquire(run, result.value)

        self.review.message.setText(f"Re-acquiring point(s) {', '.join(str(i + 1) for i in sorted(indices))}…")
        self.tasks.submit("reacquire", lambda: reacquire.prepare(req), on_done=done)
        return True

    def _launch_reacquire(self, run: Any, plan: ReacquirePlan) -> None:
        self.reset_live_view()
        self.points.load_run(run)
        req = self._request(points=list(plan.point_indices), run_dir=plan.run_dir, existing=True)
        req.rig_path, req.plan_path, req.backend = plan.rig_path, plan.plan_path, plan.backend
        self._launch(req)

    def choose_reprocess_rig(self) -> None:
        run = self.review.run
        if run is None:
            return
        name, _ = QFileDialog.getOpenFileName(self, "Rig file to reprocess with", str(run.run_dir),
                                              "TOML files (*.toml)")
        if name:
            self.reprocess(Path(name))

    def reprocess(self, rig_path: Path, points: list[int] | None = None) -> None:
        """New analyses of the run's records with another rig file (raw records only read);
        ``points`` are plan indices from 0 (None: every point)."""
        run = self.review.run
        if run is None or self.running():
            return
        req = ReprocessRequest(run_dir=Path(run.run_dir), rig_path=Path(rig_path),
                               point_indices=None if not points else tuple(points))
        self.review.message.setText(f"Reprocessing with {rig_path}…")

        def done(result: TaskResult) -> None:
            if result.error is None:
                res = result.value
                skipped = f"; {len(res.not_done)} not reprocessed ({', '.join(o.where for o in res.not_done)})" \
                    if res.not_done else ""
                self.review.message.setText(f"Reprocessed {res.n_done} attempt(s) with {rig_path}{skipped}.")
                self.open_review(Path(run.run_dir))

        self.tasks.submit("reprocess", lambda: reprocess.reprocess(req), on_done=done)

    def export_run(self) -> None:
        run = self.review.run
        if run is None:
            self._say("Open a run first.")
            return

        def done(result: TaskResult) -> None:
            if result.error is None:
                paths = result.value.paths
                self.last_export = list(paths)
                self.review.message.setText("Exported: " + ", ".join(p.name for p in paths) +
                                            f" in {paths[0].parent}; {result.value.counts_text}")

        self.review.message.setText("Exporting…")
        self.tasks.submit("export", lambda: export.export(ExportRequest(run_dir=Path(run.run_dir))), on_done=done)

    def choose_compare(self) -> None:
        run = self.review.run
        if run is None:
            return
        name = QFileDialog.getExistingDirectory(self, "Run folder to compare with", str(Path(run.run_dir).parent))
        if name:
            self.compare_with([Path(name)])

    def compare_with(self, others: list[Path]) -> None:
        """The reviewed run and ``others`` on one figure in RUN/export (``app.services.export.compare``)."""
        run = self.review.run
        if run is None:
            return
        dirs = (Path(run.run_dir), *others)

        def draw() -> Any:
            return export.compare(CompareRequest(run_dirs=dirs, out=export.compare_figure_in(run.run_dir)))

        def done(result: TaskResult) -> None:
            if result.error is None:
                self.last_compare = result.value.figure
                self.review.message.setText(f"Compared {len(dirs)} runs: {result.value.figure}")

        self.review.message.setText("Comparing…")
        self.tasks.submit("compare", draw, on_done=done)

    @staticmethod
    def _simulated_run(run: Any) -> bool:
        return (run.info.get("backend", "simulated") or "simulated").startswith("sim")

