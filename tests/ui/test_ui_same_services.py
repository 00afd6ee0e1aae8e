"""The window and the command line reach the same run-service functions (one operation, one
place): each front end's decide, reprocess and export call ``app.services`` and the results
on disk are the same."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from PySide6.QtCore import Qt

from app.cli import main
from app.services import decisions, export, reprocess, runs

LONG_MS = 60000
CONFIGS = Path(__file__).resolve().parents[2] / "configs"


class Recorder:
    """Wraps a service function: records each request, then does the real work."""

    def __init__(self, real) -> None:
        self.real, self.requests = real, []

    def __call__(self, req, *args, **kwargs):
        self.requests.append(req)
        return self.real(req, *args, **kwargs)


@pytest.fixture
def spies(monkeypatch: pytest.MonkeyPatch) -> dict[str, Recorder]:
    out = {"decide": Recorder(decisions.decide), "reprocess": Recorder(reprocess.reprocess),
           "export": Recorder(export.export)}
    monkeypatch.setattr(decisions, "decide", out["decide"])
    monkeypatch.setattr(reprocess, "reprocess", out["reprocess"])
    monkeypatch.setattr(export, "export", out["export"])
    return out


def test_window_and_cli_call_the_same_services(qtbot, make_window, tiny_plan, tmp_path: Path, spies) -> None:
    cli_run = tmp_path / "cli-run"
    assert main(["sweep", str(tiny_plan), "--fast", "--seed", "5", "--out", str(cli_run)]) == 0
    win_run = tmp_path / "win-run"
    shutil.copytree(cli_run, win_run)

    # the command line: reject point 2's attempt 1, reprocess, export
    assert main(["accept", str(cli_run), "2", "1", "--reject"]) == 0
    new_rig = tmp_path / "edited-rig.toml"
    new_rig.write_text((CONFIGS / "demo-rig.toml").read_text(encoding="utf-8")
                       .replace('"14.2 mV/Pa"', '"14.9 mV/Pa"'), encoding="utf-8")
    assert main(["reprocess-run", str(cli_run), "--rig", str(new_rig)]) == 0
    assert main(["export", str(cli_run), "--no-plots"]) == 0
    assert [len(s.requests) for s in spies.values()] == [1, 1, 1]

    # the window: the same three operations on the copy
    win = make_window(tiny_plan)
    win.open_review(win_run)
    review = win.review
    qtbot.waitUntil(lambda: review.run is not None and review.accept_button.isEnabled(), timeout=LONG_MS)
    review.point_list.select_points([1])
    qtbot.waitUntil(lambda: review.current_attempt() is not None and review.attempt_box.count() == 1, timeout=LONG_MS)
    old = review.run
    qtbot.mouseClick(review.reject_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: review.run is not old, timeout=LONG_MS)
    before = review.run
    win.reprocess(new_rig)
    qtbot.waitUntil(lambda: review.run is not before and "Reprocessed" in review.message.text(), timeout=LONG_MS)
    qtbot.mouseClick(review.export_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: "Exported" in review.message.text(), timeout=LONG_MS)
    assert [len(s.requests) for s in spies.values()] == [2, 2, 2]

    cli_req, win_req = spies["decide"].requests
    assert (cli_req.choices, cli_req.accept) == (win_req.choices, win_req.accept)
    assert [(c.point, c.attempt) for c in win_req.choices] == [(2, 1)]
    assert spies["reprocess"].requests[0].rig_path == spies["reprocess"].requests[1].rig_path
    cli_rows, win_rows = runs.review(cli_run).rows, runs.review(win_run).rows
    assert [(r["used"], r["status"], r["gain"]) for r in cli_rows] == [(r["used"], r["status"], r["gain"])
                                                                       for r in win_rows]
    assert cli_rows[1]["status"] != "accepted"
    cli_csv = (cli_run / "export" / "points.csv").read_text(encoding="utf-8")
    win_csv = (win_run / "export" / "points.csv").read_text(encoding="utf-8")
    assert cli_csv.splitlines()[0] == win_csv.splitlines()[0] and len(cli_csv.splitlines()) == 4


def test_the_review_tab_reads_the_run_as_the_review_command_does(qtbot, make_window, tiny_plan, tmp_path: Path,
                                                               capsys, monkeypatch) -> None:
    run_dir = tmp_path / "run"
    assert main(["sweep", str(tiny_plan), "--fast", "--seed", "7", "--out", str(run_dir)]) == 0
    spy = Recorder(runs.review)
    monkeypatch.setattr(runs, "review", lambda d, verify=True: spy(d))
    capsys.readouterr()
    assert main(["review", str(run_dir)]) == 0
    summary = capsys.readouterr().out.splitlines()[-1]
    win = make_window(tiny_plan)
    win.open_review(run_dir)
    qtbot.waitUntil(lambda: win.review.run is not None, timeout=LONG_MS)
    assert [Path(d) for d in spy.requests] == [run_dir, run_dir]
    assert summary in win.review.title.text()           # the same count line, word for word


def test_compare_from_the_window_and_the_command_line(qtbot, make_window, tiny_plan, tmp_path: Path,
                                                      monkeypatch) -> None:
    one, two = tmp_path / "one", tmp_path / "two"
    assert main(["sweep", str(tiny_plan), "--fast", "--seed", "1", "--out", str(one)]) == 0
    shutil.copytree(one, two)
    spy = Recorder(export.compare)
    monkeypatch.setattr(export, "compare", spy)
    cli_figure = tmp_path / "cli-compare.png"
    assert main(["compare", str(one), str(two), "--out", str(cli_figure)]) == 0
    win = make_window(tiny_plan)
    win.open_review(one)
    qtbot.waitUntil(lambda: win.review.run is not None and win.review.compare_button.isEnabled(), timeout=LONG_MS)
    win.compare_with([two])
    qtbot.waitUntil(lambda: "Compared 2 runs" in win.review.message.text(), timeout=LONG_MS)
    cli_req, win_req = spy.requests
    assert [p.resolve() for p in cli_req.run_dirs] == [p.resolve() for p in win_req.run_dirs]
    assert win_req.out == one / "export" / "compare.png" and win_req.out.stat().st_size > 1000
    assert cli_figure.stat().st_size > 1000


def test_an_fdf_run_shows_its_amplitude_test_in_the_review_tab_as_review_prints_it(qtbot, make_window, tmp_path: Path,
                                                                                  capsys) -> None:
    # the demo flame saturates at |Q'|/Q_mean = 0.30 (configs/demo-scenario.toml): forced at 0.03 and 0.35
    # the response differs, and both front ends say so in the same words (app.storage.amplitude)
    from conftest import write_plan, write_scenario

    plan = write_plan(tmp_path / "fdf.toml", write_scenario(tmp_path / "scenario.toml"), freqs=(200.0, 300.0, 400.0),
                      amps=(0.03, 0.35))
    run_dir = tmp_path / "fdf-run"
    assert main(["sweep", str(plan), "--fast", "--seed", "5", "--out", str(run_dir)]) == 0
    capsys.readouterr()
    assert main(["review", str(run_dir)]) == 0
    lines = [ln for ln in capsys.readouterr().out.splitlines() if ln.startswith("amplitude dependence")]
    assert len(lines) == 1 and "(0.03, 0.35)" in lines[0], lines
    win = make_window(plan)
    win.open_review(run_dir)
    qtbot.waitUntil(lambda: win.review.run is not None, timeout=LONG_MS)
    assert lines[0] in win.review.title.text()
