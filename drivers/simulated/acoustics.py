"""1-D acoustic network of the simulated burner, in the frequency domain (e^{+iωt}).

State vector at a cross-section: [p̂, û] (pressure in Pa, area-averaged axial acoustic
velocity in m/s). Each element is a 2×2 transfer matrix mapping the state at its upstream
face to its downstream face; every function broadcasts over an array of frequencies
(matrices have shape (..., 2, 2)).

Elements:
* duct segment with uniform mean flow (Mach M) and viscothermal wall losses:
  p̂ = A⁺e^{-ik⁺x} + A⁻e^{+ik⁻x}, ρc û = A⁺e^{-ik⁺x} - A⁻e^{+ik⁻x}, k^± = K k₀/(1 ± M)
  (Munjal 1987, Acoustics of Ducts and Mufflers, ch. 2), with Kirchhoff's wide-duct factor
  K = 1 + (1 - i)/(√2 Sh) (1 + (γ-1)/√Pr), Sh = r√(ω/ν) (Kirchhoff 1868; see Tijdeman 1975,
  J. Sound Vib. 39:1-33), written here for e^{+iωt}.
* compact area change at low Mach: p̂ continuous, A₁û₁ = A₂û₂.
* lumped volume (plenum as a compliance): p̂ continuous, A₂û₂ = A₁û₁ - iωV/(ρc²) p̂.
* compact burner pressure loss (nozzle, flame holder, perforated plate) at the reference
  plane: a mean drop Δp = ζ ½ρū² linearised quasi-steadily to Δp̂ = ζ ρ ū û, û continuous
  (common practice in low-order network models, from memory). It absorbs the acoustic
  power ½ ζ ρ ū |û|² A and is the rig's main acoustic damping besides the walls and the
  chamber exit.
* compact flame at low Mach (Dowling 1995, J. Sound Vib. 180:557-581; Polifke's network
  models, e.g. Polifke 2020, Prog. Energy Combust. Sci. 79:100845): p̂ continuous,
  û_d = û_u + (T_d/T_u - 1) ū_u Q̂'/Q̄ with Q̂'/Q̄ = F û_u/ū_u, i.e. û_d = û_u (1 + (θ-1)F).
* an end with pressure reflection coefficient R = A⁻/A⁺: (1-R) p̂ - (1+R) ρc û = 0.

The source is a volume velocity Q̂_s injected at a closed upstream end (the loudspeaker at
the back of the plenum). This is an independent implementation; it must not import
app.core.multimic, harmonic, response or quality. Imports: numpy only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

TWO_PI = 2.0 * np.pi


@dataclass(frozen=True)
class Medium:
    """Gas in one part of the network (SI)."""

    density_kg_m3: float
    speed_of_sound_m_s: float
    gamma: float
    kinematic_viscosity_m2_s: float
    prandtl: float

    @property
    def impedance(self) -> float:
        """Characteristic impedance ρc (Pa s/m)."""
        return self.density_kg_m3 * self.speed_of_sound_m_s


def as_frequency(freq_hz: np.ndarray | complex | float) -> np.ndarray:
    """Frequencies as a float array, or a complex array when any is complex.

    A complex frequency f = (ω_r + iω_i)/2π is used to find the network's modes: with
    e^{+iωt} a mode grows when Im ω < 0. Every element below is analytic in ω off the
    negative real axis, so the same code serves real and complex frequencies.
    """
    a = np.asarray(freq_hz)
    return a.astype(complex) if np.iscomplexobj(a) else a.astype(float)


def kirchhoff_factor(freq_hz: np.ndarray | complex | float, medium: Medium, radius_m: float) -> np.ndarray:
    """Kirchhoff's wide-duct propagation factor K (e^{+iωt}); 1 at zero frequency.

    For a complex frequency the principal branch of √ω continues the real-axis formula
    analytically (Re ω > 0).
    """
    omega = TWO_PI * as_frequency(freq_hz)
    positive = omega.real > 0.0
    safe = np.where(positive, omega, 1.0)
    if np.iscomplexobj(omega):
        shear = radius_m * np.sqrt(safe / medium.kinematic_viscosity_m2_s)
    else:
        shear = radius_m * np.sqrt(np.maximum(safe, 1e-300) / medium.kinematic_viscosity_m2_s)
    loss = (1.0 + (medium.gamma - 1.0) / np.sqrt(medium.prandtl)) / (np.sqrt(2.0) * shear)
    return np.where(positive, 1.0 + (1.0 - 1j) * loss, 1.0 + 0j)


def wavenumbers(freq_hz: np.ndarray | float, medium: Medium, mach: float, radius_m: float,
                damping: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Downstream and upstream wavenumbers k⁺, k⁻ (rad/m, complex; Im k⁺ < 0 means decay)."""
    k0 = TWO_PI * as_frequency(freq_hz) / medium.speed_of_sound_m_s
    factor = kirchhoff_factor(freq_hz, medium, radius_m) if damping else np.ones_like(k0, dtype=complex)
    return factor * k0 / (1.0 + mach), factor * k0 / (1.0 - mach)


