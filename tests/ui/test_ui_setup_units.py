"""The set-up editor judges a file as loading it would: a bare number where a unit is needed is
a problem in the editor too (before, the editor said 'valid' and the sweep then refused it)."""

from __future__ import annotations

from pathlib import Path

from app.ui.views.setup import SetupView

ROOT = Path(__file__).resolve().parents[2]


def test_a_bare_duration_is_a_problem_in_the_editor(qtbot):
    view = SetupView()
    qtbot.addWidget(view)
    view.rig_editor.load(ROOT / "configs" / "demo-rig.toml")
    view.plan_editor.load(ROOT / "configs" / "demo-ftf-plan.toml")
    ed = view.plan_editor
    assert ed.check()                                   # the shipped plan is valid
    ed.editor.setPlainText(ed.text().replace('record = "4 s"', "record = 4"))
    assert not ed.check()
    problems = "\n".join(ed.problems.item(i).text() for i in range(ed.problems.count()))
    assert "timing.record" in problems and "unit" in problems, problems
