"""Plan files: validation names file and key; points, order and duration; dry-run output."""

from __future__ import annotations

import math

import pytest

from app.cli import main
from app.errors import ConfigError
from app.plan import load_plan

from engine_helpers import CONFIGS

BASE = """
name = "t"
[frequencies]
linear = {{ start = "100 Hz", stop = "300 Hz", step = "100 Hz" }}
{extra_freq}
[amplitude]
values = [0.05, 0.1]
basis = "{basis}"
[order]
major = "{major}"
frequency = "descending"
[timing]
record = "2 s"
{extra}
"""


def _write(tmp_path, extra="", basis="peak", major="frequency", extra_freq=""):
    p = tmp_path / "plan.toml"
    p.write_text(BASE.format(extra=extra, basis=basis, major=major, extra_freq=extra_freq))
    return p


def test_points_order_and_basis(tmp_path) -> None:
    plan = load_plan(_write(tmp_path, major="amplitude", basis="rms"))
    pts = plan.points()
    assert [(p.freq_hz, p.amplitude_ratio) for p in pts] == [
        (300.0, 0.05), (200.0, 0.05), (100.0, 0.05), (300.0, 0.1), (200.0, 0.1), (100.0, 0.1)]
    assert [p.index for p in pts] == list(range(6))
    # rms -> peak for a sine: factor sqrt(2) (textbook)
    assert pts[0].peak_ratio == pytest.approx(0.05 * math.sqrt(2))


def test_log_and_list_are_merged(tmp_path) -> None:
    plan = load_plan(_write(tmp_path, extra_freq='values = ["200 Hz", "1 kHz"]\n'
                                                'log = { start = "100 Hz", stop = "1 kHz", count = 3 }'))
    f = plan.frequencies.all_hz()
    assert f.tolist() == pytest.approx([100.0, 200.0, 300.0, 316.227766, 1000.0])


@pytest.mark.parametrize(("extra", "key"), [
    ("[tuning]\ntolerance = 0.05\nmistake = 1", "tuning.mistake: unknown key"),
    ('[tuning]\nceiling = "3 kV"', "tuning.ceiling"),
    ('settle = "3 parsecs"', "timing.settle"),
    ("[faults]\nclip_fraction = 2", "faults.clip_fraction"),
    ('[tuning]\nwhen_unreachable = "panic"', "tuning.when_unreachable"),
])
def test_errors_name_file_and_key(tmp_path, extra, key) -> None:
    path = _write(tmp_path, extra=extra)
    with pytest.raises(ConfigError) as info:
        load_plan(path)
    assert str(path) in str(info.value) and key in str(info.value)


def test_ceiling_above_the_rig_is_refused(tmp_path, rig) -> None:
    path = _write(tmp_path, extra='[tuning]\nceiling = "2.5 V"')
    with pytest.raises(ConfigError) as info:
        load_plan(path, rig)
    assert "tuning.ceiling" in str(info.value) and "above the rig's ceiling" in str(info.value)


def test_missing_key_is_named(tmp_path) -> None:
    p = tmp_path / "plan.toml"
    p.write_text('name = "t"\n[frequencies]\nvalues = [100]\n[timing]\nrecord = 1\n')
    with pytest.raises(ConfigError, match=r"amplitude: required key is missing"):
        load_plan(p)


def test_duration_estimate(tmp_path) -> None:
    plan = load_plan(_write(tmp_path))
    # at least the six 2 s records, at most three times that with this plan's short windows
    assert 12.0 < plan.estimated_duration_s() < 36.0


@pytest.mark.slow
def test_duration_estimate_matches_a_simulated_sweep(rig) -> None:
    # the dry run's estimate against the simulated time a whole demo sweep really takes
    from app.engine.events import EventBus
    from app.engine.sweep import SweepEngine
    from drivers.simulated.burner import SimulatedBurner

    plan = load_plan(CONFIGS / "demo-ftf-plan.toml", rig)
    sim = SimulatedBurner(rig, seed=7)
    assert SweepEngine(plan, rig, sim, EventBus()).run() == "complete"
    estimate = plan.estimated_duration_s(ramp_time_s=rig.drive.ramp_time)
    assert 0.8 <= estimate / sim.time_s <= 1.25, (estimate, sim.time_s)


def test_shipped_plans_load(rig) -> None:
    for name in ("demo-ftf-plan.toml", "demo-fdf-plan.toml", "bench-plan.toml"):
        plan = load_plan(CONFIGS / name, rig)
        assert plan.resolve("rig").resolve() == (CONFIGS / "demo-rig.toml").resolve()
    bench = load_plan(CONFIGS / "bench-plan.toml", rig)
    f = [p.freq_hz for p in bench.points()]
    assert f[0] == 100.0 and f[-1] == 2000.0 and len(f) == 39


def test_dry_run_prints_points_duration_and_checks(capsys) -> None:
    assert main(["sweep", str(CONFIGS / "demo-fdf-plan.toml"), "--dry-run"]) == 0
    out = capsys.readouterr().out
    assert "21 points" in out and "estimated duration" in out and "checks:" in out
    assert "80.00 Hz" in out and "a = 0.1500 peak" in out
    assert "drive never above 2 V" in out


def test_plan_error_is_a_plain_message(tmp_path, capsys) -> None:
    p = tmp_path / "bad.toml"
    p.write_text('name = "x"\nrig = "' + str(CONFIGS / "demo-rig.toml") + '"\n[frequencies]\nvalues = [100]\n'
                 '[amplitude]\nvalues = [0.05]\nbasis = "peak"\n[timing]\nrecord = "1 s"\nrecrd = 2\n')
    assert main(["sweep", str(p), "--dry-run"]) == 2
    err = capsys.readouterr().err
    assert "timing.recrd: unknown key" in err and "Traceback" not in err


def test_headless_sweep_stores_points(tmp_path, capsys) -> None:
    p = tmp_path / "small.toml"
    p.write_text('name = "x"\nrig = "' + str(CONFIGS / "demo-rig.toml") + '"\n[frequencies]\nvalues = [200, 400]\n'
                 '[amplitude]\nvalues = [0.05]\nbasis = "peak"\n[timing]\nrecord = "0.5 s"\n')
    out_dir = tmp_path / "run"
    assert main(["sweep", str(p), "--fast", "--seed", "3", "--out", str(out_dir)]) == 0
    out = capsys.readouterr().out
    assert "2 of 2 points settled and kept" in out and f"run folder: {out_dir}" in out and "400.0 Hz" in out
    assert len(list((out_dir / "records").glob("*.h5"))) == 2