def _stack(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray) -> np.ndarray:
    a, b, c, d = np.broadcast_arrays(*(np.asarray(v, dtype=complex) for v in (a, b, c, d)))
    return np.stack([np.stack([a, b], axis=-1), np.stack([c, d], axis=-1)], axis=-2)


def duct_matrix(freq_hz: np.ndarray | float, length_m: float, medium: Medium, mach: float,
                radius_m: float, damping: bool = True) -> np.ndarray:
    """Transfer matrix of a straight duct of ``length_m`` (may be 0) with mean flow."""
    kp, km = wavenumbers(freq_hz, medium, mach, radius_m, damping)
    ep, em = np.exp(-1j * kp * length_m), np.exp(1j * km * length_m)
    z = medium.impedance
    # waves from state: A⁺ = (p + z u)/2, A⁻ = (p - z u)/2
    return _stack(0.5 * (ep + em), 0.5 * z * (ep - em), 0.5 * (ep - em) / z, 0.5 * (ep + em))


def area_change_matrix(area_up_m2: float, area_down_m2: float) -> np.ndarray:
    """Compact, low-Mach area change: p̂ continuous, volume velocity continuous."""
    return _stack(1.0, 0.0, 0.0, area_up_m2 / area_down_m2)


def volume_matrix(freq_hz: np.ndarray | float, volume_m3: float, medium: Medium,
                  area_up_m2: float, area_down_m2: float) -> np.ndarray:
    """Lumped compliance between two ducts: A_d û_d = A_u û_u - iωV/(ρc²) p̂."""
    omega = TWO_PI * as_frequency(freq_hz)
    compliance = volume_m3 / (medium.density_kg_m3 * medium.speed_of_sound_m_s**2)
    return _stack(np.ones_like(omega), 0.0, -1j * omega * compliance / area_down_m2, area_up_m2 / area_down_m2)


def loss_matrix(resistance_pa_s_m: float) -> np.ndarray:
    """Compact resistive element: p̂_d = p̂_u - r û, û continuous (r = ζ ρ ū, Pa s/m)."""
    return _stack(1.0, -resistance_pa_s_m, 0.0, 1.0)


def flame_matrix(temperature_ratio: float, flame_response: np.ndarray | complex) -> np.ndarray:
    """Compact low-Mach flame (Rankine–Hugoniot jump): û_d = û_u (1 + (T_d/T_u - 1) F)."""
    jump = 1.0 + (temperature_ratio - 1.0) * np.asarray(flame_response, dtype=complex)
    return _stack(np.ones_like(jump), 0.0, 0.0, jump)


def end_row(reflection: complex, medium: Medium) -> np.ndarray:
    """Row vector e with e·[p̂, û] = 0 at an end of reflection coefficient R = A⁻/A⁺."""
    return np.array([1.0 - reflection, -(1.0 + reflection) * medium.impedance], dtype=complex)


def chain(*matrices: np.ndarray) -> np.ndarray:
    """Product of transfer matrices listed from upstream to downstream."""
    out = matrices[0]
    for m in matrices[1:]:
        out = m @ out
    return out


def apply(matrix: np.ndarray, state: np.ndarray) -> np.ndarray:
    """Apply (..., 2, 2) matrices to (..., 2) states."""
    return np.einsum("...ij,...j->...i", matrix, state)


def closed_end_state(upstream_velocity: np.ndarray | complex, to_end: np.ndarray,
                     end: np.ndarray) -> np.ndarray:
    """State [p̂, û] at a source end where û is imposed, given the matrix to the far end.

    The far end's condition e·(T [p̂₀, û₀]) = 0 fixes p̂₀.
    """
    w = np.einsum("i,...ij->...j", end, to_end)
    u0 = np.asarray(upstream_velocity, dtype=complex) * np.ones(w.shape[:-1])
    p0 = -u0 * w[..., 1] / w[..., 0]
    return np.stack([p0, u0], axis=-1)


@dataclass(frozen=True)
class BurnerGeometry:
    """Everything of the burner network that does not depend on frequency or flame state."""

    plenum_length_m: float  # 0 with a lumped plenum
    plenum_radius_m: float
    plenum_volume_m3: float  # 0 with a duct plenum
    duct_radius_m: float
    duct_start_m: float  # axial position of the sensor duct's upstream end
    reference_plane_m: float
    reference_area_m2: float
    chamber_length_m: float
    chamber_radius_m: float
    end_reflection: complex
    burner_loss_coefficient: float = 0.0  # ζ of the compact pressure loss at the reference plane


@dataclass(frozen=True)
class FlowState:
    """Media and Mach numbers at one moment (they drift slowly)."""

    cold: Medium
    hot: Medium
    mach_plenum: float
    mach_duct: float
    mach_chamber: float
    velocity_reference_m_s: float
    temperature_ratio: float


