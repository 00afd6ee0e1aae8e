"""Safety cautions shown where they matter, short and out of the way: the Set-up note and
checklist (loud sound, speaker burn-out above the ceiling, flames and hydrogen, the
photomultiplier's high voltage, the lab's own rules first), one line above the plots when a
real back-end is chosen (none in rehearsal), and the halt banner's reminder that flamebode
zeroes the drive only. Promise: user guide, "Safety first". The cautions themselves are
common practice for forced-flame rigs (README's safety section)."""

from __future__ import annotations

from app.ui.views.halt_banner import WHAT_TO_DO
from app.ui.views.setup import CHECKLIST, SAFETY_NOTE
from conftest import CONFIGS


def test_setup_note_and_checklist_cover_the_usual_hazards() -> None:
    text = {key: words for key, words in CHECKLIST}
    assert "hydrogen" in text["flame"] and "flash back" in text["flame"]
    assert "photomultiplier" in text["hv"] and "high voltage" in text["hv"].lower()
    assert "hearing protection" in text["hearing"]
    assert "burns out" in text["ceiling"] and "ratings" in text["ceiling"]
    assert "does not replace your laboratory's own safety rules" in SAFETY_NOTE and "follow those first" in SAFETY_NOTE


def test_a_real_back_end_shows_one_caution_line_and_rehearsal_none(qtbot, tiny_plan, tmp_path) -> None:
    from drivers.protocols import Availability
    from drivers.registry import BackendInfo

    from app.ui.window import MainWindow

    infos = [BackendInfo("bench-card", "a card", Availability(True, "found"), "x:Y"),
             BackendInfo("simulated", "sim", Availability(True, "built-in simulator"), "x:Z")]
    win = MainWindow(CONFIGS / "demo-rig.toml", tiny_plan, runs_root=tmp_path / "runs", backend="bench-card",
                     backends=infos)
    qtbot.addWidget(win)
    win.show()
    win.tabs.setCurrentWidget(win.sweep_tab)
    caution = win.caution.text()
    assert win.caution.isVisible()
    assert all(w in caution for w in ("loud", "hearing protection", "ceiling", "ratings", "photomultiplier high voltage",
                                      "zeroes only the drive", "lab's rules come first"))
    assert "REAL HARDWARE" in win.sim_label.text() and "lab" in win.sim_label.toolTip()
    win.setup.backend.setCurrentIndex(1)                     # the simulator: rehearsal, no caution line
    assert not win.caution.isVisible()


def test_the_halt_banner_says_the_flame_fuel_and_detector_stay_live() -> None:
    assert "Fuel, flame and detector supply are not switched off by flamebode" in WHAT_TO_DO
