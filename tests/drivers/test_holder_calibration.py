"""The common-plane calibration on the simulated burner's calibration holder, end to end.

The holder run tunes the drive to a pressure, records, and the core estimates the factors;
the simulator's truth (read only here) says what they should be. Then the FTF of the same
simulated burner records is evaluated with and without the calibration file applied.
Convention x(t) = Re{x̂ e^{+iωt}}.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from app.calibration_file import write_calibration
from app.services.pressure_calibration import calibration_file_of
from app.services.holder_run import DriveSettings, HolderRun
from app.core import calibration as core
from app.core.response import evaluate_point
from app.rig import Rig, load_rig
from drivers.simulated import SimulatedBurner, truth

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
RIG = CONFIGS / "demo-rig.toml"


def holder_calibration(rig: Rig, freqs: list[float], seed: int | None, scenario: Path | None = None,
                       reference: str = "p1", target_pa: float = 20.0) -> tuple[core.Calibration, SimulatedBurner]:
    sim = SimulatedBurner(rig, scenario=scenario, seed=seed, holder=True)
    names = [s.channel for s in rig.pressure_sensors]
    run = HolderRun(sim, names, [s.sensitivity for s in rig.pressure_sensors], reference,
                    DriveSettings(target_pa=target_pa, ceiling_v=rig.drive.ceiling), 1.0,
                    rig.acquisition.block_duration)
    points = []
    records = run.run(freqs, lambda rec: points.append(
        core.calibrate_record(rec.pressures, names, reference, sim.sample_rate_hz, rec.freq_hz)))
    assert all(abs(r.pressure_pa / target_pa - 1) <= 0.1 and not r.at_ceiling for r in records)
    assert sim.drive_status().amplitude_v == 0.0            # ramped to zero at the end
    assert sim.guard.clip_events == 0
    return core.assemble(points, names, reference), sim


@pytest.mark.slow
def test_holder_calibration_recovers_the_true_sensor_errors_within_their_uncertainty():
    # Two-sided coverage of the stated standard uncertainty over seeds (common practice for an
    # uncertainty estimate): about 68 % within 1 u and 95 % within 2 u, for gain and phase.
    # The demo scenario's sensors: a 3 % / 0.3° spread drawn from the seed, and p2 set off by
    # 4.5 % and -0.6° ([sensors.errors.p2]).
    rig = load_rig(RIG)
    freqs = [120.0, 330.0, 610.0, 980.0, 1450.0, 1900.0]
    z = []
    for seed in (1, 2, 3, 4):
        cal, sim = holder_calibration(rig, freqs, seed)
        true = truth.true_relative_factors(sim, "p1")
        for name in ("p2", "p3", "p4"):
            j = cal.column(name)
            err = cal.factor[:, j] / true[name]
            z += list(np.log(np.abs(err)) / cal.u_gain_rel[:, j]) + list(np.angle(err) / cal.u_phase_rad[:, j])
        if seed == 1:   # p2's stated error (the scenario file), relative to p1's drawn one
            r_p1 = truth.true_sensor_factors(sim)["p1"] / rig.sensor("p1").sensitivity
            expected = r_p1 / (1.045 * np.exp(-1j * math.radians(0.6)))
            j = cal.column("p2")
            err = cal.factor[:, j] / expected
            assert np.all(np.abs(np.log(np.abs(err))) < 3 * cal.u_gain_rel[:, j])
            assert np.all(np.abs(np.angle(err)) < 3 * cal.u_phase_rad[:, j])
    z = np.abs(np.array(z))
    assert len(z) == 4 * 6 * 3 * 2
    assert 0.55 <= np.mean(z < 1.0) <= 0.82, np.mean(z < 1.0)
    assert 0.90 <= np.mean(z < 2.0) <= 0.995, np.mean(z < 2.0)


def _quiet_scenario(tmp_path: Path) -> Path:
    """The demo scenario, quiet and without drift, with p1 absolutely calibrated.

    A relative calibration cannot find the reference sensor's own error (its nominal
    sensitivity sets the scale of û and so of the FTF gain), so here the reference sensor is
    the one a laboratory has calibrated absolutely (pistonphone); the others keep the demo's
    3 % spread and p2's stated error. Quiet and without drift so that the FTF's random error
    and the drift of ū stay well below the 0.5 % the check asks for."""
    text = (CONFIGS / "demo-scenario.toml").read_text(encoding="utf-8")
    for old, new in (('rig = "demo-rig.toml"', f"rig = {str(RIG)!r}"),
                     ('pressure_rms = "4 Pa"', 'pressure_rms = "0.2 Pa"'),
                     ("light_flame_noise = 0.04", "light_flame_noise = 0.002"),
                     ("temperature_swing_k = 0.5", "temperature_swing_k = 0.0"),
                     ("flow_swing = 0.003", "flow_swing = 0.0")):
        assert old in text
        text = text.replace(old, new)
    path = tmp_path / "quiet-scenario.toml"
    path.write_text(text + '\n[sensors.errors.p1]\ngain = 1.0\nphase = "0 deg"\n', encoding="utf-8")
    return path


def _burner_record(sim: SimulatedBurner, freq_hz: float, ratio: float, seconds: float) -> np.ndarray:
    """A record at peak |û|/ū = ``ratio`` (drive set from the truth: the test is not about tuning)."""
    per_volt = abs(truth.true_velocity_per_volt(sim, freq_hz, 0.1)) / truth.true_mean_velocity_reference(sim)
    sim.set_drive(freq_hz, min(ratio / per_volt, 0.95 * sim.drive_status().ceiling_v))
    while sim.drive_status().ramping:
        sim.read_block()
    for _ in range(3):
        sim.read_block()
    return np.concatenate([sim.read_block().data for _ in range(round(seconds / 0.1))], axis=1)


@pytest.mark.slow
def test_ftf_gain_with_the_calibration_file_is_within_half_a_percent_of_the_truth(tmp_path):
    # On the same simulated records, the FTF gain with the measured calibration applied is
    # within 0.5 % of the simulator's true FTF, where without it the 3 % sensor spread makes
    # errors of percents.
    rig = load_rig(RIG)
    scenario = _quiet_scenario(tmp_path)
    cal, _ = holder_calibration(rig, [float(f) for f in range(100, 1401, 100)], None, scenario)
    write_calibration(tmp_path / "cal.toml", calibration_file_of(cal, rig, {"backend": "simulated"}, 4400.0))
    text = RIG.read_text(encoding="utf-8").replace("\n[duct]", '\npressure_calibration = "cal.toml"\n\n[duct]', 1)
    (tmp_path / "rig.toml").write_text(text, encoding="utf-8")
    calibrated = load_rig(tmp_path / "rig.toml")

    sim = SimulatedBurner(rig, scenario=scenario)
    sim.start()
    raw_err, cal_err, raw_ci = [], [], []
    for f in (100.0, 250.0, 400.0, 550.0, 700.0, 850.0, 1000.0, 1300.0):
        data = _burner_record(sim, f, 0.05, 2.0)
        raw = evaluate_point(data, sim.channels, sim.sample_rate_hz, f, rig)
        fixed = evaluate_point(data, sim.channels, sim.sample_rate_hz, f, calibrated)
        raw_err.append(raw.gain / abs(truth.true_ftf(sim, f, raw.velocity.amplitude_ratio)) - 1)
        cal_err.append(fixed.gain / abs(truth.true_ftf(sim, f, fixed.velocity.amplitude_ratio)) - 1)
        raw_ci.append(raw.gain_ci95 / raw.gain)
    sim.stop()
    raw_err, cal_err = np.abs(raw_err), np.abs(cal_err)
    assert np.all(cal_err < 0.005), cal_err
    # without the calibration the 3 % spread costs percents (less since the plane-wave fit weights
    # each sensor by its stated tolerance too), and the uncalibrated intervals, which state that
    # tolerance, still cover those errors
    assert np.max(raw_err) > 0.02 and np.median(raw_err) > 0.01, raw_err
    assert np.mean(raw_err) > 4 * np.mean(cal_err), (raw_err, cal_err)
    assert np.all(raw_err <= np.array(raw_ci)), (raw_err, raw_ci)


def test_holder_mode_has_no_flame_and_one_pressure_at_every_sensor():
    # The holder's premise (common practice): below the cut-on every sensor at one plane sees
    # the same pressure; without a flame the light channel reads its dark offset only.
    rig = load_rig(RIG)
    sim = SimulatedBurner(rig, seed=2, holder=True)
    assert not sim.flame_on and sim.warnings == () and "calibration holder" in sim.identity()["model"]
    assert np.all(sim.model.sensor_positions_m == rig.sensor("p1").position)
    state = sim.model.nominal_state()
    p = sim.model.response(700.0, 0.1, state, flame=False).pressure_per_v
    assert np.ptp(np.abs(p)) == 0.0 and np.ptp(np.angle(p)) == 0.0
    sim.start()
    sim.set_drive(700.0, 0.1)
    light = np.concatenate([sim.read_block().data[sim.channels.index("pmt")] for _ in range(5)])
    assert abs(light.mean() - sim.model.dark_offset_v) < 1e-3
    with pytest.raises(ValueError, match="outside the sensor duct"):
        SimulatedBurner(rig, seed=2, holder=True, holder_plane=1.0)


@pytest.mark.slow
def test_soft_start_on_a_rig_with_sharp_resonances():
    # The resonant scenario's drive-to-pressure ratio changes by far more than 10x between
    # neighbouring frequencies: opening each frequency at a tenth of the previous drive and
    # rising by at most 4x per step keeps every tuning window within 2.5x the target pressure,
    # and every frequency still reaches the target under the ceiling.
    scenario = CONFIGS / "resonant-scenario.toml"
    rig = load_rig(RIG)
    sim = SimulatedBurner(rig, scenario=scenario, seed=1, holder=True)
    names = [s.channel for s in rig.pressure_sensors]
    run = HolderRun(sim, names, [s.sensitivity for s in rig.pressure_sensors], "p1",
                    DriveSettings(target_pa=20.0, ceiling_v=rig.drive.ceiling), 0.3, rig.acquisition.block_duration)
    seen: list[float] = []
    measure = run._pressure
    run._pressure = lambda f: seen.append(measure(f)) or seen[-1]
    records = run.run([float(f) for f in range(100, 2001, 50)], lambda rec: None)
    assert max(seen) <= 2.5 * 20.0, max(seen)
    assert all(abs(r.pressure_pa / 20.0 - 1) <= 0.1 and not r.at_ceiling for r in records)
    assert sim.guard.clip_events == 0 and sim.drive_status().amplitude_v == 0.0
