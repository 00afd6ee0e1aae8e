"""The main window's review actions: open a run, show a point's attempts and record, accept or
reject, reprocess with another rig file, export. A mixin of ``app.ui.window.MainWindow`` (it
uses the window's review view, task runner and controls); split out to keep the window file
about the live sweep.

Everything that reads or writes the run folder runs on the window's worker thread.

Imports: PySide6, the window's bridge types, storage readers and commands (in worker tasks).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from PySide6.QtWidgets import QFileDialog

from .bridge import TaskResult


class ReviewActions:
    def choose_run(self) -> None:
        name = QFileDialog.getExistingDirectory(self, "Open a run folder", self.setup.runs_root.text() or ".")
        if name:
            self.open_review(Path(name))

    def open_review(self, run_dir: Path, show: bool = True) -> None:
        """Load a run into the review tab (read on the worker); ``show`` switches to the tab."""
        from app.storage.reader import open_run

        def done(result: TaskResult) -> None:
            if result.error is None:
                self.review.load(result.value)
                if show:
                    self.tabs.setCurrentWidget(self.review)
                self._update_controls()

        self.tasks.submit("open run", lambda: open_run(run_dir), on_done=done)

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
        run = self.review.run
        att = self.review.current_attempt()
        if run is None or att is None:
            self.review.message.setText("Select a point first.")
            return
        from app.storage import index

        def write() -> int:
            conn = index.connect(Path(run.run_dir) / index.INDEX_NAME, timeout_s=5.0)
            try:
                with conn:
                    return index.decide(conn, att["attempt_id"], accept,
                                        f"{'accepted' if accept else 'rejected'} in the window")
            finally:
                conn.close()

        verb = "accepted" if accept else "rejected"
        self.review.message.setText(f"point {att['point_index'] + 1}: attempt {att['seq']} {verb}")
        self.tasks.submit("decide", write,
                          on_done=lambda r: self.open_review(Path(run.run_dir)) if r.error is None else None)

    def choose_reprocess_rig(self) -> None:
        run = self.review.run
        if run is None:
            return
        name, _ = QFileDialog.getOpenFileName(self, "Rig file to reprocess with", str(run.run_dir),
                                              "TOML files (*.toml)")
        if name:
            self.reprocess(Path(name))

    def reprocess(self, rig_path: Path, points: list[int] | None = None) -> None:
        """New analyses of the run's records with another rig file (raw records only read)."""
        run = self.review.run
        if run is None or self.running():
            return
        import argparse

        from app.commands import reprocess_run

        text = None if not points else ",".join(map(str, points))
        args = argparse.Namespace(run_dir=str(run.run_dir), rig=str(rig_path), points=text)
        self.review.message.setText(f"Reprocessing with {rig_path}…")

        def done(result: TaskResult) -> None:
            if result.error is None:
                self.review.message.setText(f"Reprocessed with {rig_path}.")
                self.open_review(Path(run.run_dir))

        self.tasks.submit("reprocess", lambda: reprocess_run.run(args), on_done=done)

    def export_run(self) -> None:
        run = self.review.run
        if run is None:
            self._say("Open a run first.")
            return
        from app.storage.export import export_run

        def done(result: TaskResult) -> None:
            if result.error is None:
                self.last_export = list(result.value)
                self.review.message.setText("Exported: " + ", ".join(p.name for p in result.value) +
                                            f" in {result.value[0].parent}")

        self.review.message.setText("Exporting…")
        self.tasks.submit("export", lambda: export_run(run.run_dir), on_done=done)

    @staticmethod
    def _simulated_run(run: Any) -> bool:
        return (run.info.get("backend", "simulated") or "simulated").startswith("sim")

