"""The emergency halt as the operator meets it: always visible (a window docked to half a
1920 px screen, 760 px wide, has the whole button, never in an overflow menu), a red banner
after a halt, live traces marked as not live once no signal comes, and the keys: F12 from
anywhere in the application (a modal dialog too), Esc in the main window only (in a dialog
it closes the dialog).

Promises: user guide, "The controls" and "Keys, signals and closing the window". Common
practice for machine controls: the stop is one visible press away, whatever else is open.
Screenshots of the narrow window are saved (in FLAMEBODE_TEST_SHOTS when set, else in the
test's tmp_path) to be looked at.
"""

from __future__ import annotations

import os
from pathlib import Path

from PySide6.QtCore import QPoint, QRect, Qt
from PySide6.QtWidgets import QApplication, QDialog, QFileDialog, QLineEdit, QMenu, QToolBar, QVBoxLayout, QWidget

from app.storage.reader import open_run
from app.ui.views.style import STOPPED_PEN

LONG_MS = 60_000
HALF_SCREEN_W = 760


def _shot(win: QWidget, tmp_path: Path, name: str) -> Path:
    folder = Path(os.environ.get("FLAMEBODE_TEST_SHOTS") or tmp_path)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / name
    assert win.grab().save(str(path))
    return path


def _assert_halt_whole_and_on_top(win) -> None:
    b = win.halt_button
    assert b.isVisible() and b.isEnabled()
    rect = QRect(b.mapTo(win, QPoint(0, 0)), b.size())
    assert win.rect().contains(rect), (rect, win.rect())
    assert b.width() >= b.sizeHint().width() and b.height() >= b.sizeHint().height()   # not squeezed
    assert win.childAt(rect.center()) is b                                           # nothing covers it
    w = b.parentWidget()
    while w is not None:
        assert not isinstance(w, (QToolBar, QMenu)), w
        w = w.parentWidget()


def _assert_tab_not_clipped(win) -> None:
    page = win.tabs.currentWidget()
    need = page.minimumSizeHint()
    assert page.width() >= need.width() and page.height() >= need.height(), (win.tabs.tabText(
        win.tabs.currentIndex()), page.size(), need)


def test_halt_is_whole_and_visible_in_a_760_px_window_on_every_tab(qtbot, make_window, tiny_plan, tmp_path) -> None:
    win = make_window(tiny_plan)
    win.resize(HALF_SCREEN_W, 640)
    qtbot.waitExposed(win)
    assert win.width() == HALF_SCREEN_W and win.minimumWidth() <= HALF_SCREEN_W
    assert not win.findChildren(QToolBar)                 # no tool bar, so no overflow menu
    for i in range(win.tabs.count()):
        win.tabs.setCurrentIndex(i)
        qtbot.wait(20)
        _assert_halt_whole_and_on_top(win)
        _assert_tab_not_clipped(win)
    win.tabs.setCurrentWidget(win.sweep_tab)
    _shot(win, tmp_path, "window-760-ready.png")


def test_at_its_minimum_size_the_window_clips_nothing(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan)
    win.resize(100, 100)                                   # the window keeps its minimum size
    qtbot.waitExposed(win)
    assert (win.width(), win.height()) == (win.minimumWidth(), win.minimumHeight())
    assert 700 <= win.minimumWidth() <= HALF_SCREEN_W and win.minimumHeight() <= 600
    for i in range(win.tabs.count()):
        win.tabs.setCurrentIndex(i)
        qtbot.wait(20)
        _assert_halt_whole_and_on_top(win)
        _assert_tab_not_clipped(win)


def _running(qtbot, win) -> None:
    win.start_sweep()
    qtbot.waitUntil(lambda: win.status.state == "tuning" and win.status.drive_v > 0 and win.traces.frames > 2,
                    timeout=LONG_MS)


