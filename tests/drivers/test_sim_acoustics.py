"""Acoustic network of the simulator against textbook results (e^{+iωt} convention)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import find_peaks

from drivers.simulated import acoustics as ac

# Dry air at 20 °C (handbook values: ρ = 1.2041 kg/m³, c = 343.2 m/s; ν ≈ 1.516e-5 m²/s,
# γ = 1.4, Pr ≈ 0.71 from memory).
AIR = ac.Medium(1.2041, 343.2, 1.4, 1.516e-5, 0.71)


def test_kirchhoff_attenuation_check_value():
    # Kirchhoff wide-duct damping, air 20 °C, r = 25 mm, 500 Hz → 0.0265 Np/m
    # (Kirchhoff 1868; Tijdeman 1975, J. Sound Vib. 39). For e^{+iωt}, decay is -Im k.
    kp, km = ac.wavenumbers(500.0, AIR, 0.0, 0.025)
    assert -kp.imag == pytest.approx(0.0265, abs=2e-4)
    assert kp == pytest.approx(km)
    # A forward wave through the duct matrix loses the same amount: p̂ e^{-αL}.
    length = 10.0
    state = np.array([1.0, 1.0 / AIR.impedance], dtype=complex)  # pure A⁺ wave
    out = ac.apply(ac.duct_matrix(500.0, length, AIR, 0.0, 0.025), state)
    assert abs(out[0]) == pytest.approx(np.exp(kp.imag * length), rel=1e-9)


@pytest.mark.parametrize("mach", [0.0, 0.05, 0.2])
def test_plane_wave_phase_speeds_with_flow(mach):
    # Convected plane waves travel at c(1 + M) downstream and c(1 - M) upstream
    # (Munjal 1987, Acoustics of Ducts and Mufflers, ch. 2); e^{+iωt}: phase falls downstream.
    f, s = 400.0, 0.3
    down = np.array([1.0, 1.0 / AIR.impedance], dtype=complex)   # A⁺ only
    up = np.array([1.0, -1.0 / AIR.impedance], dtype=complex)    # A⁻ only
    m = ac.duct_matrix(f, s, AIR, mach, 0.025, damping=False)
    lag_down = -np.angle(ac.apply(m, down)[0])   # phase lag from x to x + s
    lead_up = np.angle(ac.apply(m, up)[0])        # upstream wave arrives at x first
    assert 2 * np.pi * f * s / lag_down == pytest.approx(AIR.speed_of_sound_m_s * (1 + mach), rel=1e-9)
    assert 2 * np.pi * f * s / lead_up == pytest.approx(AIR.speed_of_sound_m_s * (1 - mach), rel=1e-9)


def test_closed_open_duct_resonates_at_odd_quarter_waves():
    # Quarter-wave resonator: a duct closed at one end (velocity source) and open at the other
    # (R = -1) resonates at f_n = (2n - 1) c / 4L (Kinsler et al., Fundamentals of Acoustics).
    length = 1.0
    f = np.linspace(20.0, 500.0, 48001)
    to_end = ac.duct_matrix(f, length, AIR, 0.0, 0.025, damping=False)
    state0 = ac.closed_end_state(1.0, to_end, ac.end_row(-1.0 + 0j, AIR))
    # Away from the exact resonance the response is finite; the end velocity peaks there.
    u_end = np.abs(ac.apply(to_end, state0)[..., 1])
    peaks, _ = find_peaks(u_end)
    expected = (2 * np.arange(1, 4) - 1) * AIR.speed_of_sound_m_s / (4 * length)
    assert f[peaks][:3] == pytest.approx(expected, abs=0.05)


def test_area_change_and_flame_jump():
    # Compact low-Mach area change: p continuous, A u continuous (common practice).
    m = ac.area_change_matrix(2.0, 1.0)
    out = ac.apply(m, np.array([3.0, 0.5], dtype=complex))
    assert out == pytest.approx([3.0, 1.0])
    # Compact flame (Dowling 1995, J. Sound Vib. 180): û_d = û_u (1 + (T_d/T_u - 1) F).
    fm = ac.flame_matrix(6.0, 0.5 - 0.5j)
    out = ac.apply(fm, np.array([2.0, 1.0], dtype=complex))
    assert out == pytest.approx([2.0, 1.0 + 5.0 * (0.5 - 0.5j)])


def test_lumped_volume_is_low_frequency_limit_of_a_short_wide_duct():
    # A short duct's volume acts as a compliance V/(ρc²) at low frequency (Helmholtz limit,
    # Kinsler et al.); compare the lumped element with the same volume as a duct.
    f, r, length = 20.0, 0.1, 0.05
    area = np.pi * r**2
    duct = ac.duct_matrix(f, length, AIR, 0.0, r, damping=False)
    lumped = ac.volume_matrix(f, area * length, AIR, area, area)
    assert lumped[1, 0] == pytest.approx(duct[1, 0], rel=2e-3)
