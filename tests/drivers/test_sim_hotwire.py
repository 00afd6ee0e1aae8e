"""The simulated burner's hot-wire against the analysis's cross-check (app.core.hotwire via
app.core.response): without a convective disturbance the wire and the multi-microphone velocity
at its position agree within their interval and are coherent; the incoherent disturbance lowers
the coherence, and a convected wave locked to the forcing makes the difference grow, as the
trade expects of a hot-wire beside wall-pressure sensors (common practice: the multi-microphone
method keeps only acoustic waves, a hot-wire sees vorticity too).

The wire's true velocity is the simulator's own network (drivers.simulated.acoustics) read
through an inverse King's law; the truth is read only from drivers.simulated.truth / the model
here, never handed to the analysis. Time convention x(t) = Re{x̂ e^{+iωt}}.
"""

from __future__ import annotations

import numpy as np
import pytest

from app.core.response import evaluate_point
from app.rig import load_rig, rig_from_dict
from drivers.simulated import SimulatedBurner, truth
from drivers.simulated.scenario import load_scenario

DRIVE_V = 0.3   # peak volts: the pressures stay well inside the ADC range at every test frequency
WIRE = dict(channel="hw", position=-0.40, kings_a=1.4, kings_b=0.9, kings_n=0.45, gain_uncertainty=0.01,
            position_uncertainty=0.5e-3)


@pytest.fixture(scope="module")
def rig():
    base = load_rig("configs/demo-rig.toml")
    data = base.model_dump(exclude={"source_path"})
    data["hot_wire"] = WIRE
    return rig_from_dict(data, base.source_path).model_copy(update={"source_path": base.source_path})


def _point(rig, freq_hz=300.0, seed=3, exact_sensors=False, **wire):
    sc = load_scenario("configs/demo-scenario.toml")
    sc = sc.model_copy(update={"hot_wire": sc.hot_wire.model_copy(update=wire)})
    if exact_sensors:        # the sensors as the rig states them (the rig still states 3 % / 0.3°)
        sc = sc.model_copy(update={"sensors": sc.sensors.model_copy(
            update={"sensitivity_spread": 0.0, "phase_spread": 0.0, "errors": {}})})
    sim = SimulatedBurner(rig, scenario=sc, seed=seed)
    sim.start()
    sim.set_drive(freq_hz, DRIVE_V)
    while sim.drive_status().ramping:
        sim.read_block()
    for _ in range(3):
        sim.read_block()
    data = np.concatenate([sim.read_block().data for _ in range(30)], axis=1)
    return sim, evaluate_point(data, sim.channels, sim.sample_rate_hz, freq_hz, rig)


def test_the_rig_lists_the_wire_and_the_simulator_records_it(rig):
    sim = SimulatedBurner(rig, seed=3)
    assert sim.channels[-1] == "hw" and rig.input_channels[-1] == "hw"
    sim.start()
    e = sim.read_block().channel("hw")
    assert np.all(e > np.sqrt(WIRE["kings_a"]))           # above the zero-flow voltage: flow at the wire


@pytest.mark.parametrize("freq_hz", [160.0, 300.0, 520.0])
def test_without_convective_disturbance_the_wire_agrees_with_the_multi_microphone_velocity(rig, freq_hz):
    sim, pt = _point(rig, freq_hz, exact_sensors=True)
    q = pt.quality
    assert abs(q["hotwire_ratio"] - 1.0) <= q["hotwire_ratio_ci95"]     # within its 95 % interval
    assert abs(q["hotwire_phase_diff_rad"]) <= q["hotwire_phase_ci95_rad"]
    assert abs(q["hotwire_ratio"] - 1.0) < 0.01                          # exact sensors: noise only
    assert q["hotwire_diff_z"] < 3.0
    assert q["hotwire_coherence"] > 0.95
    assert not any("hot-wire" in w for w in pt.warnings)
    # and the wire itself reads the simulator's true velocity at its position per drive volt (the
    # drive reference channel fixes the time origin; truth from the model: tests only)
    true_per_v = truth.true_hot_wire_velocity_per_volt(sim, freq_hz, DRIVE_V)
    wire_u = q["hotwire_ratio"] * np.exp(1j * q["hotwire_phase_diff_rad"]) * pt.velocity.wave_fit.velocity_at(-0.40)
    assert abs(wire_u / pt.velocity.drive_phasor / true_per_v - 1.0) < 0.01


def test_with_the_demo_s_uncalibrated_sensors_the_difference_stays_within_the_stated_errors(rig):
    q = _point(rig, 300.0)[1].quality            # the demo's sensors: 3 % spread, one sensor 4.5 % off
    assert q["hotwire_diff_z"] < 3.0 and q["hotwire_ratio_ci95"] > 0.02


def test_the_incoherent_disturbance_lowers_the_coherence(rig):
    qs = [_point(rig, 300.0, convective_rms=rms, convective_corner=400.0)[1].quality for rms in (0.0, 0.8, 2.0)]
    coh = [q["hotwire_coherence"] for q in qs]
    assert coh[0] > coh[1] > coh[2]
    half_widths = [q["hotwire_ratio_ci95"] for q in qs]          # the wire's own noise widens its interval
    assert half_widths[0] < half_widths[1] < half_widths[2]
    assert coh[0] > 0.95 and coh[2] < 0.8
    pt = _point(rig, 300.0, convective_rms=2.0, convective_corner=400.0)[1]
    assert any("coherent only" in w for w in pt.warnings)


