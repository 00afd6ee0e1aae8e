"""The command line with bad numbers: ``flamebode sweep PLAN --dry-run`` refuses them before any
hardware is touched, with the message and no traceback; the dry run checks the record against
the machine's memory and the sample rate against the back-end; a sweep that keeps no point
exits non-zero. Run as a user meets it: the real CLI in a subprocess.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from app.errors import FlamebodeError

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"
RIG_TEXT = (CONFIGS / "demo-rig.toml").read_text(encoding="utf-8")


def _cli(*args: str, timeout: float = 120.0) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "app.cli", *map(str, args)], cwd=ROOT, capture_output=True,
                          text=True, timeout=timeout)


def _plan(tmp_path: Path, rig: Path | None = None, timing: str = 'record = "0.5 s"', extra: str = "",
          freqs: str = "[200, 400]") -> Path:
    p = tmp_path / "plan.toml"
    p.write_text(f'name = "cli test"\nrig = "{rig or CONFIGS / "demo-rig.toml"}"\n'
                 f'scenario = "{CONFIGS / "demo-scenario.toml"}"\n[frequencies]\nvalues = {freqs}\n'
                 f'[amplitude]\nvalues = [0.05]\nbasis = "peak"\n[timing]\n{timing}\n{extra}', encoding="utf-8")
    return p


def _rig(tmp_path: Path, old: str, new: str) -> Path:
    assert old in RIG_TEXT
    p = tmp_path / "rig.toml"
    p.write_text(RIG_TEXT.replace(old, new, 1), encoding="utf-8")
    return p


def _refused(proc: subprocess.CompletedProcess, *texts: str) -> None:
    assert proc.returncode == 2, (proc.returncode, proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stderr + proc.stdout, proc.stderr
    for text in texts:
        assert text in proc.stderr, proc.stderr


def test_dry_run_refuses_an_endless_settle(tmp_path) -> None:
    plan = _plan(tmp_path, timing='record = "0.5 s"\nsettle = "1e300 s"')
    _refused(_cli("sweep", plan, "--dry-run"), str(plan), 'timing.settle: "1e300 s" is too long',
             "at most 3600 s")


def test_dry_run_refuses_an_infinite_sample_rate(tmp_path) -> None:
    rig = _rig(tmp_path, 'sample_rate = "25.6 kHz"', "sample_rate = inf")
    _refused(_cli("sweep", _plan(tmp_path, rig), "--dry-run"), str(rig),
             "acquisition.sample_rate: inf is not a finite number")


def test_dry_run_refuses_a_bare_flow_and_says_what_to_write(tmp_path) -> None:
    rig = _rig(tmp_path, 'flow = "180 L/min"', "flow = 7")
    _refused(_cli("sweep", _plan(tmp_path, rig), "--dry-run"), str(rig),
             'gas.flows[0].flow: a flow needs a unit, e.g. "180 L/min" or "0.003 m3/s"')


def test_dry_run_refuses_a_nan_safe_max_and_a_bool_threshold(tmp_path) -> None:
    rig = _rig(tmp_path, 'safe_max = "8 V"', "safe_max = nan")
    _refused(_cli("sweep", _plan(tmp_path, rig), "--dry-run"), "light.safe_max: nan is not a finite number")
    plan = _plan(tmp_path, extra="[quality]\npair_spread_max = true\n")
    _refused(_cli("sweep", plan, "--dry-run"), "quality.pair_spread_max: expected a plain number")


def test_dry_run_refuses_a_truncated_scenario(tmp_path) -> None:
    text = (CONFIGS / "demo-scenario.toml").read_text(encoding="utf-8")
    text = text.replace('rig = "demo-rig.toml"', f'rig = "{CONFIGS / "demo-rig.toml"}"')
    cut = tmp_path / "cut.toml"
    cut.write_text(text[:text.index("q = 1.4") + len("q = 1")], encoding="utf-8")
    _refused(_cli("sweep", _plan(tmp_path), "--scenario", cut, "--dry-run"), str(cut),
             "the file ends in the middle of a line")
    _refused(_cli("sweep", _plan(tmp_path), "--scenario", cut, "--fast"), str(cut),
             "the file ends in the middle of a line")


def test_dry_run_reports_memory_and_sample_rate_check(tmp_path) -> None:
    proc = _cli("sweep", _plan(tmp_path), "--dry-run")
    assert proc.returncode == 0, proc.stderr
    assert "memory: a 0.5 s record of 6 channels at 25600 Hz is" in proc.stdout
    assert "within half of this machine's" in proc.stdout
    assert f"scenario {CONFIGS / 'demo-scenario.toml'}" in proc.stdout
    assert ("sample rate: back-end 'simulated' states no sample-rate limit: 25600 Hz checked against the rig "
            "file's bounds only") in proc.stdout


def test_dry_run_names_an_unknown_back_end(tmp_path) -> None:
    _refused(_cli("sweep", _plan(tmp_path), "--dry-run", "--backend", "simulatd"),
             "unknown back-end 'simulatd'; known back-ends:", "simulated")


def _ram_bytes() -> int:
    from app.commands.sweep import machine_memory_bytes

    return machine_memory_bytes() or 0


def test_dry_run_refuses_a_record_larger_than_half_the_memory(tmp_path) -> None:
    # an hour at 1 MHz of 6 channels: 173 GB of float64 samples, 346 GB while assembled
    if _ram_bytes() > 600e9:
        pytest.skip("this machine has more than 600 GB of memory")
    rig = _rig(tmp_path, 'sample_rate = "25.6 kHz"', 'sample_rate = "1000 kHz"')
    proc = _cli("sweep", _plan(tmp_path, rig, timing='record = "3600 s"', freqs="[200]"), "--dry-run")
    _refused(proc, "timing.record: a 3600 s record of 6 channels at 1e+06 Hz is 175 GB of float64 samples",
             "more than half of this machine's", "a record of at most about")


def test_memory_check_numbers(tmp_path) -> None:
    from app.commands.sweep import SweepCommandError, check_memory
    from app.plan import load_plan
    from app.rig import load_rig

    rig = load_rig(CONFIGS / "demo-rig.toml")
    plan = load_plan(_plan(tmp_path, timing='record = "100 s"'), rig)
    # 100 s x 1.01 + one 0.1 s block at 25.6 kHz, 6 channels, float64, twice: 248.5 MB
    with pytest.raises(SweepCommandError) as info:
        check_memory(plan, rig, total_bytes=400_000_000)
    msg = str(info.value)
    assert "timing.record: a 100 s record of 6 channels at 25600 Hz is 124 MB" in msg
    assert "held twice while it is assembled: 248 MB, more than half of this machine's 400 MB" in msg
    assert "a record of at most about 81.4 s fits" in msg
    assert "within half of this machine's 1 GB" in check_memory(plan, rig, total_bytes=1_000_000_000)


@pytest.fixture
def fake_backend(monkeypatch):
    """Replace the registry's list with one back-end whose probe states ``details``."""
    from drivers import registry
    from drivers.protocols import Availability

    def install(details: dict[str, str], available: bool = True) -> None:
        info = registry.BackendInfo("bench", "a bench DAQ", Availability(available, "stand-in", details), "x:Y")
        monkeypatch.setattr(registry, "list_backends", lambda: [info])
    return install


