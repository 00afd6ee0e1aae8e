"""Points and fitted models in files that network-model codes read (.mat by scipy.io, HDF5 by h5py).

Read back with the reference readers (scipy.io.loadmat, h5py), the values equal the run's
index; the e^{-iwt} file holds the complex conjugate of the e^{+iwt} one (common practice:
codes written with the other time convention conjugate the FTF); each point's covariance is
symmetric, positive semi-definite and gives back the stated gain interval along the phase
direction.
"""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest
import scipy.io as sio

from app.storage.reader import open_run
from run_watch import run_cli, short_plan_text

ROOT = Path(__file__).resolve().parents[2]


_cli = run_cli


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("interchange")
    plan = tmp / "plan.toml"
    plan.write_text(short_plan_text("interchange", 150, 450, 100, 0.5))
    out = _cli("sweep", str(plan), "--rig", str(ROOT / "configs" / "demo-rig.toml"), "--out", str(tmp / "run"),
               "--fast", "--seed", "9")
    assert out.returncode == 0, out.stderr[-2000:]
    return tmp / "run"


def test_mat_and_hdf5_read_back_equal_the_index_and_minus_is_the_conjugate(run_dir: Path, tmp_path: Path):
    mat, h5 = tmp_path / "ftf.mat", tmp_path / "ftf-minus.h5"
    assert _cli("fit", str(run_dir), "--model", "n-tau", "--save", str(mat)).returncode == 0
    out = _cli("fit", str(run_dir), "--model", "n-tau", "--save", str(h5), "--convention", "minus")
    assert out.returncode == 0 and "exp(-i*omega*t)" in out.stdout, out.stderr
    run = open_run(run_dir, verify=False)
    acc = sorted(run.accepted().items())
    gains = np.array([a["analysis"]["gain"] for _, a in acc])
    m = sio.loadmat(mat, simplify_cells=True)
    assert m["time_convention"] == "exp(+i*omega*t)"
    assert np.allclose(m["gain"], gains) and np.allclose(np.abs(m["ftf"]), gains)
    assert np.allclose(m["freq_hz"], [run.points[i]["freq_hz"] for i, _ in acc])
    assert list(m["point"]) == [i + 1 for i, _ in acc]
    wrapped = np.array([a["analysis"]["phase_rad"] for _, a in acc])
    assert np.allclose(np.exp(1j * m["phase_rad"]), np.exp(1j * wrapped))   # same phase, unwrapped branch
    with h5py.File(h5) as f:
        assert f.attrs["time_convention"] == "exp(-i*omega*t)"
        assert np.allclose(f["ftf"][...], np.conj(m["ftf"]))
        assert np.allclose(f["phase_rad"][...], -m["phase_rad"])
        assert np.allclose(f["models/1/grid_ftf"][...], np.conj(m["models"]["grid_ftf"]))
    cov = m["covariance"]
    assert np.allclose(cov, np.swapaxes(cov, 1, 2)) and np.all(np.linalg.eigvalsh(cov) >= -1e-15)
    # along the phase direction the variance is sigma_g^2: gain_ci95 / 1.96 (or the stored factor)
    u = np.stack([np.cos(m["phase_rad"]), np.sin(m["phase_rad"])], -1)
    sigma_along = np.sqrt(np.einsum("ni,nij,nj->n", u, cov, u))
    k = np.array([a["analysis"].get("coverage_factor_gain") or 1.959963984540054 for _, a in acc])
    assert np.allclose(sigma_along * k, m["gain_ci95"], rtol=1e-9)
    assert m["run"]["plan_name"] == "interchange" and "[duct]" in m["run"]["rig_toml"]


def test_a_wrong_suffix_is_refused_plainly(run_dir: Path, tmp_path: Path):
    out = _cli("fit", str(run_dir), "--model", "n-tau", "--save", str(tmp_path / "ftf.xlsx"))
    assert out.returncode == 2 and "Traceback" not in out.stderr and ".mat or an .h5" in out.stderr
    assert not (tmp_path / "ftf.xlsx").exists()


def test_export_writes_mat_and_hdf5_beside_the_csv_with_the_same_numbers(run_dir: Path, tmp_path: Path):
    """`flamebode export` itself writes points.mat and points.h5; read back with scipy.io and h5py
    they hold the CSV's frequencies, gains and unwrapped phases (same attempt used), and the
    e^{-iwt} export (convention "minus") is their complex conjugate (common practice)."""
    import csv

    out = _cli("export", str(run_dir), "--out", str(tmp_path / "x"), "--no-plots")
    assert out.returncode == 0, out.stderr[-2000:]
    assert "points.mat" in out.stdout and "points.h5" in out.stdout
    with open(tmp_path / "x" / "points.csv", newline="") as fh:
        rows = [r for r in csv.DictReader(fh) if r["gain"] not in ("", None)]
    m = sio.loadmat(tmp_path / "x" / "points.mat", simplify_cells=True)
    assert m["time_convention"] == "exp(+i*omega*t)"
    assert [int(r["point"]) for r in rows] == list(np.atleast_1d(m["point"]))
    assert [int(r["attempt"]) for r in rows] == list(np.atleast_1d(m["attempt"]))
    assert np.allclose([float(r["freq_hz"]) for r in rows], m["freq_hz"])
    assert np.allclose([float(r["gain"]) for r in rows], m["gain"], rtol=1e-9)
    assert np.allclose([float(r["phase_rad"]) for r in rows], m["phase_rad"], rtol=1e-9, atol=1e-12)
    out = _cli("export", str(run_dir), "--out", str(tmp_path / "y"), "--no-plots", "--convention", "minus")
    assert out.returncode == 0, out.stderr[-2000:]
    with h5py.File(tmp_path / "y" / "points.h5") as f, h5py.File(tmp_path / "x" / "points.h5") as g:
        assert f.attrs["time_convention"] == "exp(-i*omega*t)" and g.attrs["time_convention"] == "exp(+i*omega*t)"
        assert np.allclose(f["ftf"][...], np.conj(g["ftf"][...]))
        assert np.allclose(f["ftf"][...], np.conj(m["ftf"]))


def test_export_refuses_an_unknown_convention_before_writing(run_dir: Path, tmp_path: Path):
    from app.errors import FlamebodeError
    from app.storage.export import export_run

    with pytest.raises(FlamebodeError, match="time convention"):
        export_run(run_dir, tmp_path / "z", plots=False, convention="backwards")
    assert not (tmp_path / "z").exists()


def test_the_saved_covariance_gives_the_printed_intervals(run_dir: Path, tmp_path: Path):
    # the fit prints n ± 1.96 sigma from its (possibly widened) covariance; the file must carry the
    # same covariance, so a network-model user reading it gets the same intervals
    import re

    out = _cli("fit", str(run_dir), "--model", "n-tau", "--save", str(tmp_path / "m.h5"))
    assert out.returncode == 0, out.stderr
    half = float(re.search(r"\bn = [-0-9.e]+ ± ([0-9.e]+)", out.stdout).group(1))
    with h5py.File(tmp_path / "m.h5") as f:
        cov = f["models/1/covariance"][...]
        widened = f["models/1"].attrs["covariance_widened_by"]
    assert 1.96 * np.sqrt(cov[0, 0]) == pytest.approx(half, rel=0.05)      # printed with 2 digits
    assert widened >= 1.0
