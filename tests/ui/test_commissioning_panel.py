"""The Commissioning tab runs the checks of ``flamebode commission`` on the simulated burner: each
check lands in the rig's commissioning record and the panel shows the numbers the record holds;
the dark offset goes into the rig file when asked (and the rig editor shows it); bad entries, an
unreadable table and a corrupt record are said in the panel and store nothing; the buttons wait
while a sweep or a check runs; the drive is never asked for anything; the window and the command
line store the same result for the same seed.
"""

from __future__ import annotations

import html
from pathlib import Path

import numpy as np
import pytest

from app.commissioning_record import read_record, record_path_for
from app.rig import load_rig
from app.ui.views.commissioning import result_rows

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def rig_copy(tmp_path: Path) -> Path:
    p = tmp_path / "rig.toml"
    p.write_text((ROOT / "configs" / "demo-rig.toml").read_text(encoding="utf-8"), encoding="utf-8")
    return p


@pytest.fixture
def panel_window(qtbot, tmp_path: Path, rig_copy: Path, tiny_plan: Path):
    from app.ui.window import MainWindow

    win = MainWindow(rig_copy, tiny_plan, runs_root=tmp_path / "runs", fast=True)
    qtbot.addWidget(win)
    win.show()
    win.tabs.setCurrentWidget(win.commissioning)
    win.commissioning.duration.setText("0.5 s")
    _settle(qtbot, win)
    return win


def _settle(qtbot, win) -> None:
    """Until the check and the status read after it are done (worker results delivered)."""
    qtbot.waitUntil(lambda: not win.commissioning.busy and not win.tasks.busy, timeout=120_000)


def _run(qtbot, win, click) -> None:
    click()
    _settle(qtbot, win)


def _said(panel) -> str:
    """The panel's message line as the operator reads it (its rich text unescaped)."""
    return html.unescape(panel.message.text())


def _newest(rig: Path):
    return read_record(record_path_for(rig)).checks[-1]


def _shows_the_record(panel, rig: Path, kind: str) -> None:
    stored = _newest(rig)
    assert stored.kind == kind, _said(panel)
    assert panel.last_outcome is not None and panel.last_outcome.check == stored
    assert panel.shown_results() == dict(result_rows(kind, stored.result))


@pytest.mark.timeout(240)
def test_every_check_runs_from_the_window_and_shows_what_the_record_holds(qtbot, panel_window, rig_copy, tmp_path):
    win, panel = panel_window, panel_window.commissioning
    assert "no dark offset" in win.setup.commissioning.text()
    # dark offset, written into the rig file
    panel.update_rig.setChecked(True)
    _run(qtbot, win, panel.dark_button.click)
    _shows_the_record(panel, rig_copy, "dark-offset")
    dark = _newest(rig_copy)
    assert panel.shown_results()["dark offset"] == f"{dark.result['mean_v'] * 1e3:.6g} mV"
    assert load_rig(rig_copy).light.dark_offset == pytest.approx(dark.result["mean_v"], rel=1e-5)
    assert f"measured by flamebode commission dark, {dark.date}" in rig_copy.read_text(encoding="utf-8")
    assert "dark_offset = " in win.setup.rig_editor.text() and not win.setup.rig_editor.dirty   # the editor follows
    assert "dark offset" not in win.setup.commissioning.text()        # the set-up tab's reminder follows
    # three light steps and the linearity fit
    for kw in ("3 kW", "4000 W", "5 kW"):
        panel.power.setText(kw)
        _run(qtbot, win, panel.step_button.click)
        _shows_the_record(panel, rig_copy, "light-step")
    assert _newest(rig_copy).result["power_w"] == pytest.approx(5e3)
    _run(qtbot, win, panel.linearity_button.click)
    _shows_the_record(panel, rig_copy, "light-linearity")
    lin = _newest(rig_copy).result
    assert lin["n_steps"] == 3 and panel.state is not None
    assert panel.state.linearity_kw == pytest.approx((3.0, 4.0, 5.0))
    assert panel.state.linearity_dev_pct == pytest.approx([100 * d for d in lin["deviation_rel"]])
    # two lamp positions and the uniformity summary
    for pos in ("centre", "r=10 mm z=20 mm"):
        panel.position.setText(pos)
        _run(qtbot, win, panel.lamp_button.click)
        _shows_the_record(panel, rig_copy, "light-uniformity")
    _run(qtbot, win, panel.uniformity_button.click)
    _shows_the_record(panel, rig_copy, "light-uniformity")
    assert _newest(rig_copy).result["stage"] == "summary" and panel.state.lamp_labels == ("centre", "r=10 mm z=20 mm")
    # King's law from a table (a synthetic one, known A, B, n: our own numbers)
    U = np.linspace(0.5, 10.0, 8)
    E = np.sqrt(1.6 + 0.9 * U ** 0.47)
    table = tmp_path / "wire.csv"
    table.write_text("voltage_v,velocity_m_s\n" + "".join(f"{e:.6f},{u:.4f}\n" for e, u in zip(E, U)))
    panel.table.setText(str(table))
    _run(qtbot, win, panel.hot_wire_button.click)
    _shows_the_record(panel, rig_copy, "hot-wire")
    assert _newest(rig_copy).result["n"] == pytest.approx(0.47, rel=1e-3)
    # the status: what was checked when, and what is still to do
    rows = {panel.status_table.item(i, 0).text(): panel.status_table.item(i, 1).text()
            for i in range(panel.status_table.rowCount())}
    record = read_record(record_path_for(rig_copy))
    assert rows["dark offset"] == record.latest("dark-offset").date
    assert rows["hot-wire King's law"] == record.latest("hot-wire").date
    assert rows["pressure-sensor calibration"] == "never"
    assert "calibration of the pressure sensors" in panel.to_do.text()
    assert [c.kind for c in record.checks].count("light-step") == 3 and len(record.checks) == 9


