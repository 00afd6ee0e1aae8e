"""The set-up form beside the TOML text: a field edit rewrites that value in the text (comments
kept), a bad value shows the loader's message at its key while typing, and a text edit
refreshes the form. The text stays the source of truth: what is saved is the text."""

from __future__ import annotations

import shutil
import tomllib
from pathlib import Path

import pytest

from app.ui.toml_edit import literal, read_values, set_value

CONFIGS = Path(__file__).resolve().parents[2] / "configs"


@pytest.fixture
def setup_view(qtbot, tmp_path: Path):
    from app.ui.views.setup import SetupView

    rig, plan = tmp_path / "rig.toml", tmp_path / "plan.toml"
    shutil.copyfile(CONFIGS / "demo-rig.toml", rig)
    shutil.copyfile(CONFIGS / "demo-ftf-plan.toml", plan)
    view = SetupView()
    qtbot.addWidget(view)
    view.rig_editor.load(rig)
    view.plan_editor.load(plan)
    view.resize(1200, 800)
    view.show()
    return view


def _type(qtbot, edit, text: str) -> None:
    edit.setFocus()
    edit.selectAll()
    qtbot.keyClicks(edit, text)          # textEdited per keystroke, as a person types


def test_form_shows_the_files_values(setup_view) -> None:
    rig_form, plan_form = setup_view.rig_editor.form, setup_view.plan_editor.form
    data = tomllib.loads(setup_view.rig_editor.text())
    assert rig_form.fields["drive.ceiling"].text() == data["drive"]["ceiling"]
    assert rig_form.fields["duct.area_ratio"].text() == str(data["duct"]["area_ratio"])
    plan = tomllib.loads(setup_view.plan_editor.text())
    assert plan_form.fields["tuning.max_steps"].text() == str(plan["tuning"]["max_steps"])
    assert plan_form.fields["amplitude.values"].text() == ", ".join(str(v) for v in plan["amplitude"]["values"])


def test_editing_a_field_rewrites_that_value_and_keeps_comments(qtbot, setup_view) -> None:
    ed = setup_view.rig_editor
    before = ed.text()
    _type(qtbot, ed.form.fields["drive.ceiling"], "1.5 V")
    after = ed.text()
    assert tomllib.loads(after)["drive"]["ceiling"] == "1.5 V"
    assert "# peak, at the amplifier input; from the speaker rating" in after
    changed = [(a, b) for a, b in zip(before.splitlines(), after.splitlines()) if a != b]
    assert len(before.splitlines()) == len(after.splitlines()) and len(changed) == 1, changed
    assert ed.dirty                                     # an edit of the text like any other: save to keep it
    qtbot.waitUntil(lambda: "valid" in ed.status.text(), timeout=3000)


def test_a_bad_value_shows_the_named_error_beside_the_field_while_typing(qtbot, setup_view) -> None:
    ed = setup_view.plan_editor
    field, err = ed.form.fields["tuning.max_steps"], ed.form.errors["tuning.max_steps"]
    _type(qtbot, field, "-3")
    assert tomllib.loads(ed.text())["tuning"]["max_steps"] == -3
    qtbot.waitUntil(lambda: not err.isHidden() and "too small" in err.text(), timeout=3000)
    assert any(p.startswith("tuning.max_steps:") for p in ed.problem_lines)
    assert field.text() == "-3"                          # what was typed stays while its field has focus
    assert ed.form.errors["tuning.tolerance"].isHidden()
    _type(qtbot, field, "6")
    qtbot.waitUntil(lambda: err.isHidden(), timeout=3000)
    assert "valid" in ed.status.text()


def test_text_typed_as_a_string_where_a_unit_value_is_wanted_is_named(qtbot, setup_view) -> None:
    ed = setup_view.rig_editor
    _type(qtbot, ed.form.fields["drive.ceiling"], "two volts")
    err = ed.form.errors["drive.ceiling"]
    qtbot.waitUntil(lambda: not err.isHidden(), timeout=3000)
    assert "two volts" in err.text() and "voltage" in err.text()


def test_editing_the_text_refreshes_the_form(qtbot, setup_view) -> None:
    ed = setup_view.rig_editor
    ed.editor.setFocus()
    ed.editor.setPlainText(ed.text().replace('ramp_time = "0.3 s"', 'ramp_time = "0.7 s"'))
    qtbot.waitUntil(lambda: ed.form.fields["drive.ramp_time"].text() == "0.7 s", timeout=3000)
    ed.editor.setPlainText(ed.text().replace('ramp_time = "0.7 s"', 'ramp_time = "-1 s"'))
    err = ed.form.errors["drive.ramp_time"]
    qtbot.waitUntil(lambda: not err.isHidden() and "too short" in err.text(), timeout=3000)


def test_broken_toml_keeps_the_form_and_says_so(qtbot, setup_view) -> None:
    ed = setup_view.rig_editor
    ed.editor.setPlainText(ed.text() + "\n[drive\n")
    qtbot.waitUntil(lambda: "not valid TOML" in ed.form.status.text(), timeout=3000)
    assert ed.form.fields["drive.ceiling"].text() == "2.0 V"


def test_set_value_adds_a_missing_key_and_table() -> None:
    text = '# top comment\nname = "x"\n\n[drive]\nceiling = "2 V"  # why\n'
    out = set_value(set_value(text, "drive.ramp_time", '"0.3 s"'), "timing.record", '"4 s"')
    assert read_values(out, ["drive.ramp_time", "timing.record", "drive.ceiling"]) == \
        {"drive.ramp_time": "0.3 s", "timing.record": "4 s", "drive.ceiling": "2 V"}
    assert out.startswith("# top comment\n") and "# why" in out


@pytest.mark.parametrize("typed, like, expected", [("3", 8, "3"), ("x", 8, '"x"'), ("0.05, 0.1", [0.05], "[0.05, 0.1]"),
                                                   ('say "hi"', "a", '"say \\"hi\\""')])
def test_literal_keeps_the_kind_of_value(typed: str, like: object, expected: str) -> None:
    assert literal(typed, like) == expected
    assert tomllib.loads(f"k = {expected}")["k"] is not None


def test_lowering_the_rig_ceiling_in_its_form_flags_the_plans_ceiling(qtbot, setup_view) -> None:
    rig, plan = setup_view.rig_editor, setup_view.plan_editor
    _type(qtbot, rig.form.fields["drive.ceiling"], "1.5 V")
    err = plan.form.errors["tuning.ceiling"]
    qtbot.waitUntil(lambda: not err.isHidden(), timeout=3000)          # the plan is checked against the new rig
    assert "above the rig's ceiling 1.5 V" in err.text()
    assert rig.form.errors["drive.ceiling"].isHidden()                 # the rig itself is valid


def test_set_value_finds_a_dotted_key_written_in_a_parent_table() -> None:
    text = 'name = "x"\ndrive.ceiling = "2 V"   # kept\n\n[tuning]\nlimits.max_steps = 8\n'
    out = set_value(set_value(text, "drive.ceiling", '"1 V"'), "tuning.limits.max_steps", "5")
    assert read_values(out, ["drive.ceiling", "tuning.limits.max_steps"]) == \
        {"drive.ceiling": "1 V", "tuning.limits.max_steps": 5}
    assert "# kept" in out and out.count("\n") == text.count("\n")
