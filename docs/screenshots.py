"""Screenshots of the window for the user guide: docs/setup.png, sweep.png, fault.png, review.png.

Runs the window offscreen (QT_QPA_PLATFORM=offscreen unless a platform is set; under
``xvfb-run`` the real X platform is used), drives short sweeps on the simulated burner
(faster than real time) and saves ``QWidget.grab()`` of the window. Runs go to a
temporary folder. Usage: ``python docs/screenshots.py [--out docs]``.

Imports: PySide6 and the app's window.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"
SIZE = (1400, 900)


def _wait(app, cond, timeout_s: float = 120.0) -> None:
    """Run the event loop until ``cond()`` holds (the window stays responsive meanwhile)."""
    from PySide6.QtCore import QEventLoop

    end = time.monotonic() + timeout_s
    while not cond():
        if time.monotonic() > end:
            raise TimeoutError("the window did not reach the expected state in time")
        app.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 30)


def _settle(app, seconds: float = 0.3) -> None:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        app.processEvents()


def _fault_scenario(folder: Path) -> Path:
    text = (CONFIGS / "demo-scenario.toml").read_text(encoding="utf-8")
    text = text.replace('rig = "demo-rig.toml"', f'rig = "{CONFIGS / "demo-rig.toml"}"')
    text = text[:text.index("[faults]")] + '[faults]\nflame_out = { enabled = true, time = "27 s" }\n'
    path = folder / "flame-out-scenario.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _window(runs: Path, scenario: Path | None = None):
    from app.ui.window import MainWindow

    win = MainWindow(CONFIGS / "demo-rig.toml", CONFIGS / "demo-ftf-plan.toml", runs_root=runs, fast=True,
                     scenario_path=scenario)
    win.resize(*SIZE)
    win.show()
    return win


def _save(win, path: Path) -> None:
    if not win.grab().save(str(path)):
        raise SystemExit(f"could not write {path}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(ROOT / "docs"))
    out = Path(parser.parse_args(argv).out)
    out.mkdir(parents=True, exist_ok=True)
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication(sys.argv[:1])
    with tempfile.TemporaryDirectory() as tmp:
        runs = Path(tmp) / "runs"
        win = _window(runs)
        # set-up: the plan editor with a mistake, its problem listed beside it
        win.setup.files.setCurrentIndex(1)
        ed = win.setup.plan_editor
        ed.editor.setPlainText(ed.text().replace('record = "4 s"', 'record = "4 sec"'))
        ed.check()
        _settle(app)
        _save(win, out / "setup.png")
        ed.load(ed.path)                                # back to the saved text
        # sweep: part-way through, the truth overlay on
        win.start_sweep()
        win.response.truth_box.setChecked(True)
        _wait(app, lambda: win.points.n_done >= 9 and win.status.state == "tuning"
              and len(win.tuning.amp_curve.getData()[0] if win.tuning.amp_curve.getData()[0] is not None else []) >= 2)
        _save(win, out / "sweep.png")       # at once: the views show that state now
        _wait(app, lambda: win.sweeps_closed >= 1 and win.review.run is not None)
        # review: one point selected, its record and figures shown
        win.tabs.setCurrentWidget(win.review)
        win.review.point_list.select_points([6])
        _wait(app, lambda: "p1" in win.review.record.curves)
        _settle(app, 0.5)
        _save(win, out / "review.png")
        win.close()
        # fault: the flame blows out part-way through
        win = _window(runs, _fault_scenario(Path(tmp)))
        win.start_sweep()
        _wait(app, lambda: win.sweeps_closed >= 1)
        _settle(app)
        _save(win, out / "fault.png")
        win.close()
        from PySide6.QtCore import QEvent

        app.sendPostedEvents(None, QEvent.Type.DeferredDelete)
    for name in ("setup", "sweep", "fault", "review"):
        print(f"wrote {out / (name + '.png')}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
