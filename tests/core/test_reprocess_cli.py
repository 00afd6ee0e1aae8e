"""``flamebode reprocess`` on CSV records from another acquisition system.

Convention: x(t) = Re{x̂ e^{+iωt}}; the synthetic flame is Crocco's n–τ model.
"""

from __future__ import annotations

import io
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from app.cli import main
from app.rig import load_rig

from synth import make_record, n_tau

RIG = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"


def _write_csv(path: Path, data: np.ndarray, channels, fs: float) -> Path:
    t = np.arange(data.shape[1]) / fs
    np.savetxt(path, np.column_stack([t, data.T]), delimiter=",", header=",".join(("time_s",) + tuple(channels)),
               comments="", fmt="%.9g")
    return path


@pytest.fixture(scope="module")
def record():
    return make_record(load_rig(RIG), 275.0, n_tau(0.85, 2.2e-3), duration_s=1.0, rng=np.random.default_rng(5))


def test_csv_json_output_recovers_the_flame(tmp_path, capsys, record):
    path = _write_csv(tmp_path / "rec.csv", record.data, record.channels, record.sample_rate_hz)
    assert main(["reprocess", str(path), "--rig", str(RIG), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    # Frequency estimated from the drive reference channel, to a small fraction of a bin.
    assert out["frequency_hz"] == pytest.approx(275.0, abs=0.01)
    assert "estimated" in out["frequency_source"]
    assert out["gain"] == pytest.approx(0.85, abs=max(2 * out["gain_ci95"], 0.01))
    phase_true = -2 * np.pi * 275.0 * 2.2e-3
    assert abs(np.angle(np.exp(1j * (out["phase_rad"] - phase_true)))) < max(2 * out["phase_ci95_rad"], 0.01)
    assert out["velocity_ratio"] == pytest.approx(0.05, rel=0.02)


def test_table_output_with_given_frequency(tmp_path, capsys, record):
    path = _write_csv(tmp_path / "rec.csv", record.data, record.channels, record.sample_rate_hz)
    assert main(["reprocess", str(path), "--rig", str(RIG), "--freq-hz", "275"]) == 0
    out = capsys.readouterr().out
    assert "gain" in out and "phase" in out and "(given)" in out


@pytest.mark.parametrize("mutate, expected", [
    (lambda lines: [lines[0].replace(",p3", ",p9")] + lines[1:], "lacks channel(s) p3"),
    (lambda lines: lines[:5] + [lines[5].replace(lines[5].split(",")[2], "abc", 1)] + lines[6:], "line 6, column 'p2'"),
    (lambda lines: lines[:10], "only 9 rows"),
    (lambda lines: lines[:100] + lines[101:], "uneven time steps"),
    (lambda lines: ["t," + lines[0].split(",", 1)[1]] + lines[1:], "first column must be 'time_s'"),
])
def test_bad_csv_gets_a_named_error(tmp_path, capsys, record, mutate, expected):
    path = _write_csv(tmp_path / "rec.csv", record.data[:, :2000], record.channels, record.sample_rate_hz)
    lines = path.read_text().splitlines()
    path.write_text("\n".join(mutate(lines)) + "\n")
    assert main(["reprocess", str(path), "--rig", str(RIG), "--freq-hz", "275"]) == 2
    err = capsys.readouterr().err
    assert expected in err
    assert "Traceback" not in err


def test_missing_file_is_a_plain_error(tmp_path, capsys):
    assert main(["reprocess", str(tmp_path / "none.csv"), "--rig", str(RIG)]) == 2
    assert "file not found" in capsys.readouterr().err


def test_hdf5_record_from_a_run_reprocesses_to_its_stored_point(tmp_path, capsys):
    # A record written by the run writer during a real (simulated, fast) sweep: reprocessing
    # the raw file with the same rig reproduces the point the sweep stored.
    import pandas as pd

    plan = tmp_path / "plan.toml"
    plan.write_text('name = "one point"\n[frequencies]\nvalues = ["330 Hz"]\n[amplitude]\nvalues = [0.05]\n'
                    'basis = "peak"\n[timing]\nrecord = "1 s"\nsettle = "0.2 s"\ntuning_window = "0.2 s"\n')
    run_dir = tmp_path / "run"
    assert main(["sweep", str(plan), "--rig", str(RIG), "--out", str(run_dir), "--fast", "--seed", "2"]) == 0
    records = sorted((run_dir / "records").glob("*.h5"))
    assert len(records) == 1
    assert main(["export", str(run_dir), "--out", str(tmp_path / "export")]) == 0
    stored = pd.read_csv(tmp_path / "export" / "points.csv").iloc[0]
    capsys.readouterr()
    assert main(["reprocess", str(records[0]), "--rig", str(RIG), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["frequency_source"] == "from the record"
    assert out["frequency_hz"] == pytest.approx(330.0)
    assert out["gain"] == pytest.approx(stored["gain"], rel=1e-9)
    assert out["phase_rad"] == pytest.approx(stored["phase_rad"], rel=1e-9)


def _cli(*args: str) -> subprocess.CompletedProcess:
    root = Path(__file__).resolve().parents[2]
    return subprocess.run([sys.executable, "-m", "app.cli", *args], capture_output=True, text=True, cwd=root,
                          timeout=120)


def test_csv_exported_by_another_program_reprocesses(tmp_path):
    # numpy.savetxt with "%.6E" (7 significant digits, as acquisition programs export), a UTF-8
    # byte-order mark, CRLF line ends and a header row; stamps above 1 s are rounded to 1 us,
    # 2.6 % of a step at 25.6 kHz, which was refused as "uneven" before
    rec = make_record(load_rig(RIG), 275.0, n_tau(0.85, 2.2e-3), duration_s=2.0, sample_rate_hz=25600.0,
                      rng=np.random.default_rng(6))
    buf = io.StringIO()
    t = np.arange(rec.data.shape[1]) / rec.sample_rate_hz
    np.savetxt(buf, np.column_stack([t, rec.data.T]), fmt="%.6E", delimiter=",",
               header=",".join(("time_s",) + rec.channels), comments="", newline="\r\n")
    path = tmp_path / "export.csv"
    path.write_bytes(b"\xef\xbb\xbf" + buf.getvalue().encode())
    res = _cli("reprocess", str(path), "--rig", str(RIG), "--json")
    assert res.returncode == 0, res.stderr
    out = json.loads(res.stdout)
    assert out["frequency_hz"] == pytest.approx(275.0, abs=0.01)
    assert out["gain"] == pytest.approx(0.85, abs=max(2 * out["gain_ci95"], 0.01))


def test_wrong_channel_names_are_named_before_any_frequency_advice(tmp_path, record):
    path = _write_csv(tmp_path / "rec.csv", record.data[:, :4000], ("mic1", "mic2", "p3", "p4", "PMT", "ref"),
                      record.sample_rate_hz)
    res = _cli("reprocess", str(path), "--rig", str(RIG))
    assert res.returncode == 2 and "Traceback" not in res.stderr
    err = res.stderr
    assert f"{path}: lacks channel(s) p1, p2, pmt named in the rig file" in err
    assert "(the file has: mic1, mic2, p3, p4, PMT, ref" in err and "'PMT' for 'pmt'?" in err
    assert "--freq-hz" not in err


@pytest.mark.parametrize("value", ["nan", "inf", "-5", "0", "20000"])
def test_an_impossible_freq_hz_is_refused_naming_the_option(tmp_path, capsys, record, value):
    path = _write_csv(tmp_path / "rec.csv", record.data[:, :4000], record.channels, record.sample_rate_hz)
    assert main(["reprocess", str(path), "--rig", str(RIG), "--freq-hz", value]) == 2
    assert "--freq-hz: found" in capsys.readouterr().err


def test_an_hdf5_record_under_another_name_is_read_as_hdf5(tmp_path, capsys, record):
    from app.storage.record import write_record

    final, _, _ = write_record(tmp_path, "rec.dat", "a1", record.data,
                               {"channels": list(record.channels), "sample_rate_hz": record.sample_rate_hz,
                                "freq_hz": 275.0})
    assert main(["reprocess", str(final), "--rig", str(RIG), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["frequency_hz"] == pytest.approx(275.0)


def test_json_carries_flags_velocity_uncertainty_and_budget_as_the_sweep_would(tmp_path, capsys, record):
    # reprocess applies the sweep's quality rules (app.core.quality.quality_flags with the plan's
    # [quality] limits, defaults without a plan) and states the velocity's uncertainty.
    from app.core.quality import quality_flags
    from app.core.response import evaluate_point
    from app.plan import Quality

    path = _write_csv(tmp_path / "rec.csv", record.data, record.channels, record.sample_rate_hz)
    assert main(["reprocess", str(path), "--rig", str(RIG), "--json", "--freq-hz", "275"]) == 0
    out = json.loads(capsys.readouterr().out)
    point = evaluate_point(record.data, record.channels, record.sample_rate_hz, 275.0, load_rig(RIG))
    assert out["flags"] == list(quality_flags(point.quality, Quality()))
    # the demo rig states position and temperature uncertainties: the total exceeds the noise alone
    assert out["velocity_ratio_uncertainty"] > out["velocity_ratio_sigma"] > 0
    names = [t["input"] for t in out["budget"]]
    assert "gas temperature" in names and "p1 position" in names
    # a plan with a stricter [quality] table raises the flags it implies
    plan_text = (Path(RIG).parent / "demo-ftf-plan.toml").read_text(encoding="utf-8")
    plan_text = plan_text.replace('rig = "demo-rig.toml"', f'rig = "{RIG.as_posix()}"')
    plan_text = plan_text.replace("[quality]\n", "[quality]\nrelative_ci95_max = 1e-6\n", 1)
    plan = tmp_path / "plan.toml"
    plan.write_text(plan_text, encoding="utf-8")
    assert main(["reprocess", str(path), "--rig", str(RIG), "--json", "--freq-hz", "275", "--plan", str(plan)]) == 0
    strict = json.loads(capsys.readouterr().out)
    assert "too-uncertain" in strict["flags"] and "too-uncertain" not in out["flags"]