def test_halt_button_zeroes_shows_the_red_banner_and_marks_the_traces_not_live(qtbot, make_window, tiny_plan,
                                                                              tmp_path) -> None:
    win = make_window(tiny_plan, fast=False)
    win.resize(HALF_SCREEN_W, 700)
    _running(qtbot, win)
    assert not win.halt_banner.isVisible() and not win.traces.stopped_text
    qtbot.mouseClick(win.halt_button, Qt.MouseButton.LeftButton)
    assert win.halt_banner.isVisible()                     # at once, on every tab
    assert win.halt_banner.title.text().startswith("HALTED: outputs zeroed")
    qtbot.waitUntil(lambda: win.sweeps_closed >= 1, timeout=LONG_MS)
    assert win.status.finish_reason == "halted"
    status = win.session.device.drive_status()
    assert status.amplitude_v == 0.0 and status.target_amplitude_v == 0.0
    info = open_run(win.last_run_dir).info
    assert info["last_finish_reason"] == "halted" and info["last_finish_detail"] == "emergency halt in the window"
    advice = win.halt_banner.advice.text()
    assert "stays off until the next Start" in advice and "lab's procedure" in advice
    # the traces hold the last frame: grey, with a label saying they are not live
    assert win.traces.stopped_text.startswith("stopped — not live") and "halted" in win.traces.stopped_text
    assert win.traces.overlay.isVisible() and win.traces.overlay.text() == win.traces.stopped_text
    assert win.traces.curves and all(c.opts["pen"].color().name().upper() == STOPPED_PEN
                                     for c in win.traces.curves.values())
    for i in range(win.tabs.count()):
        win.tabs.setCurrentIndex(i)
        assert win.halt_banner.isVisible()
    win.tabs.setCurrentWidget(win.sweep_tab)
    qtbot.wait(100)
    _shot(win, tmp_path, "window-760-halted.png")
    # a new sweep: banner gone, traces live (coloured) again; an abort marks them stopped, no banner
    _running(qtbot, win)
    assert not win.halt_banner.isVisible() and not win.traces.stopped_text and not win.traces.overlay.isVisible()
    assert any(c.opts["pen"].color().name().upper() != STOPPED_PEN for c in win.traces.curves.values())
    win.abort_sweep()
    qtbot.waitUntil(lambda: win.sweeps_closed >= 2, timeout=LONG_MS)
    assert "aborted" in win.traces.stopped_text and not win.halt_banner.isVisible()


def _active(qtbot, w: QWidget) -> None:
    w.activateWindow()
    qtbot.waitUntil(lambda: QApplication.activeWindow() is w, timeout=5000)


def test_f12_halts_while_a_modal_dialog_has_focus(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan, fast=False)
    _running(qtbot, win)
    dlg = QFileDialog(win, "Open a run folder")           # the window's own kind of dialog
    dlg.setOption(QFileDialog.Option.DontUseNativeDialog)
    dlg.setModal(True)                                   # Qt blocks ordinary shortcuts behind it
    dlg.show()
    _active(qtbot, dlg)
    qtbot.keyClick(QApplication.focusWidget() or dlg, Qt.Key.Key_F12)
    qtbot.waitUntil(lambda: win.sweeps_closed >= 1, timeout=LONG_MS)
    assert win.status.finish_reason == "halted"
    assert win.session.device.drive_status().amplitude_v == 0.0
    assert dlg.isVisible()                               # F12 halts; it does not close the dialog
    dlg.reject()


def test_esc_closes_a_dialog_without_halting_and_halts_in_the_main_window(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan, fast=False)
    _running(qtbot, win)
    dlg = QDialog(win)
    edit = QLineEdit(dlg)
    QVBoxLayout(dlg).addWidget(edit)
    dlg.show()
    _active(qtbot, dlg)
    edit.setFocus()
    qtbot.keyClick(edit, Qt.Key.Key_Escape)
    assert not dlg.isVisible()
    qtbot.wait(300)
    assert win.running() and win.session.halt_why is None and win.status.state not in ("halted",)
    _active(qtbot, win)
    qtbot.keyClick(win.tabs, Qt.Key.Key_Escape)           # focus anywhere in the main window
    qtbot.waitUntil(lambda: win.sweeps_closed >= 1, timeout=LONG_MS)
    assert win.status.finish_reason == "halted"


def test_halt_keys_with_no_sweep_only_say_so(qtbot, make_window, tiny_plan) -> None:
    win = make_window(tiny_plan)
    _active(qtbot, win)
    for key in (Qt.Key.Key_F12, Qt.Key.Key_Escape):
        qtbot.keyClick(win, key)
        assert win.statusBar().currentMessage() == "No sweep is running: nothing is driven."
    assert win.session is None and not win.halt_banner.isVisible()
