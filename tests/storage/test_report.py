"""Runs listed with their metadata, compared on one figure, and reported as a PDF.

The PDF is read back by an independent renderer (pypdfium2, PDFium): it has the pages the
report promises, their text carries the run's numbers (plan, points, flags, the fitted
model), and the rendered pages are not blank.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from run_watch import run_cli, short_plan_text

ROOT = Path(__file__).resolve().parents[2]


_cli = run_cli


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("runs")
    for name, amp in (("low", "0.03"), ("high", "0.3")):
        plan = root / f"{name}.toml"
        plan.write_text(short_plan_text(f"report {name}", 150, 550, 100, 0.5).replace("values = [0.05]",
                                                                                       f"values = [{amp}]"))
        out = _cli("sweep", str(plan), "--rig", str(ROOT / "configs" / "demo-rig.toml"), "--out",
                   str(root / "runs" / name), "--fast", "--seed", "3")
        assert out.returncode == 0, out.stderr[-2000:]
    return root / "runs"


def test_runs_lists_every_run_with_its_metadata(runs: Path):
    out = _cli("runs", str(runs))
    assert out.returncode == 0, out.stderr
    assert out.stdout.count("FTF ") == 2 and "plan 'report low'" in out.stdout and "plan 'report high'" in out.stdout
    assert "|u'|/u 0.03" in out.stdout and "5 of 5 points with a result" in out.stdout
    assert "Gorsefield-3" in out.stdout
    assert "not a folder" in _cli("runs", str(runs / "nowhere")).stderr


def test_compare_draws_both_runs(runs: Path, tmp_path: Path):
    fig = tmp_path / "both.png"
    out = _cli("compare", str(runs / "low"), str(runs / "high"), "--out", str(fig))
    assert out.returncode == 0, out.stderr
    from PIL import Image

    img = np.asarray(Image.open(fig).convert("L"), dtype=float)
    assert img.shape[0] > 500 and img.std() > 10          # a drawn figure, not a blank one
    bad = _cli("compare", str(runs / "low"), str(tmp_path), "--out", str(tmp_path / "x.png"))
    assert bad.returncode == 2 and "not a run folder" in bad.stderr and not (tmp_path / "x.png").exists()


def test_the_report_pdf_reads_back_with_its_pages_and_numbers(runs: Path, tmp_path: Path):
    import pypdfium2 as pdfium

    pdf_path = tmp_path / "report.pdf"
    out = _cli("report", str(runs / "low"), "--out", str(pdf_path))
    assert out.returncode == 0, out.stderr
    pdf = pdfium.PdfDocument(str(pdf_path))
    assert len(pdf) == 3                                   # summary, curves, point table
    text = [pdf[i].get_textpage().get_text_range() for i in range(len(pdf))]
    assert "flamebode run report" in text[0] and "report low" in text[0] and "Gorsefield-3" in text[0]
    assert "5 of 5 with a result" in text[0] and "Gaussian delay term" in text[0]
    assert "exp(+i w t)" in text[0] and "checklist" in text[0]
    assert "fitted flame model" in text[1]
    assert "points (phase in degrees, unwrapped)" in text[2] and "150.0" in text[2] and "550.0" in text[2]
    for i in range(len(pdf)):
        page = np.asarray(pdf[i].render(scale=0.5).to_pil().convert("L"), dtype=float)
        assert page.std() > 3, f"page {i + 1} renders blank"
    assert (tmp_path / "report-page2.png").is_file()


def test_each_fitted_model_is_drawn_in_its_measured_curve_s_colour(runs: Path, tmp_path: Path, monkeypatch):
    # common practice: a fitted curve shares its data's colour, so curves at several forcing
    # amplitudes can be told apart (the dashes say "model", the colour says which amplitude)
    import matplotlib.figure
    from matplotlib.colors import to_rgba

    from app.storage import report

    figures = []

    class Kept(matplotlib.figure.Figure):
        def __init__(self, *a, **k):
            super().__init__(*a, **k)
            figures.append(self)

    monkeypatch.setattr(matplotlib.figure, "Figure", Kept)     # the report imports it when it draws
    report.write_report(runs / "low", tmp_path / "r.pdf")
    ax_gain = next(f.axes[0] for f in figures if f.axes and "fitted flame model" in f.axes[0].get_title())
    dashed = [ln for ln in ax_gain.get_lines() if ln.get_linestyle() == "--"]
    measured = [ln for ln in ax_gain.get_lines() if ln.get_marker() == "o" and ln.get_linestyle() != "None"]
    assert dashed and measured
    assert {to_rgba(ln.get_color()) for ln in dashed} <= {to_rgba(ln.get_color()) for ln in measured}
