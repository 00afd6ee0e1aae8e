"""Synthetic records for core tests, built from textbook formulas written out here.

The plane-wave field (Seybert & Ross 1977; Chung & Blaser 1980) and Kirchhoff's
viscothermal damping are coded again in this file, independently of app.core.multimic,
so that a mistake in the core does not cancel against the generator. Convention:
x(t) = Re{x̂ e^{+iωt}}. Only the mean-flow state (speed of sound, density, bulk
velocity) is taken from app.core.gas, which has its own Cantera and handbook checks.
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy import signal

from app.core import gas
from app.rig import Rig


@dataclass(frozen=True)
class SynthRecord:
    data: np.ndarray
    channels: tuple[str, ...]
    sample_rate_hz: float
    freq_hz: float
    true_ftf: complex
    true_ratio: float


def wavenumbers(freq_hz: float, rig: Rig) -> tuple[complex, complex, float, float]:
    mean = gas.mean_flow(rig)
    st = mean.state
    omega = 2 * math.pi * freq_hz
    k0 = omega / st.speed_of_sound_m_s
    sh = rig.duct.radius_m * math.sqrt(omega / st.kinematic_viscosity_m2_s)
    kk = 1 + (1 - 1j) / (math.sqrt(2) * sh) * (1 + (st.gamma - 1) / math.sqrt(st.prandtl))
    m = mean.mach_sensors
    return kk * k0 / (1 + m), kk * k0 / (1 - m), st.density_kg_m3 * st.speed_of_sound_m_s, mean.velocity_reference_m_s


def coloured_noise(rng: np.random.Generator, n_ch: int, n: int, rms: np.ndarray, corner_hz: float,
                   sample_rate_hz: float) -> np.ndarray:
    """Low-pass (first-order) filtered Gaussian noise: strongly non-white near low f."""
    b, a = signal.butter(1, corner_hz / (sample_rate_hz / 2))
    w = signal.lfilter(b, a, rng.standard_normal((n_ch, n)), axis=1)
    return w / w.std(axis=1, keepdims=True) * rms[:, None]


def make_record(rig: Rig, freq_hz: float, flame: Callable[[float], complex], ratio: float = 0.05,
                duration_s: float = 2.0, sample_rate_hz: float = 12800.0, reflection: complex = 0.7 * cmath.exp(1j),
                noise_pa: float = 0.5, light_noise_v: float = 0.02, light_mean_v: float = 2.0,
                rng: np.random.Generator | None = None, white: bool = False) -> SynthRecord:
    """A record of every rig channel in volts for a flame ``flame(f) -> F`` at velocity ratio ``ratio`` (peak)."""
    rng = rng or np.random.default_rng(1)
    kp, km, rhoc, u_mean_ref = wavenumbers(freq_hz, rig)
    x_ref = rig.duct.reference_plane
    u_duct = ratio * u_mean_ref / rig.duct.area_ratio           # û in the sensor duct at x_ref (phase 0)
    # Choose A+ so that A-·e^{ik-x} = R·A+·e^{-ik+x} at x_ref and û(x_ref) = u_duct.
    a_plus = u_duct * rhoc / ((1 - reflection) * cmath.exp(-1j * kp * x_ref))
    a_minus = reflection * a_plus * cmath.exp(-1j * kp * x_ref) / cmath.exp(1j * km * x_ref)
    n = int(round(duration_s * sample_rate_hz))
    t = np.arange(n) / sample_rate_hz
    rot = np.exp(2j * np.pi * freq_hz * t)
    rows, names = [], []
    for s in rig.pressure_sensors:
        p = a_plus * cmath.exp(-1j * kp * s.position) + a_minus * cmath.exp(1j * km * s.position)
        rows.append(np.real(p * rot) * s.sensitivity)
        names.append(s.channel)
    f_true = flame(freq_hz)
    light = rig.light.dark_offset + light_mean_v * (1 + np.real(f_true * ratio * rot))
    rows.append(light)
    names.append(rig.light.channel)
    if rig.drive.reference_channel:
        rows.append(0.5 * np.real(rot * cmath.exp(0.3j)))
        names.append(rig.drive.reference_channel)
    data = np.array(rows)
    n_p = len(rig.pressure_sensors)
    rms = np.array([noise_pa * s.sensitivity for s in rig.pressure_sensors] + [light_noise_v]
                   + ([1e-4] if rig.drive.reference_channel else []))
    if white:
        data += rng.standard_normal(data.shape) * rms[:, None]
    else:
        data += coloured_noise(rng, data.shape[0], n, rms, corner_hz=30.0, sample_rate_hz=sample_rate_hz)
    assert data.shape[0] == n_p + 1 + (1 if rig.drive.reference_channel else 0)
    return SynthRecord(data=data, channels=tuple(names), sample_rate_hz=sample_rate_hz, freq_hz=freq_hz,
                       true_ftf=complex(f_true), true_ratio=ratio)


def n_tau(n: float, tau_s: float) -> Callable[[float], complex]:
    """Crocco's n–τ flame, e^{+iωt}: F = n e^{-iωτ}."""
    return lambda f: n * cmath.exp(-2j * math.pi * f * tau_s)


def gaussian_delay(tau_s: float, sigma_s: float) -> Callable[[float], complex]:
    """Distributed delay, e^{+iωt}: F = exp(-iωτ - ω²σ²/2) (Komarek & Polifke 2010)."""
    return lambda f: cmath.exp(-2j * math.pi * f * tau_s - (2 * math.pi * f * sigma_s) ** 2 / 2)