@pytest.mark.timeout(240)
def test_the_drive_is_never_asked_for_anything(qtbot, panel_window, rig_copy, monkeypatch):
    import drivers.registry as registry

    asked: list[tuple] = []
    real_open = registry.open_backend

    def spying_open(name, rig, **options):
        device = real_open(name, rig, **options)
        for method in ("set_drive", "set_multisine", "arm"):
            if hasattr(device, method):
                monkeypatch.setattr(device, method, lambda *a, _m=method, **k: asked.append((_m, a, k)))
        return device

    monkeypatch.setattr(registry, "open_backend", spying_open)
    win, panel = panel_window, panel_window.commissioning
    _run(qtbot, win, panel.dark_button.click)
    panel.power.setText("4 kW")
    _run(qtbot, win, panel.step_button.click)
    panel.position.setText("centre")
    _run(qtbot, win, panel.lamp_button.click)
    assert [c.kind for c in read_record(record_path_for(rig_copy)).checks] == ["dark-offset", "light-step",
                                                                              "light-uniformity"]
    assert asked == []


@pytest.mark.timeout(240)
def test_bad_entries_are_named_in_the_panel_and_store_nothing(qtbot, panel_window, rig_copy, tmp_path):
    win, panel = panel_window, panel_window.commissioning
    _run(qtbot, win, panel.dark_button.click)
    record_file = record_path_for(rig_copy)
    kept = record_file.read_bytes()
    rig_text = rig_copy.read_text(encoding="utf-8")

    def refused(click, *words: str) -> None:
        _run(qtbot, win, click)
        text = _said(panel)
        assert all(w in text for w in words), text
        assert "Traceback" not in text and panel.shown_results() == {}
        assert record_file.read_bytes() == kept and rig_copy.read_text(encoding="utf-8") == rig_text

    for power, words in (("", ("Thermal power", "empty")), ("4 kilo", ("'4 kilo'", "kW")), ("4", ("'4'",)),
                         ("-2 kW", ("more than 0 W",))):
        panel.power.setText(power)
        refused(panel.step_button.click, *words)
    panel.power.setText("4 kW")
    panel.duration.setText("forever")
    refused(panel.step_button.click, "Recording length", "forever")
    panel.duration.setText("0.5 s")
    panel.position.setText("  ")
    refused(panel.lamp_button.click, "Lamp position", "empty")
    refused(panel.linearity_button.click, "0 light step(s) since the newest dark offset", "Record light step")
    panel.table.setText("")
    refused(panel.hot_wire_button.click, "Calibration table")
    panel.table.setText(str(tmp_path / "missing.csv"))
    refused(panel.hot_wire_button.click, "missing.csv", "cannot be read")
    bad = tmp_path / "bad.csv"
    bad.write_text("voltage_v,velocity_m_s\n1.0,2\nx,3\n")
    panel.table.setText(str(bad))
    refused(panel.hot_wire_button.click, "bad.csv, line 3", "not two numbers")
    binary = tmp_path / "binary.csv"
    binary.write_bytes(b"\xff\xfe\x00\x81garbage")
    panel.table.setText(str(binary))
    refused(panel.hot_wire_button.click, "binary.csv")
    # an unsaved rig editor: the checks read the saved file, so they wait for a save
    win.setup.rig_editor.editor.appendPlainText("# edited")          # as typed: the editor is unsaved
    assert win.setup.rig_editor.dirty
    refused(panel.dark_button.click, "Save the rig file first")
    win.setup.rig_editor.load(rig_copy)
    # a corrupt record: named, nothing recorded, the file left as it was
    corrupt = kept.replace(b'kind = "dark-offset"', b'kind = "lunch"')
    record_file.write_bytes(corrupt)
    kept = corrupt
    panel.update_rig.setChecked(True)
    refused(panel.dark_button.click, "check 1", "lunch")
    assert "cannot be read" in panel.status_caption.text() and panel.status_table.rowCount() == 0
    record_file.write_bytes(b"format = 'flamebode-commissioning'\nformat_version = 1\n[[check]\n")
    kept = record_file.read_bytes()
    refused(panel.uniformity_button.click, str(record_file.name))