@pytest.mark.parametrize(("details", "rate_hz", "problem"), [
    ({"sample_rate_max_hz": "48000"}, 25600.0, None),
    ({"sample_rate_max_hz": "48000"}, 51200.0, "51200 Hz, but back-end 'bench' can sample at 0 Hz to 48000 Hz"),
    ({"sample_rate_min_hz": "30000"}, 25600.0, "can sample at at least 30000 Hz"),
    ({"sample_rates_hz": "44100, 48000, 96000"}, 25600.0, "can sample only at 44100, 48000, 96000 Hz"),
    ({"sample_rates_hz": "44100, 48000, 96000"}, 48000.0, None),
])
def test_sample_rate_is_checked_against_what_the_back_end_states(fake_backend, details, rate_hz, problem) -> None:
    from app.commands.sweep import check_backend
    from app.rig import load_rig, rig_from_dict, read_toml

    data = read_toml(CONFIGS / "demo-rig.toml")
    data["acquisition"]["sample_rate"] = rate_hz
    rig = rig_from_dict(data, "bench-rig.toml")
    fake_backend(details)
    if problem is None:
        assert check_backend("bench", rig) == f"back-end 'bench' can sample at {rate_hz:g} Hz"
    else:
        with pytest.raises(FlamebodeError) as info:
            check_backend("bench", rig)
        assert "acquisition.sample_rate in bench-rig.toml" in str(info.value) and problem in str(info.value)
    assert load_rig  # the demo rig itself is read by the CLI tests above


def test_unavailable_back_end_is_named_not_checked(fake_backend) -> None:
    from app.commands.sweep import check_backend
    from app.rig import load_rig

    fake_backend({}, available=False)
    text = check_backend("bench", load_rig(CONFIGS / "demo-rig.toml"))
    assert text == "back-end 'bench' is not available here (stand-in): sample rate 25600 Hz not checked against the device"


@pytest.mark.slow
def test_a_sweep_that_keeps_no_point_exits_non_zero(tmp_path) -> None:
    # the pressure limit below the rig's noise: every point is skipped, the sweep itself completes
    plan = _plan(tmp_path, extra='[faults]\npressure_max = "1 Pa"\n')
    proc = _cli("sweep", plan, "--fast", "--seed", "3", "--out", tmp_path / "run")
    assert proc.returncode == 1, (proc.stdout, proc.stderr)
    assert "sweep complete: 0 of 2 points settled and kept" in proc.stdout
    assert "no point was kept (0 of 2): every point failed or was skipped" in proc.stderr
    assert "Traceback" not in proc.stderr
