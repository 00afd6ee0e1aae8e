"""Ideal-gas mixture properties and the mean flow of a rig.

What it is for: density, heat capacity, frozen speed of sound, viscosity, thermal
conductivity and Prandtl number of the fresh gas at the sensors and at the reference
plane, the mass flow and mixture composition from flow meters that each report a
"standard" volume flow at their own reference state, the bulk velocities, and the
equivalence ratio of a fuel–air mixture. SI units throughout.

Sources of the data and models:
- Heat capacities: NASA 7-coefficient polynomials, two ranges (200–1000 K and
  1000–6000 K), from McBride, Gordon & Reno, "Coefficients for calculating
  thermodynamic and transport properties of individual species", NASA TM-4513 (1993).
  Only a1..a5 are kept (cp/R = a1 + a2 T + a3 T² + a4 T³ + a5 T⁴); enthalpy and
  entropy are not needed here.
- Molar masses: from the IUPAC standard atomic weights (conventional values
  H 1.008, C 12.011, N 14.007, O 15.999, Ar 39.95).
- Lennard-Jones parameters (σ, ε/k) and dipole moments: the CHEMKIN transport data
  base (Kee, Dixon-Lewis, Warnatz, Coltrin & Miller, SAND86-8246, 1986), as tabulated
  with GRI-Mech 3.0 (Smith et al. 1999).
- Pure-species viscosity: Chapman–Enskog, μ = (5/16)·√(π m k T)/(π σ² Ω(2,2)*), with the
  collision integral fit of Neufeld, Janzen & Aziz, J. Chem. Phys. 57:1100 (1972) and,
  for the polar species (H2O, NH3), Brokaw's correction Ω + 0.2 δ*²/T*
  (Brokaw, Ind. Eng. Chem. Process Des. Dev. 8:240, 1969; see Poling, Prausnitz &
  O'Connell, The Properties of Gases and Liquids, 5th ed., §9-4).
  The collision-integral fit holds for 0.3 <= T* <= 100, i.e. up to about 3800 K for H2.
- Mixture viscosity: Wilke, J. Chem. Phys. 18:517 (1950).
- Pure-species conductivity: modified Eucken correlation, λ M/μ = 1.32 Cv + 1.77 R
  (Svehla, NASA TR R-132, 1962; Poling et al. eq. 10-3.3); it gives 15/4 R μ/M for
  monatomic gases. Mixture conductivity: Mason & Saxena, Phys. Fluids 1:361 (1958),
  with Wilke's interaction factors.

Must not import Qt, pyqtgraph, matplotlib, h5py, any ``drivers`` module, the engine,
storage or the front end; ``app.rig`` is imported for type hints only.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from app.errors import FlamebodeError

if TYPE_CHECKING:
    from app.rig import Rig

R_UNIVERSAL = 8.314462618  # J/(mol K), CODATA 2018 exact value
_BOLTZMANN = 1.380649e-23  # J/K, exact (SI 2019)
_AVOGADRO = 6.02214076e23  # 1/mol, exact (SI 2019)
_DEBYE = 3.33564e-30  # C·m
_EPSILON_0 = 8.8541878128e-12  # F/m

SPECIES = ("N2", "O2", "AR", "CO2", "H2O", "CH4", "H2", "C3H8", "NH3")
T_MIN_K, T_MID_K, T_MAX_K = 200.0, 1000.0, 6000.0

_H, _C, _N, _O, _AR = 1.008, 12.011, 14.007, 15.999, 39.95  # g/mol, IUPAC conventional
_MOLAR_MASS_KG_MOL = np.array([
    2 * _N, 2 * _O, _AR, _C + 2 * _O, 2 * _H + _O, _C + 4 * _H, 2 * _H, 3 * _C + 8 * _H, _N + 3 * _H,
]) * 1e-3

# NASA TM-4513 coefficients a1..a5 for cp/R; [species, range (low, high), coefficient]
_NASA_CP = np.array([
    [[3.53100528, -1.23660987e-04, -5.02999437e-07, 2.43530612e-09, -1.40881235e-12],  # N2
     [2.95257626, 1.39690057e-03, -4.92631691e-07, 7.86010367e-11, -4.60755321e-15]],
    [[3.78245636, -2.99673415e-03, 9.84730200e-06, -9.68129508e-09, 3.24372836e-12],   # O2
     [3.66096083, 6.56365523e-04, -1.41149485e-07, 2.05797658e-11, -1.29913248e-15]],
    [[2.5, 0.0, 0.0, 0.0, 0.0],                                                          # AR
     [2.5, 0.0, 0.0, 0.0, 0.0]],
    [[2.35677352, 8.98459677e-03, -7.12356269e-06, 2.45919022e-09, -1.43699548e-13],   # CO2
     [4.63659493, 2.74131991e-03, -9.95828531e-07, 1.60373011e-10, -9.16103468e-15]],
    [[4.19864056, -2.03643410e-03, 6.52040211e-06, -5.48797062e-09, 1.77197817e-12],   # H2O
     [2.67703787, 2.97318329e-03, -7.73769690e-07, 9.44336689e-11, -4.26900959e-15]],
    [[5.14987613, -1.36709788e-02, 4.91800599e-05, -4.84743026e-08, 1.66693956e-11],   # CH4
     [1.63552643, 1.00842795e-02, -3.36916254e-06, 5.34958667e-10, -3.15518833e-14]],
    [[2.34433112, 7.98052075e-03, -1.94781510e-05, 2.01572094e-08, -7.37611761e-12],   # H2
     [2.93286579, 8.26607967e-04, -1.46402335e-07, 1.54100359e-11, -6.88804432e-16]],
    [[4.21102620, 1.71599803e-03, 7.06183472e-05, -9.19594116e-08, 3.64421372e-11],    # C3H8
     [6.66789363, 2.06120214e-02, -7.36553027e-06, 1.18440761e-09, -7.06953210e-14]],
    [[4.30177808, -4.77127330e-03, 2.19341619e-05, -2.29856489e-08, 8.28992268e-12],   # NH3
     [2.71709692, 5.56856338e-03, -1.76886396e-06, 2.67417260e-10, -1.52731419e-14]],
])

# CHEMKIN transport data base: ε/k [K], σ [Å], dipole moment [debye]
_EPS_OVER_K = np.array([97.53, 107.4, 136.5, 244.0, 572.4, 141.4, 38.0, 266.8, 481.0])
_SIGMA_M = np.array([3.621, 3.458, 3.33, 3.763, 2.605, 3.746, 2.92, 4.982, 2.92]) * 1e-10
_DIPOLE_DEBYE = np.array([0.0, 0.0, 0.0, 0.0, 1.844, 0.0, 0.0, 0.0, 1.47])
_MONATOMIC = np.array([s == "AR" for s in SPECIES])

# Moles of O2 needed to burn one mole of each fuel completely (to CO2, H2O and N2)
O2_DEMAND = {"CH4": 2.0, "H2": 0.5, "C3H8": 5.0, "NH3": 0.75}


class GasPropertyError(FlamebodeError, ValueError):
    """A gas composition, temperature, pressure or flow that the property model cannot take."""


@dataclass(frozen=True)
class GasState:
    """Properties of an ideal-gas mixture at one temperature and pressure (SI)."""

    temperature_k: float
    pressure_pa: float
    molar_mass_kg_mol: float
    density_kg_m3: float
    cp_j_kg_k: float
    gamma: float
    speed_of_sound_m_s: float  # frozen: composition held fixed
    dynamic_viscosity_pa_s: float
    kinematic_viscosity_m2_s: float
    thermal_conductivity_w_m_k: float
    prandtl: float


@dataclass(frozen=True)
class MeanFlow:
    """Mean flow of a rig: gas states at the sensors and at the reference plane, velocities."""

    state: GasState  # at the sensors
    state_at_reference: GasState
    mass_flow_kg_s: float | None  # None when the rig gives a velocity instead of metered flows
    composition: dict[str, float]
    velocity_sensors_m_s: float  # bulk velocity in the sensor duct
    velocity_reference_m_s: float  # bulk velocity at the reference plane
    mach_sensors: float


# ---------------------------------------------------------------------------- inputs


def _mole_fractions(composition: Mapping[str, float]) -> np.ndarray:
    """Mole-fraction vector over SPECIES, normalised; raises on unknown or bad entries."""
    x = np.zeros(len(SPECIES))
    if not composition:
        raise GasPropertyError("gas composition is empty; give mole fractions, e.g. {'CH4': 1.0}")
    for name, frac in composition.items():
        key = str(name).upper()
        if key not in SPECIES:
            raise GasPropertyError(f"unknown species {name!r} in gas composition; known: {', '.join(SPECIES)}")
        try:
            value = float(frac)
        except (TypeError, ValueError):
            value = math.nan
        if not math.isfinite(value) or value < 0.0:
            raise GasPropertyError(f"mole fraction of {name} must be a finite number >= 0, got {frac!r}")
        x[SPECIES.index(key)] += value
    total = x.sum()
    if not 0.98 <= total <= 1.02:
        raise GasPropertyError(f"mole fractions of the gas composition add up to {total:.4f}, not 1")
    return x / total


def _check_temperature(temperature_k: float) -> float:
    t = float(temperature_k)
    if not T_MIN_K <= t <= T_MAX_K:
        raise GasPropertyError(
            f"gas temperature {t:.2f} K is outside the range of the property data ({T_MIN_K:.0f}–{T_MAX_K:.0f} K)")
    return t


def _check_pressure(pressure_pa: float) -> float:
    p = float(pressure_pa)
    if not (math.isfinite(p) and p > 0.0):
        raise GasPropertyError(f"gas pressure must be a finite number > 0 Pa, got {pressure_pa!r}")
    return p


# ---------------------------------------------------------------------------- pure species


def _cp_molar(temperature_k: float) -> np.ndarray:
    """Molar heat capacity of every species, J/(mol K)."""
    coeffs = _NASA_CP[:, 0 if temperature_k <= T_MID_K else 1, :]
    powers = temperature_k ** np.arange(5)
    return R_UNIVERSAL * (coeffs @ powers)


def _omega22(reduced_t: np.ndarray) -> np.ndarray:
    """Reduced collision integral Ω(2,2)* (Neufeld, Janzen & Aziz 1972)."""
    t = reduced_t
    return 1.16145 * t**-0.14874 + 0.52487 * np.exp(-0.77320 * t) + 2.16178 * np.exp(-2.43787 * t)


def _viscosity_species(temperature_k: float) -> np.ndarray:
    """Chapman–Enskog viscosity of every species, Pa s (Brokaw's polar correction)."""
    reduced_t = temperature_k / _EPS_OVER_K
    eps_j = _EPS_OVER_K * _BOLTZMANN
    dipole = _DIPOLE_DEBYE * _DEBYE
    delta_star = dipole**2 / (2.0 * 4.0 * math.pi * _EPSILON_0 * eps_j * _SIGMA_M**3)
    omega = _omega22(reduced_t) + 0.2 * delta_star**2 / reduced_t
    mass_kg = _MOLAR_MASS_KG_MOL / _AVOGADRO
    return 5.0 / 16.0 * np.sqrt(math.pi * mass_kg * _BOLTZMANN * temperature_k) / (math.pi * _SIGMA_M**2 * omega)


def _conductivity_species(viscosity: np.ndarray, cp_molar: np.ndarray) -> np.ndarray:
    """Modified Eucken conductivity of every species, W/(m K); 15/4 R μ/M for monatomic gases."""
    cv_molar = cp_molar - R_UNIVERSAL
    factor = np.where(_MONATOMIC, 3.75 * R_UNIVERSAL, 1.32 * cv_molar + 1.77 * R_UNIVERSAL)
    return viscosity * factor / _MOLAR_MASS_KG_MOL


def _wilke_phi(viscosity: np.ndarray) -> np.ndarray:
    """Wilke's interaction factors Φ_ij (1950)."""
    mu_i, mu_j = viscosity[:, None], viscosity[None, :]
    m_i, m_j = _MOLAR_MASS_KG_MOL[:, None], _MOLAR_MASS_KG_MOL[None, :]
    return (1.0 + np.sqrt(mu_i / mu_j) * (m_j / m_i) ** 0.25) ** 2 / np.sqrt(8.0 * (1.0 + m_i / m_j))


def _wilke_average(x: np.ndarray, prop: np.ndarray, phi: np.ndarray) -> float:
    present = x > 0.0
    xs, ps, ph = x[present], prop[present], phi[np.ix_(present, present)]
    return float(np.sum(xs * ps / (ph @ xs)))


# ---------------------------------------------------------------------------- mixtures


def mixture_state(composition: Mapping[str, float], temperature_k: float, pressure_pa: float) -> GasState:
    """Ideal-gas mixture properties at ``temperature_k`` and ``pressure_pa``.

    ``composition`` maps species names (see ``SPECIES``) to mole fractions adding up to 1
    (within 2 %; they are normalised). Raises GasPropertyError (a ValueError) otherwise.
    """
    x = _mole_fractions(composition)
    t = _check_temperature(temperature_k)
    p = _check_pressure(pressure_pa)
    molar_mass = float(x @ _MOLAR_MASS_KG_MOL)
    cp_species = _cp_molar(t)
    cp_molar = float(x @ cp_species)
    cp_mass = cp_molar / molar_mass
    gamma = cp_molar / (cp_molar - R_UNIVERSAL)
    density = p * molar_mass / (R_UNIVERSAL * t)
    mu_species = _viscosity_species(t)
    phi = _wilke_phi(mu_species)
    viscosity = _wilke_average(x, mu_species, phi)
    conductivity = _wilke_average(x, _conductivity_species(mu_species, cp_species), phi)
    return GasState(
        temperature_k=t,
        pressure_pa=p,
        molar_mass_kg_mol=molar_mass,
        density_kg_m3=density,
        cp_j_kg_k=cp_mass,
        gamma=gamma,
        speed_of_sound_m_s=math.sqrt(gamma * R_UNIVERSAL * t / molar_mass),
        dynamic_viscosity_pa_s=viscosity,
        kinematic_viscosity_m2_s=viscosity / density,
        thermal_conductivity_w_m_k=conductivity,
        prandtl=cp_mass * viscosity / conductivity,
    )


def standard_density(composition: Mapping[str, float], reference_temperature_k: float,
                     reference_pressure_pa: float) -> float:
    """Ideal-gas density at a flow meter's reference ("standard") state, kg/m³."""
    x = _mole_fractions(composition)
    t = _check_temperature(reference_temperature_k)
    p = _check_pressure(reference_pressure_pa)
    return p * float(x @ _MOLAR_MASS_KG_MOL) / (R_UNIVERSAL * t)


def mix_flows(flows: Sequence[tuple[Mapping[str, float], float, float, float]]) -> tuple[float, dict[str, float]]:
    """Total mass flow (kg/s) and mole fractions of several metered streams.

    Each flow is ``(composition, standard_volume_flow_m3_s, reference_temperature_k,
    reference_pressure_pa)``; every meter has its own reference state, so
    ṁ = ρ_ref·V̇_std and the molar flow is p_ref·V̇_std/(R_u·T_ref) meter by meter.
    """
    if not flows:
        raise GasPropertyError("no flows given; at least one metered stream is needed")
    total_mass = 0.0
    moles = np.zeros(len(SPECIES))
    for i, (composition, volume_flow_m3_s, ref_t_k, ref_p_pa) in enumerate(flows):
        v = float(volume_flow_m3_s)
        if not (math.isfinite(v) and v >= 0.0):
            raise GasPropertyError(f"flows[{i}]: standard volume flow must be a finite number >= 0, got {v!r}")
        x = _mole_fractions(composition)
        molar_flow = _check_pressure(ref_p_pa) * v / (R_UNIVERSAL * _check_temperature(ref_t_k))
        total_mass += molar_flow * float(x @ _MOLAR_MASS_KG_MOL)
        moles += molar_flow * x
    if total_mass <= 0.0:
        raise GasPropertyError("all flows are zero; the mixture composition is undefined")
    fractions = moles / moles.sum()
    return total_mass, {s: float(f) for s, f in zip(SPECIES, fractions) if f > 0.0}


def bulk_velocity(mass_flow_kg_s: float, density_kg_m3: float, area_m2: float) -> float:
    """Bulk (area-averaged) velocity ū = ṁ/(ρ A), m/s."""
    if mass_flow_kg_s < 0.0:
        raise GasPropertyError(f"mass flow must be >= 0, got {mass_flow_kg_s!r} kg/s")
    if density_kg_m3 <= 0.0 or area_m2 <= 0.0:
        raise GasPropertyError(f"density and area must be > 0, got {density_kg_m3!r} kg/m³ and {area_m2!r} m²")
    return mass_flow_kg_s / (density_kg_m3 * area_m2)


def equivalence_ratio(composition: Mapping[str, float]) -> float:
    """Equivalence ratio φ = (O2 needed to burn the fuels) / (O2 present), fuels CH4, H2, C3H8, NH3."""
    x = _mole_fractions(composition)
    demand = sum(x[SPECIES.index(fuel)] * nu for fuel, nu in O2_DEMAND.items())
    oxygen = x[SPECIES.index("O2")]
    if oxygen <= 0.0:
        if demand > 0.0:
            raise GasPropertyError("the mixture holds fuel but no O2; its equivalence ratio is infinite")
        raise GasPropertyError("the mixture holds neither fuel nor O2; its equivalence ratio is undefined")
    return float(demand / oxygen)


# ---------------------------------------------------------------------------- rig


def mean_flow(rig: Rig) -> MeanFlow:
    """Mean flow of ``rig``: gas states, mass flow, composition and bulk velocities.

    ``rig.duct.area_m2`` is the sensor-duct area and ``rig.duct.area_ratio`` is
    A_sensor/A_reference. With metered ``rig.gas.flows`` the velocities follow from the
    mass flow; with a fixed composition, ``rig.gas.mean_velocity`` is the bulk velocity at
    the reference plane and the sensor velocity follows from mass conservation.
    """
    gas = rig.gas
    t_ref = gas.temperature_at_reference if gas.temperature_at_reference is not None else gas.temperature
    area_sensor = rig.duct.area_m2
    area_reference = area_sensor / rig.duct.area_ratio
    if gas.flows:
        mass_flow: float | None
        mass_flow, composition = mix_flows(
            [(f.composition, f.flow, f.reference_temperature, f.reference_pressure) for f in gas.flows])
    else:
        mass_flow, composition = None, dict(gas.composition or {})
    state = mixture_state(composition, gas.temperature, gas.pressure)
    state_ref = mixture_state(composition, t_ref, gas.pressure)
    if mass_flow is not None:
        u_sensors = bulk_velocity(mass_flow, state.density_kg_m3, area_sensor)
        u_reference = bulk_velocity(mass_flow, state_ref.density_kg_m3, area_reference)
    else:
        u_reference = float(gas.mean_velocity)  # type: ignore[arg-type]
        flux = state_ref.density_kg_m3 * u_reference * area_reference
        u_sensors = bulk_velocity(flux, state.density_kg_m3, area_sensor)
    return MeanFlow(
        state=state,
        state_at_reference=state_ref,
        mass_flow_kg_s=mass_flow,
        composition=composition,
        velocity_sensors_m_s=u_sensors,
        velocity_reference_m_s=u_reference,
        mach_sensors=u_sensors / state.speed_of_sound_m_s,
    )