@pytest.mark.timeout(240)
def test_the_buttons_wait_while_a_sweep_or_a_check_runs(qtbot, panel_window):
    win, panel = panel_window, panel_window.commissioning
    # a check running: the other checks and Start wait; Stop recording is offered
    panel.duration.setText("2 s")
    panel.dark_button.click()
    assert panel.busy and not any(b.isEnabled() for b in panel.buttons)
    assert panel.stop_button.isEnabled() and not win.start_action.isEnabled()
    _settle(qtbot, win)
    assert all(b.isEnabled() for b in panel.buttons) and win.start_action.isEnabled()
    # a sweep running: every check waits until it has ended
    assert win.start_sweep()
    assert not any(b.isEnabled() for b in panel.buttons)
    panel.record_dark()                       # asked anyway (a shortcut, a script): refused in words
    assert "A sweep is running" in _said(panel) and not panel.busy
    qtbot.waitUntil(lambda: win.sweeps_closed >= 1, timeout=120_000)
    assert all(b.isEnabled() for b in panel.buttons) and "The sweep has ended" in _said(panel)


@pytest.mark.timeout(240)
def test_stop_recording_ends_the_check_and_stores_nothing(qtbot, panel_window, rig_copy):
    win, panel = panel_window, panel_window.commissioning
    win.setup.fast.setChecked(False)          # real time: the recording is still running when stopped
    panel.duration.setText("20 s")
    panel.dark_button.click()
    qtbot.wait(300)
    panel.stop_button.click()
    _settle(qtbot, win)
    assert "stopped in the window: stopped, nothing recorded" in _said(panel)
    assert read_record(record_path_for(rig_copy)).checks == ()
    panel.dark_button.click()                 # the emergency halt ends a recording too
    qtbot.wait(300)
    win.halt_button.click()
    _settle(qtbot, win)
    assert "emergency halt in the window: stopped, nothing recorded" in _said(panel)
    assert read_record(record_path_for(rig_copy)).checks == ()


@pytest.mark.timeout(300)
def test_the_window_and_the_command_line_store_the_same_dark_offset_for_the_same_seed(qtbot, panel_window, rig_copy,
                                                                                    tmp_path):
    from run_watch import run_cli

    win, panel = panel_window, panel_window.commissioning
    scenario = tmp_path / "scenario.toml"                       # the tiny plan's scenario, given to both
    win.setup.scenario.setText(str(scenario))
    panel.seed = 7
    _run(qtbot, win, panel.dark_button.click)
    from_window = _newest(rig_copy)
    cli_record = tmp_path / "cli.commissioning.toml"
    out = run_cli("commission", "dark", str(rig_copy), "--fast", "--seed", "7", "--duration", "0.5 s",
                  "--scenario", str(scenario), "--commissioning-record", str(cli_record))
    assert out.returncode == 0, out.stderr[-2000:]
    from_cli = read_record(cli_record).latest("dark-offset")
    assert from_cli.result == from_window.result
    assert (from_cli.kind, from_cli.backend, from_cli.rig_identity) == (from_window.kind, from_window.backend,
                                                                        from_window.rig_identity)
    assert out.stdout.splitlines()[0] == panel.last_outcome.lines[0]     # the same words, too


def test_the_window_and_the_command_line_call_the_same_service_functions(qtbot, panel_window, rig_copy, tmp_path,
                                                                        monkeypatch):
    from app.cli import main
    from app.services import commissioning as svc

    calls: dict[str, list[str]] = {}
    for name in ("measure_dark", "fit_hot_wire", "status"):
        real = getattr(svc, name)

        def spy(*args, _real=real, _name=name, **kwargs):
            calls.setdefault(_name, []).append("called")
            return _real(*args, **kwargs)

        monkeypatch.setattr(svc, name, spy)
    U = np.linspace(0.5, 10.0, 8)
    table = tmp_path / "wire.csv"
    table.write_text("voltage_v,velocity_m_s\n" + "".join(f"{np.sqrt(1.6 + 0.9 * u ** 0.47):.6f},{u:.4f}\n"
                                                           for u in U))
    cli_record = str(tmp_path / "cli.commissioning.toml")
    for args in (["dark", "--fast", "--duration", "0.5 s"], ["hot-wire", "--table", str(table)], ["status"]):
        assert main(["commission", args[0], str(rig_copy), "--commissioning-record", cli_record, *args[1:]]) == 0
    assert {k: len(v) for k, v in calls.items()} == {"measure_dark": 1, "fit_hot_wire": 1, "status": 1}
    win, panel = panel_window, panel_window.commissioning
    _run(qtbot, win, panel.dark_button.click)
    panel.table.setText(str(table))
    _run(qtbot, win, panel.hot_wire_button.click)
    assert len(calls["measure_dark"]) == 2 and len(calls["fit_hot_wire"]) == 2 and len(calls["status"]) >= 2
    assert read_record(cli_record).latest("hot-wire").result["a_v2"] == _newest(rig_copy).result["a_v2"]
