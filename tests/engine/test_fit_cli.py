"""`flamebode fit RUN`: flame models fitted to a stored run, run as a user would (subprocesses).

The simulated demo flame is a sum of two Gaussian distributed delays (configs/demo-scenario.toml);
the fitted model must be close to the simulator's true FTF over the measured band (the
truth module is read here, in the test only), and a run with too few points is refused
with the reason.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from run_watch import run_cli, short_plan_text

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "configs" / "demo-rig.toml"


_cli = run_cli


def _sweep(tmp_path: Path, start: float, stop: float, step: float) -> Path:
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("fit test", start, stop, step, 0.6))
    run = tmp_path / "run"
    out = _cli("sweep", str(plan), "--rig", str(RIG), "--scenario", str(ROOT / "configs" / "demo-scenario.toml"),
               "--out", str(run), "--fast", "--seed", "4")
    assert out.returncode == 0, out.stderr[-2000:]
    return run


@pytest.fixture(scope="module")
def band_run(tmp_path_factory) -> Path:
    return _sweep(tmp_path_factory.mktemp("band"), 100, 700, 50)


@pytest.mark.slow
@pytest.mark.timeout(300)
def test_fit_of_a_simulated_run_follows_the_true_flame(band_run: Path) -> None:
    from drivers.simulated import truth

    run = band_run
    out = _cli("fit", str(run), "--model", "delays", "--terms", "2", "--fixed")
    assert out.returncode == 0 and "Traceback" not in out.stderr, out.stderr[-2000:]
    assert "reduced chi2" in out.stdout and "tau1 =" in out.stdout and "sigma2 =" in out.stdout, out.stdout
    # rebuild the fitted model from the printed parameters and compare with the simulator's truth
    vals = {m[0]: float(m[1]) for m in re.findall(r"(\w+) = ([-+0-9.e]+)", out.stdout)}
    f = np.linspace(100, 700, 25)
    w = 2 * np.pi * f
    model = sum(vals[f"n{j}"] * np.exp(-1j * w * vals[f"tau{j}"] * 1e-3 - 0.5 * (w * vals[f"sigma{j}"] * 1e-3) ** 2)
                for j in (1, 2))
    true = np.asarray(truth.true_ftf(ROOT / "configs" / "demo-scenario.toml", f, 0.05))
    # within 10 % of |F| in magnitude of the complex difference: the demo's sensors carry an
    # uncalibrated 3 % spread (a systematic error the fit cannot see), plus noise
    assert np.max(np.abs(model - true) / np.abs(true)) < 0.10


@pytest.mark.timeout(300)
def test_too_few_points_are_refused_with_the_reason(tmp_path: Path) -> None:
    run = _sweep(tmp_path, 200, 250, 50)
    out = _cli("fit", str(run), "--model", "n-tau")
    assert out.returncode == 1 and "Traceback" not in out.stderr
    assert "not fitted" in out.stdout and "needs at least 3 points" in out.stdout, out.stdout
    assert "not a run folder" in _cli("fit", str(tmp_path)).stderr
    out = _cli("fit", str(run), "--model", "conical", "--unit-gain")
    assert out.returncode == 2 and "--unit-gain applies to --model delays only" in out.stderr, out.stderr


@pytest.mark.slow
@pytest.mark.timeout(300)
def test_an_fdf_run_gets_the_amplitude_report(tmp_path: Path) -> None:
    # the demo flame saturates at |Q'|/Q_mean = 0.30 (configs/demo-scenario.toml): forced at
    # 0.03 and 0.35 the response differs; the fitted limit is near the scenario's value
    plan = tmp_path / "plan.toml"
    plan.write_text(short_plan_text("fdf fit", 150, 450, 100, 0.6).replace("values = [0.05]", "values = [0.03, 0.35]"))
    run = tmp_path / "run"
    out = _cli("sweep", str(plan), "--rig", str(RIG), "--scenario", str(ROOT / "configs" / "demo-scenario.toml"),
               "--out", str(run), "--fast", "--seed", "5")
    assert out.returncode == 0, out.stderr[-2000:]
    out = _cli("fit", str(run), "--model", "n-tau")
    assert out.returncode == 0, out.stderr[-2000:]
    assert "amplitude dependence: at the two lowest amplitudes (0.03, 0.35)" in out.stdout, out.stdout
    assert "differs at:" in out.stdout
    limit = float(re.search(r"saturation of the heat release at \|Q'\|/Q_mean = ([0-9.]+)", out.stdout).group(1))
    assert 0.2 < limit < 0.4, out.stdout


@pytest.mark.slow
@pytest.mark.timeout(300)
def test_a_rational_fit_is_saved_with_its_state_space_form(band_run: Path, tmp_path: Path) -> None:
    import h5py
    import control as ct

    out = _cli("fit", str(band_run), "--model", "rational", "--poles", "4", "--save", str(tmp_path / "m.h5"))
    assert out.returncode == 0 and "state-space form: 4 states" in out.stdout, out.stdout + out.stderr
    with h5py.File(tmp_path / "m.h5") as f:
        m = f["models/1"]
        A, B, C, D, tau = m["A"][...], m["B"][...], m["C"][...], m["D"][...], m.attrs["tau_s"]
        grid, model = m["grid_hz"][...], m["grid_ftf"][...]
    resp = ct.frequency_response(ct.ss(A, B, C, D), 2 * np.pi * grid)     # python-control as the reference
    assert np.allclose(np.squeeze(resp.complex) * np.exp(-2j * np.pi * grid * tau), model, atol=1e-9)


@pytest.mark.slow
@pytest.mark.timeout(400)
def test_two_ftf_runs_at_two_amplitudes_are_tested_together_and_another_operating_point_is_refused(
        tmp_path: Path) -> None:
    # two FTF runs of the demo rig at 0.03 and 0.35 (the demo flame saturates at |Q'|/Q_mean = 0.30,
    # configs/demo-scenario.toml): pooled by amplitude, the amplitude test sees the saturation
    runs = []
    for amp, seed in ((0.03, 6), (0.35, 7)):
        plan = tmp_path / f"plan-{amp}.toml"
        plan.write_text(short_plan_text(f"ftf {amp}", 150, 450, 100, 0.6).replace("values = [0.05]",
                                                                               f"values = [{amp}]"))
        run = tmp_path / f"run-{amp}"
        out = _cli("sweep", str(plan), "--rig", str(RIG), "--scenario", str(ROOT / "configs" / "demo-scenario.toml"),
                   "--out", str(run), "--fast", "--seed", str(seed))
        assert out.returncode == 0, out.stderr[-2000:]
        runs.append(run)
    out = _cli("fit", *map(str, runs), "--model", "n-tau")
    assert out.returncode == 0 and "Traceback" not in out.stderr, out.stderr[-2000:]
    assert "amplitude dependence: at the two lowest amplitudes (0.03, 0.35)" in out.stdout, out.stdout
    assert "differs at:" in out.stdout and f"from {runs[0]}" in out.stdout
    # the same run copied with another operating point (a richer fuel flow) is not pooled
    import shutil

    other = tmp_path / "other"
    shutil.copytree(runs[1], other)
    rig = other / "rig.toml"
    text = rig.read_text()
    changed = re.sub(r'(\[\[gas\.flows\]\][^\[]*?flow\s*=\s*")([0-9.]+)', lambda m: m.group(1) + str(
        float(m.group(2)) * 1.1), text, count=1, flags=re.S)
    assert changed != text, "the demo rig's first flow has a flow"
    rig.write_text(changed)
    out = _cli("fit", str(runs[0]), str(other), "--model", "n-tau")
    assert out.returncode == 2 and "Traceback" not in out.stderr, out.stderr[-2000:]
    assert "operating point" in out.stderr and "gas.flows[1]" in out.stderr, out.stderr
    out = _cli("fit", *map(str, runs), "--save", str(tmp_path / "both.mat"))
    assert out.returncode == 2 and "one run" in out.stderr and not (tmp_path / "both.mat").exists()
