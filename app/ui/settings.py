"""What the window remembers between launches, through Qt's own settings store (QSettings).

Remembered: the window's geometry, every named splitter, the open tab, the chosen back-end,
the simulator's scenario and fast option, and the last run (opened in the review tab, not
switched to). Never remembered: the pre-run safety checklist (every session ticks it anew)
and anything that would start a sweep. What the command line names explicitly wins over
what was remembered. A remembered back-end that is not available here falls back to the
simulated burner, and a remembered run folder that is gone is ignored.

Where Qt keeps it: ``~/.config/flamebode/flamebode.ini`` on Linux (``$XDG_CONFIG_HOME``
if set), or the file named by ``FLAMEBODE_SETTINGS`` (tests give each test its own).
Imports: PySide6 only (and the window it is given).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from PySide6.QtCore import QSettings
from PySide6.QtWidgets import QSplitter

ORGANISATION = APPLICATION = "flamebode"


ENV = "FLAMEBODE_SETTINGS"


def store() -> QSettings:
    if os.environ.get(ENV):
        return QSettings(os.environ[ENV], QSettings.Format.IniFormat)
    return QSettings(QSettings.Format.IniFormat, QSettings.Scope.UserScope, ORGANISATION, APPLICATION)


def _splitters(win: Any) -> dict[str, QSplitter]:
    return {s.objectName(): s for s in win.findChildren(QSplitter) if s.objectName()}


def save(win: Any) -> None:
    s = store()
    s.setValue("window/geometry", win.saveGeometry())
    for name, splitter in _splitters(win).items():
        s.setValue(f"splitters/{name}", splitter.saveState())
    s.setValue("window/tab", win.tabs.currentIndex())
    s.setValue("setup/backend", win.setup.backend_name())
    s.setValue("setup/scenario", win.setup.scenario.text())
    s.setValue("setup/fast", bool(win.setup.fast.isChecked()))
    if win.last_run_dir is not None:
        s.setValue("review/last_run", str(win.last_run_dir))
    s.sync()


def restore(win: Any, explicit: set[str] = frozenset()) -> None:
    """Apply what was remembered; names in ``explicit`` ("backend", "fast", "run") were given on
    the command line and are left as they are."""
    s = store()
    geometry = s.value("window/geometry")
    if geometry is not None:
        win.restoreGeometry(geometry)
    for name, splitter in _splitters(win).items():
        state = s.value(f"splitters/{name}")
        if state is not None:
            splitter.restoreState(state)
    tab = s.value("window/tab")
    if tab is not None and 0 <= int(tab) < win.tabs.count():
        win.tabs.setCurrentIndex(int(tab))
    if "backend" not in explicit:
        name = s.value("setup/backend")
        names = [i.name for i in win.setup.backends if i.availability.available]
        if name in names:
            win.setup.backend.setCurrentIndex([i.name for i in win.setup.backends].index(name))
    if "scenario" not in explicit and s.value("setup/scenario") is not None:
        win.setup.scenario.setText(str(s.value("setup/scenario")))
    if "fast" not in explicit and s.value("setup/fast") is not None:
        win.setup.fast.setChecked(str(s.value("setup/fast")).lower() in ("true", "1"))
    last = s.value("review/last_run")
    if "run" not in explicit and last and (Path(str(last)) / "index.sqlite").is_file():
        win.last_run_dir = Path(str(last))
        win.open_review(Path(str(last)), show=False)