def test_a_convected_wave_makes_the_difference_grow(rig):
    z = [_point(rig, 300.0, convected_ratio=r)[1].quality["hotwire_diff_z"] for r in (0.0, 0.1, 0.3)]
    assert z[0] < z[1] < z[2]
    assert z[0] < 3.0 < z[1]
    pt = _point(rig, 300.0, convected_ratio=0.3)[1]
    assert any("differs from the multi-microphone" in w for w in pt.warnings)
    assert pt.quality["hotwire_coherence"] > 0.95          # locked to the forcing: coherent, yet different


def test_a_wire_whose_stated_law_is_wrong_disagrees(rig):
    # the scenario's true B 8 % above the rig file's: the wire reads the fluctuation wrongly
    q = _point(rig, 300.0, exact_sensors=True, kings_b=WIRE["kings_b"] * 1.08)[1].quality
    assert q["hotwire_diff_z"] > 3.0 and abs(q["hotwire_ratio"] - 1.0) > 0.03
    assert q["hotwire_coherence"] > 0.95


def test_a_record_without_the_wire_s_channel_says_so(rig):
    plain = load_rig("configs/demo-rig.toml")
    sim = SimulatedBurner(plain, seed=3)
    sim.start()
    sim.set_drive(300.0, DRIVE_V)
    while sim.drive_status().ramping:
        sim.read_block()
    data = np.concatenate([sim.read_block().data for _ in range(10)], axis=1)
    pt = evaluate_point(data, sim.channels, sim.sample_rate_hz, 300.0, rig)
    assert not any(k.startswith("hotwire") for k in pt.quality)
    assert any("no such channel" in w for w in pt.warnings)


# ------------------------------------------------------------------ carried to the reference plane

@pytest.mark.parametrize("freq_hz", [160.0, 300.0, 520.0])
def test_the_wire_carried_to_the_reference_plane_reads_the_velocity_the_drive_was_tuned_to(rig, freq_hz):
    # Through the plane-wave field's transfer û_ref/û(x_hw) the wire's reading becomes its own
    # u'/ū at the reference plane; without a convective disturbance it must match the simulator's
    # true u'/ū there (truth module, tests only) within its 95 % interval, and the point's.
    sim, pt = _point(rig, freq_hz, exact_sensors=True)
    q = pt.quality
    truth_ratio = truth.true_amplitude_ratio(sim, freq_hz, DRIVE_V)
    assert abs(q["hotwire_velocity_ratio"] - truth_ratio) <= q["hotwire_velocity_ratio_ci95"]
    assert abs(q["hotwire_velocity_ratio"] / pt.velocity.amplitude_ratio - 1.0) < 0.02
    # its interval is not a blanket: under 10 % here (the wire's 1 % gain and the rig's stated 3 % / 0.3°
    # sensor calibrations carried through the transfer)
    assert 0.005 < q["hotwire_velocity_ratio_ci95"] / q["hotwire_velocity_ratio"] < 0.10


def test_a_locked_convective_wave_moves_the_carried_reading_away_from_the_tuned_velocity(rig):
    # the wire sees the convected wave, the wall pressures do not: carried, it no longer reads the
    # velocity the drive was tuned to (common practice: why a hot-wire cross-check is made)
    clean = _point(rig, 300.0, exact_sensors=True)[1].quality
    sim, dirty = _point(rig, 300.0, exact_sensors=True, convected_ratio=0.6)
    shift = abs(dirty.quality["hotwire_velocity_ratio"] / dirty.velocity.amplitude_ratio - 1.0)
    assert shift > 3 * clean["hotwire_velocity_ratio_ci95"] / clean["hotwire_velocity_ratio"]


def test_near_a_velocity_node_the_wire_is_compared_at_its_position_only(rig):
    # A standing wave with a velocity node at the wire (A⁻ = A⁺ e^{-2ikx₀}, no flow: û(x₀) = 0);
    # carrying there would divide by ~0, so the figures are left out and a note says why.
    from app.core import gas, hotwire
    from app.core.multimic import decompose
    from app.core.response import _hot_wire_at_reference, medium_from

    medium = medium_from(gas.mean_flow(rig)).__class__(**{**medium_from(gas.mean_flow(rig)).__dict__, "mach": 0.0})
    f, x0 = 300.0, WIRE["position"]
    k = 2 * np.pi * f / medium.speed_of_sound_m_s
    xs = np.array([s.position for s in rig.pressure_sensors])
    a_plus = 100.0
    a_minus = a_plus * np.exp(-2j * k * x0)
    p = a_plus * np.exp(-1j * k * xs) + a_minus * np.exp(1j * k * xs)
    wf = decompose(p, xs, f, rig.duct.radius_m, medium, damping=False, noise_var=1e-6)
    check = hotwire.HotWireCheck(0.01 + 0j, wf.velocity_at(x0), 1e-10, 1e-10, 0.99, 16, 5.0, 0.0)
    figures, notes = _hot_wire_at_reference(check, wf, rig, 5.0, f)
    assert figures == {} and len(notes) == 1 and "velocity node" in notes[0]
    # the same wire away from the node is carried
    wf2 = decompose(a_plus * np.exp(-1j * k * xs), xs, f, rig.duct.radius_m, medium, damping=False, noise_var=1e-6)
    check2 = hotwire.HotWireCheck(wf2.velocity_at(x0), wf2.velocity_at(x0), 1e-10, 1e-10, 0.99, 16, 5.0, 0.0)
    figures2, notes2 = _hot_wire_at_reference(check2, wf2, rig, 5.0, f)
    u_ref = wf2.velocity_at(rig.duct.reference_plane) * rig.duct.area_ratio
    assert notes2 == () and figures2["hotwire_velocity_ratio"] == pytest.approx(abs(u_ref) / 5.0, rel=1e-9)
