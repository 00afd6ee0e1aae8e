"""Monte Carlo: the FTF point's 95 % intervals hold the truth 93–97 % of the time, no more, no less.

Records from the project's generator (tests/core/synth.py) with fresh noise per trial
(tests/core/montecarlo.py): signal-to-noise bands 10, 20, 40 dB; independent, correlated,
acoustic-wave and light-shared noise (both signs); reference plane at x = 0 and 0.2 m
downstream of it; 2 and 4 sensors; short records (0.04 s at 220 Hz: 8.8 periods, two
segments of 4.4 periods for the noise estimate) and long ones (0.5 s, 2 s).

Check (common practice for an uncertainty statement; JCGM 101:2008 §8 validates a GUM
interval the same way, by simulation): coverage of the stated 95 % interval within
[0.93, 0.97] for gain and for phase. With 1200 trials the binomial standard error at 95 %
is 0.63 %, so the window is ±3.2 standard errors: it fails for intervals that are too wide
as well as too narrow. Fixed seeds. Convention x(t) = Re{x̂ e^{+iωt}}.
"""

from __future__ import annotations

import numpy as np
import pytest

from app.rig import rig_from_dict

from montecarlo import coverage
from test_uncertainty import rig_variant

TRIALS = 1200
FREQ_HZ = 220.0
LONG, SHORT, VERY_LONG = 0.5, 0.04, 2.0

# (snr_db, noise, n_sensors, reference plane x in m, duration s)
KNOWN_TOO_WIDE = pytest.mark.xfail(strict=True, reason=(
    "known: at 10 dB with light noise positively correlated with the velocity's (errors that cancel in "
    "the ratio) the symmetric interval about the estimate is too wide: gain coverage 97.3 % of 3000 "
    "(0.5 s) and 97.6 % of 2000 (2 s) trials; phase 96.1-96.2 %"))
CASES = [
    (10, "independent", 4, 0.0, LONG),
    (20, "independent", 2, 0.0, SHORT),
    (40, "independent", 4, 0.2, LONG),
    (10, "correlated", 4, 0.2, LONG),
    (20, "correlated", 2, 0.0, SHORT),
    (40, "correlated", 4, 0.0, VERY_LONG),
    (40, "acoustic", 4, 0.0, LONG),
    (20, "acoustic", 4, 0.2, SHORT),
    (10, "acoustic", 2, 0.0, LONG),
    (10, "shared+", 4, 0.0, LONG),
    (20, "shared+", 2, 0.2, LONG),
    (10, "shared-", 4, 0.2, SHORT),
    (20, "shared-", 4, 0.2, LONG),
    (20, "shared+", 4, 0.0, LONG),
    (40, "shared+", 4, 0.2, VERY_LONG),
]
PARAMS = [pytest.param(seed, *case, id=f"{case[0]}dB-{case[1]}-{case[2]}sensors-x{case[3]}-{case[4]}s",
                       marks=[KNOWN_TOO_WIDE] if case[:3] == (10, "shared+", 4) else [])
          for seed, case in enumerate(CASES, start=1)]
QUICK = (40, "shared-", 2, 0.0, SHORT)


def exact_rig(n_sensors: int, reference_x_m: float):
    """The demo rig's sensors (all four, or the first and third) with exact positions,
    calibrations, temperature and dark offset (the generator makes none of those errors) and the reference
    plane at x."""
    base = rig_variant(0.0, (0, 1, 2, 3) if n_sensors == 4 else (0, 2), light={"dark_offset_uncertainty": 1e-9},
                       temperature_uncertainty=0.0)
    data = base.model_dump()
    data.pop("source_path")
    for s in data["pressure_sensors"]:
        s["position_uncertainty"] = s["gain_uncertainty"] = s["phase_uncertainty"] = 0.0
    data["duct"]["reference_plane"] = reference_x_m
    return rig_from_dict(data, "monte-carlo")


def _check(snr_db, noise, n_sensors, x_ref, duration, seed):
    cov = coverage(exact_rig(n_sensors, x_ref), FREQ_HZ, snr_db, noise, TRIALS, duration, seed=seed)
    label = f"{snr_db} dB, {noise}, {n_sensors} sensors, x_ref {x_ref} m, {duration} s: {cov}"
    print(label)
    assert 0.93 <= cov.gain <= 0.97, label
    assert 0.93 <= cov.phase <= 0.97, label


def rig_with_stated_errors(n_sensors: int, reference_x_m: float, gain_u: float, phase_u_deg: float,
                           flow_u: tuple[float, float]):
    """exact_rig with each sensor's calibration uncertainty and each flow meter's stated."""
    data = exact_rig(n_sensors, reference_x_m).model_dump()
    data.pop("source_path")
    for s in data["pressure_sensors"]:
        s["gain_uncertainty"] = gain_u
        s["phase_uncertainty"] = float(np.radians(phase_u_deg))
    for meter, u in zip(data["gas"]["flows"], flow_u):
        meter["relative_uncertainty"] = u
    return rig_from_dict(data, "monte-carlo-rig-errors")


# (snr_db, noise, n_sensors, x_ref, duration, gain u, phase u in deg, flow-meter u (air, fuel))
RIG_ERROR_CASES = [
    (40, "independent", 4, 0.2, LONG, 0.01, 0.3, (0.01, 0.02)),     # the rig's errors dominate
    (20, "acoustic", 2, 0.0, LONG, 0.02, 0.5, (0.015, 0.0)),         # comparable to the noise
    (20, "shared-", 4, 0.2, LONG, 0.01, 0.3, (0.01, 0.0)),           # GLS weighted by the total error
]


@pytest.mark.slow
@pytest.mark.parametrize("case", RIG_ERROR_CASES, ids=lambda c: f"{c[0]}dB-{c[1]}-{c[2]}sensors-gain{c[5]}")
def test_coverage_with_sensor_calibration_and_flow_meter_errors(case):
    # Each trial's record is made by a rig whose sensors' gains and phases and whose flow
    # meters are off by draws from the standard uncertainties the rig file states (GUM type B,
    # JCGM 100:2008 §4.3); the stated interval must then hold the truth at its nominal rate,
    # two-sided as above (JCGM 101:2008 §8).
    snr_db, noise, n_sensors, x_ref, duration, gain_u, phase_u, flow_u = case
    rig = rig_with_stated_errors(n_sensors, x_ref, gain_u, phase_u, flow_u)
    cov = coverage(rig, FREQ_HZ, snr_db, noise, TRIALS, duration, seed=500 + snr_db, rig_errors=True)
    label = f"{case}: {cov}"
    print(label)
    assert 0.93 <= cov.gain <= 0.97, label
    assert 0.93 <= cov.phase <= 0.97, label


def test_coverage_quick_case():
    _check(*QUICK, seed=100)


@pytest.mark.slow
@pytest.mark.parametrize(("seed", "snr_db", "noise", "n_sensors", "x_ref", "duration"), PARAMS)
def test_coverage_of_the_95_percent_interval(seed, snr_db, noise, n_sensors, x_ref, duration):
    _check(snr_db, noise, n_sensors, x_ref, duration, seed=seed)
