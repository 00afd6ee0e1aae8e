"""The error budget's rig terms: sensor calibration, flow meters, and the area change.

Each systematic term is checked against an actual error of that input: a record analysed
with the input off by its standard uncertainty must move the FTF by the budget's 1σ direction
(first-order propagation of a GUM type B input, JCGM 100:2008 §5.1.2). Records come from the
project's generator (tests/core/synth.py) with little noise, so the shift is the error's own.
Convention x(t) = Re{x̂ e^{+iωt}}.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from app.core import gas
from app.core.response import evaluate_point
from app.rig import rig_from_dict

from synth import make_record, n_tau
from test_uncertainty import rig_variant


def _exact(**sensor_fields):
    """The demo rig (four sensors) without stated systematic uncertainties, sensor fields replaced."""
    data = rig_variant(0.0, light={"dark_offset_uncertainty": 0.0}, temperature_uncertainty=0.0).model_dump()
    data.pop("source_path")
    for s in data["pressure_sensors"]:
        s["position_uncertainty"] = s["gain_uncertainty"] = s["phase_uncertainty"] = 0.0
        s.update(sensor_fields)
    return data


def _rig(data):
    return rig_from_dict(data, "budget")


def _term(point, name: str) -> complex:
    terms = dict(point.budget)
    assert name in terms, sorted(terms)
    return terms[name]


def _quiet_record(rig, freq_hz: float):
    return make_record(rig, freq_hz, n_tau(0.9, 2e-3), noise_pa=1e-5, light_noise_v=1e-7, white=True)


@pytest.mark.parametrize("freq_hz", [100.0, 470.0])
def test_sensor_calibration_terms_match_an_actual_calibration_error(freq_hz):
    # Sensor p2 off by 1 % in gain and 0.3° in phase: analysing the same record once with a
    # correction factor C = 1.01 e^{i 0.3°} on p2 and once without moves F by d_gain + d_phase,
    # the budget's directions for u_gain = 1 %, u_phase = 0.3° (linear to first order, GUM).
    base = _exact()
    rig0 = _rig(base)
    rec = _quiet_record(rig0, freq_hz)
    stated = _exact(gain_uncertainty=0.01, phase_uncertainty=math.radians(0.3))
    budget = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, freq_hz, _rig(stated))
    # the same stated uncertainties in both analyses: they set the fit's weights too
    corrected = _exact(gain_uncertainty=0.01, phase_uncertainty=math.radians(0.3))
    corrected["pressure_sensors"][1]["calibration"] = [{"frequency": 10.0, "gain": 1.01, "phase_deg": 0.3}]
    plain = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, freq_hz, _rig(stated))
    shifted = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, freq_hz, _rig(corrected))
    unstated = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, freq_hz, rig0)
    actual = shifted.ftf / plain.ftf - 1.0
    predicted = _term(budget, "p2 calibration gain") + _term(budget, "p2 calibration phase")
    assert abs(actual) > 1e-3                                  # the error matters at all
    assert abs(actual - predicted) < 0.03 * abs(actual)        # second-order terms only
    # one term per sensor and kind, all four sensors
    assert sum(name.endswith("calibration gain") for name, _ in budget.budget) == 4
    assert budget.gain_ci95 > unstated.gain_ci95 and budget.phase_ci95_rad > unstated.phase_ci95_rad


def test_one_percent_gain_error_on_every_sensor_moves_the_gain_one_percent():
    # A common gain error scales every pressure, hence û, by the same factor: F moves by it 1:1
    # (linearity of the plane-wave fit). The four terms then add up to exactly -1 % of F.
    rig = _rig(_exact(gain_uncertainty=0.01))
    rec = _quiet_record(rig, 300.0)
    pt = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 300.0, rig)
    total = sum(d for name, d in pt.budget if name.endswith("calibration gain"))
    assert total == pytest.approx(-0.01, abs=1e-6)


def test_calibration_uncertainty_from_the_calibration_factors_when_they_state_it():
    data = _exact(gain_uncertainty=0.05, phase_uncertainty=math.radians(2.0))
    data["pressure_sensors"][0]["calibration"] = [
        {"frequency": 100.0, "gain": 1.0, "phase_deg": 0.0, "u_gain": 0.001, "u_phase_deg": 0.1},
        {"frequency": 300.0, "gain": 1.0, "phase_deg": 0.0, "u_gain": 0.003, "u_phase_deg": 0.3}]
    data["pressure_sensors"][1]["calibration"] = [{"frequency": 100.0, "gain": 1.0, "phase_deg": 0.0}]
    rig = _rig(data)
    u_g, u_p = rig.pressure_sensors[0].calibration_uncertainty(200.0)   # interpolated like the factors
    assert u_g == pytest.approx(0.002) and u_p == pytest.approx(math.radians(0.2))
    # a table that does not state its uncertainty, or none: the sensor's stated values
    assert rig.pressure_sensors[1].calibration_uncertainty(200.0) == pytest.approx((0.05, math.radians(2.0)))
    assert rig.pressure_sensors[2].calibration_uncertainty(200.0) == pytest.approx((0.05, math.radians(2.0)))


def test_flow_meter_terms_move_the_gain_one_to_one():
    # ū = ṁ/(ρA): a flow meter reading 1 % high makes ū_ref 1 % × its share of the mass flow
    # too high and û/ū too low by as much: the FTF gain rises by the same fraction, the phase
    # not at all (mass conservation; the meters' reference states fix ṁ, domain.md).
    data = _exact()
    for meter in data["gas"]["flows"]:
        meter["relative_uncertainty"] = 0.01
    rig = _rig(data)
    f = 250.0
    rec = _quiet_record(rig, f)
    pt = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, f, rig)
    terms = {name: d for name, d in pt.budget if name.startswith("flow meter")}
    assert set(terms) == {"flow meter air", "flow meter fuel"}
    # mostly gain: the air meter's error moves û only through the Mach number; the fuel meter's
    # also changes the mixture's speed of sound, hence the wave numbers (a phase part)
    assert abs(terms["flow meter air"].imag) < 0.05 * terms["flow meter air"].real
    # both meters 1 % high: ṁ and ū exactly 1 % high, so the terms add up to 1 %
    assert sum(d.real for d in terms.values()) == pytest.approx(0.01, rel=0.05)
    # against an actual error: the air meter 1 % high in the analysis rig
    high = _exact()
    high["gas"]["flows"][0]["flow"] *= 1.01
    shifted = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, f, _rig(high))
    plain = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, f, _rig(_exact()))
    actual = shifted.ftf / plain.ftf - 1.0
    assert actual.real == pytest.approx(terms["flow meter air"].real, rel=0.02)
    assert actual.imag == pytest.approx(terms["flow meter air"].imag, abs=0.02 * abs(actual))


def test_stated_mean_velocity_uncertainty_is_a_gain_term():
    data = _exact()
    mean = gas.mean_flow(_rig(data))
    data["gas"].pop("flows")
    data["gas"]["composition"] = mean.composition
    data["gas"]["mean_velocity"] = mean.velocity_reference_m_s
    data["gas"]["mean_velocity_uncertainty"] = 0.02
    rig = _rig(data)
    rec = _quiet_record(rig, 200.0)
    pt = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 200.0, rig)
    assert _term(pt, "mean velocity") == pytest.approx(0.02)


def test_hotter_reference_plane_changes_the_velocity_ratio_by_the_density_ratio():
    # Across a compact, low-Mach area change the acoustic volume velocity is continuous,
    # A_s û_s = A_ref û_ref, while the mean velocity follows the mass flux, ū = ṁ/(ρA); so
    # (û/ū)_ref = (û/ū)_sensors · ρ_ref/ρ_sensors (mass and volume-velocity conservation,
    # domain.md "Multi-microphone method"; Munjal, Acoustics of Ducts and Mufflers, ch. 2,
    # for the compact-element jump conditions, from memory). The same record analysed with
    # the reference plane stated 300 K hotter must read its velocity ratio lower by ρ_ref/ρ_s.
    cold = _exact()
    hot = _exact()
    hot["gas"]["temperature_at_reference"] = hot["gas"]["temperature"] + 300.0
    rig_cold, rig_hot = _rig(cold), _rig(hot)
    rec = _quiet_record(rig_cold, 180.0)
    pt_cold = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 180.0, rig_cold)
    pt_hot = evaluate_point(rec.data, rec.channels, rec.sample_rate_hz, 180.0, rig_hot)
    # ideal gas at one pressure and composition: ρ ∝ 1/T
    t_s, t_ref = rig_hot.gas.temperature, rig_hot.gas.temperature_at_reference
    ratio = pt_hot.velocity.amplitude_ratio / pt_cold.velocity.amplitude_ratio
    assert ratio == pytest.approx(t_s / t_ref, rel=1e-9)
    # û itself (the volume velocity over the reference area) is the same in both
    assert pt_hot.velocity.velocity_ref == pytest.approx(pt_cold.velocity.velocity_ref, rel=1e-12)
    # and the area change scales û and ū alike: at one temperature û/ū at the reference plane is
    # û/ū in the sensor duct
    mean = gas.mean_flow(rig_cold)
    u_sensor = pt_cold.velocity.wave_fit.velocity_at(rig_cold.duct.reference_plane)
    assert pt_cold.velocity.amplitude_ratio == pytest.approx(abs(u_sensor) / mean.velocity_sensors_m_s, rel=1e-9)
    assert np.isclose(rig_cold.duct.area_ratio, 4.372)
