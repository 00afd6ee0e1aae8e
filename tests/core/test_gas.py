"""Tests of app.core.gas: mixture properties, metered flows, mean flow of a rig.

Checks against handbook values, Cantera (GRI-Mech 3.0 data, ideal gas, mixture-averaged
transport), combustion stoichiometry and the ideal-gas law. No phases are checked here.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from app.core import gas
from app.core.gas import (R_UNIVERSAL, GasPropertyError, bulk_velocity, equivalence_ratio, mean_flow, mix_flows,
                          mixture_state, standard_density)
from app.errors import FlamebodeError
from app.rig import DRY_AIR, load_rig, read_toml, rig_from_dict

ATM_PA = 101325.0
T20_K = 293.15
AIR_O2_N2 = {"O2": 1.0 / 4.76, "N2": 3.76 / 4.76}  # air as O2 + 3.76 N2 (combustion practice)


def premixed(fuel: dict[str, float], phi: float) -> dict[str, float]:
    """Fuel blend + air (O2 + 3.76 N2) at equivalence ratio ``phi``, by stoichiometry."""
    o2_per_fuel = sum(frac * gas.O2_DEMAND[name] for name, frac in fuel.items()) / phi
    moles = {**fuel, "O2": o2_per_fuel, "N2": 3.76 * o2_per_fuel}
    total = sum(moles.values())
    return {k: v / total for k, v in moles.items()}


# --------------------------------------------------------------------- handbook values


def test_dry_air_at_20c_matches_handbook():
    state = mixture_state(DRY_AIR, T20_K, ATM_PA)
    # handbook tables: dry air 20 degC, 101.325 kPa -> rho = 1.2041 kg/m3
    assert state.density_kg_m3 == pytest.approx(1.2041, rel=1e-3)
    # ISO 9613-1: speed of sound 343.2 m/s at 293.15 K
    assert state.speed_of_sound_m_s == pytest.approx(343.2, rel=1e-3)
    # ideal diatomic gas: gamma close to 7/5 (kinetic theory, common practice)
    assert state.gamma == pytest.approx(1.400, abs=2e-3)


def test_air_transport_at_300k_matches_handbook():
    state = mixture_state(DRY_AIR, 300.0, ATM_PA)
    # Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, Table A.4, air at 300 K
    # (from memory): mu = 184.6e-7 Pa s, k = 26.3e-3 W/(m K), Pr = 0.707
    assert state.dynamic_viscosity_pa_s == pytest.approx(184.6e-7, rel=0.02)
    assert state.thermal_conductivity_w_m_k == pytest.approx(26.3e-3, rel=0.05)
    assert state.prandtl == pytest.approx(0.707, rel=0.03)
    assert state.kinematic_viscosity_m2_s == pytest.approx(state.dynamic_viscosity_pa_s / state.density_kg_m3)


# --------------------------------------------------------------------- stoichiometry


@pytest.mark.parametrize("fuel, ratio", [("CH4", 9.52), ("H2", 2.38)])
def test_stoichiometric_air_to_fuel_volume_ratio(fuel, ratio):
    # combustion stoichiometry (common practice): CH4 + 2(O2 + 3.76 N2), H2 + 0.5(O2 + 3.76 N2)
    def phi_minus_one(air_per_fuel: float) -> float:
        total = 1.0 + air_per_fuel
        comp = {fuel: 1.0 / total, "O2": air_per_fuel / total / 4.76, "N2": air_per_fuel * 3.76 / 4.76 / total}
        return equivalence_ratio(comp) - 1.0

    from scipy.optimize import brentq

    assert brentq(phi_minus_one, 0.5, 50.0, xtol=1e-10) == pytest.approx(ratio, abs=0.005)


def test_stoichiometric_methane_in_dry_air_molar_mass_and_density():
    # combustion practice: CH4 + 9.52 volumes of air; with handbook dry air (argon included)
    # the mixture has M = 27.74 g/mol and rho(20 degC, 1 atm) = 1.1530 kg/m3 (derived, ideal gas).
    # (With air taken as O2 + 3.76 N2 the same mixture would be 27.63 g/mol.)
    comp = {"CH4": 1.0 / 10.52, **{k: v * 9.52 / 10.52 for k, v in DRY_AIR.items()}}
    state = mixture_state(comp, T20_K, ATM_PA)
    assert state.molar_mass_kg_mol * 1e3 == pytest.approx(27.74, abs=0.005)
    assert state.density_kg_m3 == pytest.approx(1.1530, rel=2e-4)
    assert equivalence_ratio(comp) == pytest.approx(1.0, abs=0.005)  # 9.52 x 0.20946 O2 = 1.994 mol


def test_equivalence_ratio_of_air_and_pure_fuel_limits():
    assert equivalence_ratio(DRY_AIR) == 0.0  # no fuel (definition)
    with pytest.raises(GasPropertyError, match="no O2"):
        equivalence_ratio({"CH4": 1.0})


# --------------------------------------------------------------------- Cantera


@pytest.fixture(scope="module")
def ct_gas():
    ct = pytest.importorskip("cantera")
    solution = ct.Solution("gri30.yaml")
    solution.transport_model = "mixture-averaged"
    return solution


def _cantera_state(ct_gas, comp, temperature_k, pressure_pa=ATM_PA):
    ct_gas.TPX = temperature_k, pressure_pa, comp
    gamma = ct_gas.cp_mass / ct_gas.cv_mass
    sound = math.sqrt(gamma * R_UNIVERSAL * temperature_k / (ct_gas.mean_molecular_weight * 1e-3))
    prandtl = ct_gas.cp_mass * ct_gas.viscosity / ct_gas.thermal_conductivity
    return ct_gas.density, sound, ct_gas.cp_mass, ct_gas.viscosity, prandtl


def test_cantera_domain_values_air_and_lean_methane(ct_gas):
    # Cantera gri30 air as O2 0.21 / N2 0.79 at 20 degC: 1.1994 kg/m3, 343.87 m/s
    air = mixture_state({"O2": 0.21, "N2": 0.79}, T20_K, ATM_PA)
    assert air.density_kg_m3 == pytest.approx(1.1994, rel=1e-3)
    assert air.speed_of_sound_m_s == pytest.approx(343.87, rel=1e-3)
    # Cantera gri30 CH4-air at phi = 0.8 (air as O2 + 3.76 N2), 20 degC: 1.1581 kg/m3, 348.77 m/s
    lean = mixture_state(premixed({"CH4": 1.0}, 0.8), T20_K, ATM_PA)
    assert lean.density_kg_m3 == pytest.approx(1.1581, rel=1e-3)
    assert lean.speed_of_sound_m_s == pytest.approx(348.77, rel=1e-3)
    # and the live Cantera object agrees with those recorded values
    rho, sound, *_ = _cantera_state(ct_gas, premixed({"CH4": 1.0}, 0.8), T20_K)
    assert (rho, sound) == pytest.approx((1.1581, 348.77), rel=2e-4)


@pytest.mark.parametrize("fuel", [{"CH4": 1.0}, {"CH4": 0.7, "H2": 0.3}, {"CH4": 0.3, "H2": 0.7}])
@pytest.mark.parametrize("phi", [0.6, 0.8, 1.0, 1.2])
def test_thermo_against_cantera(ct_gas, fuel, phi):
    comp = premixed(fuel, phi)
    for temperature_k in (250.0, T20_K, 400.0, 600.0):
        ours = mixture_state(comp, temperature_k, ATM_PA)
        rho, sound, cp, _, _ = _cantera_state(ct_gas, comp, temperature_k)
        # Cantera, gri30.yaml ideal gas. Below 300 K Cantera extrapolates GRI's N2 polynomial
        # (its range starts at 300 K), which puts its cp about 0.4 % under the NASA fit at 250 K.
        assert ours.density_kg_m3 == pytest.approx(rho, rel=5e-3), temperature_k
        assert ours.speed_of_sound_m_s == pytest.approx(sound, rel=5e-3), temperature_k
        assert ours.cp_j_kg_k == pytest.approx(cp, rel=5e-3), temperature_k


@pytest.mark.parametrize("comp", [{"O2": 0.21, "N2": 0.79}, DRY_AIR, premixed({"CH4": 1.0}, 0.7),
                                  premixed({"CH4": 1.0}, 1.2), premixed({"CH4": 0.5, "H2": 0.5}, 0.8),
                                  premixed({"H2": 1.0}, 0.5)])
def test_transport_against_cantera(ct_gas, comp):
    for temperature_k in (250.0, T20_K, 450.0, 700.0):
        ours = mixture_state(comp, temperature_k, ATM_PA)
        _, _, _, viscosity, prandtl = _cantera_state(ct_gas, comp, temperature_k)
        # Cantera mixture-averaged transport (gri30.yaml): within 5 %
        assert ours.dynamic_viscosity_pa_s == pytest.approx(viscosity, rel=0.05), temperature_k
        assert ours.prandtl == pytest.approx(prandtl, rel=0.05), temperature_k


@pytest.mark.parametrize("fuel", ["CH4", "H2", "C3H8", "NH3", "CH4:0.6, H2:0.3, NH3:0.1"])
@pytest.mark.parametrize("phi", [0.6, 1.0, 1.3])
def test_equivalence_ratio_against_cantera(ct_gas, fuel, phi):
    # Cantera's set_equivalence_ratio works from element balances, independent of our O2 table
    ct_gas.set_equivalence_ratio(phi, fuel, "O2:1, N2:3.76")
    assert equivalence_ratio(ct_gas.mole_fraction_dict()) == pytest.approx(phi, rel=1e-9)


# --------------------------------------------------------------------- standard flows


def test_standard_flow_example_in_a_20mm_bore():
    volume_flow_m3_s = 100e-3 / 60.0  # 100 standard L/min
    area_m2 = math.pi * 0.010**2
    state = mixture_state(DRY_AIR, T20_K, ATM_PA)
    # derived from the ideal-gas law: referenced to 0 degC -> 5.694 m/s; to 20 degC -> 5.305 m/s
    for ref_t_k, expected in ((273.15, 5.694), (T20_K, 5.305)):
        mass_flow, comp = mix_flows([(DRY_AIR, volume_flow_m3_s, ref_t_k, ATM_PA)])
        assert mass_flow == pytest.approx(standard_density(DRY_AIR, ref_t_k, ATM_PA) * volume_flow_m3_s)
        assert comp == pytest.approx(DRY_AIR)
        assert bulk_velocity(mass_flow, state.density_kg_m3, area_m2) == pytest.approx(expected, abs=6e-4)


def test_mix_flows_combines_moles_not_volumes():
    # ideal-gas law: 1 standard L at 0 degC holds 293.15/273.15 times the moles of 1 L at 20 degC
    mass, comp = mix_flows([({"N2": 1.0}, 1e-3, 273.15, ATM_PA), ({"O2": 1.0}, 1e-3, T20_K, ATM_PA)])
    assert comp["N2"] / comp["O2"] == pytest.approx(T20_K / 273.15, rel=1e-12)
    n_n2 = ATM_PA * 1e-3 / (R_UNIVERSAL * 273.15)
    n_o2 = ATM_PA * 1e-3 / (R_UNIVERSAL * T20_K)
    assert mass == pytest.approx(n_n2 * 28.014e-3 + n_o2 * 31.998e-3, rel=1e-9)  # IUPAC molar masses


@pytest.fixture
def demo_rig(demo_rig_path):
    return load_rig(demo_rig_path)


def test_mean_flow_of_demo_rig_is_plausible(demo_rig):
    flow = mean_flow(demo_rig)
    assert flow.mass_flow_kg_s is not None and 1e-3 < flow.mass_flow_kg_s < 1e-2
    # a premixed laboratory burner: a few m/s in the duct, ~10 m/s at the nozzle, low Mach (common practice)
    assert 0.5 < flow.velocity_sensors_m_s < 10.0
    assert flow.velocity_reference_m_s == pytest.approx(flow.velocity_sensors_m_s * demo_rig.duct.area_ratio)
    assert flow.mach_sensors == pytest.approx(flow.velocity_sensors_m_s / flow.state.speed_of_sound_m_s)
    assert flow.mach_sensors < 0.05
    assert sum(flow.composition.values()) == pytest.approx(1.0)
    # ideal-gas law per meter: air 180 L/min at 0 degC, fuel 18.1 L/min at 20 degC, CH4 0.85 / H2 0.15
    fuel_moles = 18.1 / T20_K
    o2_moles = 180.0 * DRY_AIR["O2"] / 273.15
    expected_phi = fuel_moles * (0.85 * 2.0 + 0.15 * 0.5) / o2_moles
    assert equivalence_ratio(flow.composition) == pytest.approx(expected_phi, rel=1e-9)


def test_meter_reference_temperature_changes_mass_flow_by_ideal_gas_ratio(demo_rig):
    before = mean_flow(demo_rig)
    air_meter = demo_rig.gas.flows[0]
    new_ref_k = 298.15
    flows = (air_meter.model_copy(update={"reference_temperature": new_ref_k}), *demo_rig.gas.flows[1:])
    rig = demo_rig.model_copy(update={"gas": demo_rig.gas.model_copy(update={"flows": flows})})
    after = mean_flow(rig)
    # ideal-gas law: m_air = p_ref V M / (R T_ref), so it scales with T_ref_old / T_ref_new
    air_mass_before = (air_meter.reference_pressure * air_meter.flow * mixture_state(DRY_AIR, 300.0, ATM_PA)
                       .molar_mass_kg_mol / (R_UNIVERSAL * air_meter.reference_temperature))
    expected_change = air_mass_before * (air_meter.reference_temperature / new_ref_k - 1.0)
    assert after.mass_flow_kg_s - before.mass_flow_kg_s == pytest.approx(expected_change, rel=1e-9)


def test_mean_flow_with_fixed_composition_and_hot_reference_plane(demo_rig_path):
    data = read_toml(demo_rig_path)
    data["gas"] = {"temperature": "20 degC", "pressure": ATM_PA, "temperature_at_reference": "400 K",
                   "composition": "air", "mean_velocity": 8.0}
    rig = rig_from_dict(data, str(demo_rig_path))
    flow = mean_flow(rig)
    assert flow.mass_flow_kg_s is None
    assert flow.velocity_reference_m_s == 8.0
    assert flow.state_at_reference.temperature_k == 400.0 and flow.state.temperature_k == T20_K
    # mass conservation (continuity): rho_s u_s A_s = rho_ref u_ref A_ref, A_s/A_ref = area_ratio
    expected = 8.0 * (T20_K / 400.0) / rig.duct.area_ratio
    assert flow.velocity_sensors_m_s == pytest.approx(expected, rel=1e-12)


# --------------------------------------------------------------------- invalid inputs


@pytest.mark.parametrize("call, message", [
    (lambda: mixture_state({"XE": 1.0}, 300.0, ATM_PA), "unknown species 'XE'"),
    (lambda: mixture_state(DRY_AIR, 150.0, ATM_PA), "outside the range"),
    (lambda: mixture_state(DRY_AIR, 7000.0, ATM_PA), "outside the range"),
    (lambda: mixture_state(DRY_AIR, 300.0, -1.0), "pressure"),
    (lambda: mixture_state({"N2": 0.5}, 300.0, ATM_PA), "add up to 0.5000"),
    (lambda: mixture_state({"N2": -0.1, "O2": 1.1}, 300.0, ATM_PA), "must be a finite number >= 0"),
    (lambda: mixture_state({"N2": "lots"}, 300.0, ATM_PA), "must be a finite number >= 0"),
    (lambda: mix_flows([(DRY_AIR, -1e-3, 273.15, ATM_PA)]), r"flows\[0\]: standard volume flow"),
    (lambda: mix_flows([(DRY_AIR, 0.0, 273.15, ATM_PA)]), "all flows are zero"),
    (lambda: standard_density(DRY_AIR, 100.0, ATM_PA), "outside the range"),
    (lambda: bulk_velocity(-1.0, 1.2, 1e-3), "mass flow"),
])
def test_invalid_inputs_raise_named_value_errors(call, message):
    with pytest.raises(ValueError, match=message) as info:
        call()
    assert isinstance(info.value, FlamebodeError)


# --------------------------------------------------------------------- properties

_weights = st.lists(st.floats(0.0, 1.0), min_size=len(gas.SPECIES), max_size=len(gas.SPECIES)).filter(
    lambda w: sum(w) > 0.1)


def _composition(weights: list[float]) -> dict[str, float]:
    total = sum(weights)
    return {s: w / total for s, w in zip(gas.SPECIES, weights)}


@settings(max_examples=60, deadline=None)
@given(_weights, st.floats(200.0, 3000.0), st.floats(200.0, 3000.0), st.floats(1e3, 1e7))
def test_density_scales_with_p_over_t_and_sound_speed_ignores_p(weights, t1, t2, p):
    comp = _composition(weights)
    a, b = mixture_state(comp, t1, ATM_PA), mixture_state(comp, t2, p)
    # ideal-gas law: rho T / p is a constant of the mixture, M / R_u
    assert b.density_kg_m3 * t2 / p == pytest.approx(a.density_kg_m3 * t1 / ATM_PA, rel=1e-12)
    # frozen sound speed and viscosity of an ideal gas do not depend on pressure (kinetic theory)
    c = mixture_state(comp, t2, ATM_PA)
    assert b.speed_of_sound_m_s == pytest.approx(c.speed_of_sound_m_s, rel=1e-12)
    assert b.dynamic_viscosity_pa_s == pytest.approx(c.dynamic_viscosity_pa_s, rel=1e-12)
    assert 1.0 < b.gamma <= 5.0 / 3.0 + 1e-9  # between the polyatomic limit and a monatomic gas


@settings(max_examples=60, deadline=None)
@given(_weights, st.floats(1e-6, 1e-2), st.floats(0.0, 1.0), st.floats(250.0, 300.0), st.floats(250.0, 300.0),
       st.floats(8e4, 1.2e5), st.floats(8e4, 1.2e5))
def test_splitting_a_stream_between_meters_keeps_its_mass(weights, volume, share, t1, t2, p1, p2):
    comp = _composition(weights)
    whole, whole_comp = mix_flows([(comp, volume, t1, p1)])
    # ideal-gas law: the rest of the stream expressed at the second meter's reference state
    rest = volume * (1.0 - share) * (t2 / t1) * (p1 / p2)
    parts, parts_comp = mix_flows([(comp, volume * share, t1, p1), (comp, rest, t2, p2)])
    assert parts == pytest.approx(whole, rel=1e-10)
    assert parts_comp == pytest.approx(whole_comp, rel=1e-9, abs=1e-15)