class BurnerNetwork:
    """Per-frequency network of one geometry and flow state, solved for any flame response.

    The flame enters only through m = 1 + (θ-1)F, so the upstream matrix U (source end →
    reference plane) and the end row w (after the flame) are computed once per frequency
    and the solution for a given F is closed-form (used by the saturation fixed point).
    """

    def __init__(self, geometry: BurnerGeometry, flow: FlowState, freq_hz: np.ndarray | float,
                 sensor_positions_m: np.ndarray) -> None:
        g, f = geometry, as_frequency(freq_hz)
        self.geometry, self.flow, self.freq_hz = g, flow, f
        a_duct = np.pi * g.duct_radius_m**2
        a_ch = np.pi * g.chamber_radius_m**2
        if g.plenum_volume_m3 > 0.0:
            self.source_area_m2 = a_duct
            plenum = volume_matrix(f, g.plenum_volume_m3, flow.cold, a_duct, a_duct)
        else:
            a_pl = np.pi * g.plenum_radius_m**2
            self.source_area_m2 = a_pl
            plenum = chain(duct_matrix(f, g.plenum_length_m, flow.cold, flow.mach_plenum, g.plenum_radius_m),
                           area_change_matrix(a_pl, a_duct))
        self._plenum = plenum
        duct = lambda length: duct_matrix(f, length, flow.cold, flow.mach_duct, g.duct_radius_m)  # noqa: E731
        self._sensor = [chain(plenum, duct(x - g.duct_start_m)) for x in np.asarray(sensor_positions_m)]
        loss = g.burner_loss_coefficient * flow.cold.density_kg_m3 * flow.velocity_reference_m_s
        self._upstream = chain(plenum, duct(g.reference_plane_m - g.duct_start_m),
                               area_change_matrix(a_duct, g.reference_area_m2), loss_matrix(loss))
        after = chain(area_change_matrix(g.reference_area_m2, a_ch),
                      duct_matrix(f, g.chamber_length_m, flow.hot, flow.mach_chamber, g.chamber_radius_m))
        self._end_w = np.einsum("i,...ij->...j", end_row(g.end_reflection, flow.hot), after)

    def source_state(self, flame_response: np.ndarray | complex, volume_velocity: complex = 1.0) -> np.ndarray:
        """[p̂, û] at the source end for a source volume velocity and flame response F."""
        m = 1.0 + (self.flow.temperature_ratio - 1.0) * np.asarray(flame_response, dtype=complex)
        u0 = volume_velocity / self.source_area_m2
        up, w = self._upstream, self._end_w
        num = w[..., 0] * up[..., 0, 1] + w[..., 1] * m * up[..., 1, 1]
        den = w[..., 0] * up[..., 0, 0] + w[..., 1] * m * up[..., 1, 0]
        p0 = -u0 * num / den
        return np.stack([p0, u0 * np.ones_like(p0)], axis=-1)

    def characteristic(self, flame_response: np.ndarray | complex) -> np.ndarray:
        """D(f) = w·diag(1, m)·U·[1, 0]ᵀ: zero at a mode of the network with the speaker at rest.

        With the source volume velocity zero the upstream end is a rigid wall (û₀ = 0), and
        a non-trivial p̂₀ needs D = 0; D is the denominator of :meth:`source_state`, so the
        forced response is finite exactly where D ≠ 0. For complex frequencies (see
        :func:`as_frequency`) the zeros are the complex eigenfrequencies.
        """
        m = 1.0 + (self.flow.temperature_ratio - 1.0) * np.asarray(flame_response, dtype=complex)
        up, w = self._upstream, self._end_w
        return w[..., 0] * up[..., 0, 0] + w[..., 1] * m * up[..., 1, 0]

    def reference_velocity_scalar(self, flame_response: complex, volume_velocity: complex) -> complex:
        """û at the reference plane for one frequency (plain-Python fast path of the fixed point)."""
        if not hasattr(self, "_scalars"):
            up, w = self._upstream, self._end_w
            self._scalars = tuple(complex(v) for v in (up[..., 0, 0], up[..., 0, 1], up[..., 1, 0],
                                                        up[..., 1, 1], w[..., 0], w[..., 1]))
        u00, u01, u10, u11, w0, w1 = self._scalars
        m = 1.0 + (self.flow.temperature_ratio - 1.0) * flame_response
        u0 = volume_velocity / self.source_area_m2
        p0 = -u0 * (w0 * u01 + w1 * m * u11) / (w0 * u00 + w1 * m * u10)
        return p0 * u10 + u0 * u11

    def reference_velocity(self, state0: np.ndarray) -> np.ndarray:
        """û just upstream of the flame at the reference plane (m/s)."""
        return apply(self._upstream, state0)[..., 1]

    def sensor_pressures(self, state0: np.ndarray) -> np.ndarray:
        """p̂ at each sensor, shape (n_sensors, ...) (Pa)."""
        return np.stack([apply(m, state0)[..., 0] for m in self._sensor])
