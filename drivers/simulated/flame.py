"""Flame models of the simulated burner: the TRUE flame transfer/describing function.

Everything here uses the project's time convention x(t) = Re{x̂ e^{+iωt}}, so a pure delay
reads e^{-iωτ}. Models:

* n–τ (Crocco): F = n e^{-iωτ}.
* Gaussian distributed time delay, a sum of terms F = Σ n_k exp(-iωτ_k - ω²σ_k²/2)
  (Komarek & Polifke 2010, J. Eng. Gas Turbines Power 132:061503).
* Conical laminar flame, uniform-velocity model (Schuller, Durox & Candel 2003,
  Combust. Flame 134:21-34). The paper writes, for e^{-iωt},
  F = 2/ω*² [1 - e^{iω*} + iω*], ω* = ωR/(S_L cos α); here it is complex-conjugated.
* Saturation of the heat-release response, Q'/Q̄ = clip(F u'/ū, ±a_s), through the
  describing function of a clip: N(γ) = (2/π)(asin γ + γ√(1-γ²)) for γ < 1, else 1,
  with γ = a_s / (|F| a) (Gelb & Vander Velde 1968, Multiple-Input Describing Functions).

Imports: numpy only. Must not import app.core (analysis) modules.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

TWO_PI = 2.0 * np.pi


def _omega(freq_hz: np.ndarray | complex | float) -> np.ndarray:
    """Angular frequency, complex when the frequency is (the models are analytic in ω)."""
    a = np.asarray(freq_hz)
    return TWO_PI * (a.astype(complex) if np.iscomplexobj(a) else a.astype(float))


def n_tau(freq_hz: np.ndarray | float, n: float, tau_s: float) -> np.ndarray:
    """Crocco's n–τ model, e^{+iωt} convention."""
    omega = _omega(freq_hz)
    return n * np.exp(-1j * omega * tau_s)


def gaussian_delay(freq_hz: np.ndarray | float, n: float, tau_s: float, sigma_s: float) -> np.ndarray:
    """One Gaussian distributed-delay term, F = n exp(-iωτ - ω²σ²/2)."""
    omega = _omega(freq_hz)
    return n * np.exp(-1j * omega * tau_s - 0.5 * (omega * sigma_s) ** 2)


def conical_reduced_frequency(freq_hz: np.ndarray | float, radius_m: float, flame_speed_m_s: float,
                              half_angle_rad: float) -> np.ndarray:
    """ω* = ωR / (S_L cos α) of the uniform-velocity conical flame."""
    return _omega(freq_hz) * radius_m / (flame_speed_m_s * np.cos(half_angle_rad))


def conical_from_reduced(omega_star: np.ndarray | float) -> np.ndarray:
    """Conical-flame FTF as a function of ω*, already conjugated to e^{+iωt}.

    Near ω* = 0 the closed form loses digits (1 - e^{iω*} + iω* ~ ω*²/2); a series is used.
    For real ω* the conjugate of the paper's G(ω*) equals G(-ω*), which is the form used
    here: G(-ω*) is analytic, so it also holds at a complex ω* (mode finding).
    """
    a = np.asarray(omega_star)
    w = -(a.astype(complex) if np.iscomplexobj(a) else a.astype(float))  # conj G(ω*) = G(-ω*) for real ω*
    small = np.abs(w) < 1e-3
    safe = np.where(small, 1.0, w)
    closed = 2.0 / safe**2 * (1.0 - np.exp(1j * safe) + 1j * safe)  # paper's e^{-iωt} form
    series = 1.0 + 1j * w / 3.0 - w**2 / 12.0  # Taylor expansion of the same expression
    return np.where(small, series, closed)


def conical(freq_hz: np.ndarray | float, radius_m: float, flame_speed_m_s: float,
            half_angle_rad: float) -> np.ndarray:
    """Conical laminar flame (uniform-velocity model), e^{+iωt} convention."""
    return conical_from_reduced(conical_reduced_frequency(freq_hz, radius_m, flame_speed_m_s, half_angle_rad))


def clip_describing_function(gamma: np.ndarray | float) -> np.ndarray:
    """Describing function N(γ) of a unit-slope clip at ±γ for a unit-amplitude sine input."""
    g = np.clip(np.asarray(gamma, dtype=float), 0.0, None)
    gi = np.minimum(g, 1.0)
    val = (2.0 / np.pi) * (np.arcsin(gi) + gi * np.sqrt(1.0 - gi * gi))
    return np.where(g >= 1.0, 1.0, val)


@dataclass(frozen=True)
class GaussianTerm:
    n: float
    tau_s: float
    sigma_s: float


@dataclass(frozen=True)
class FlameModel:
    """The true flame of a scenario: linear FTF plus saturation of the heat release.

    ``saturation`` is the peak of Q'/Q̄ the flame can reach (a_s); ``None`` means linear.
    ``amplitude_ratio`` arguments are PEAK values of |û_ref|/ū_ref.
    """

    kind: str  # "n_tau" | "gaussian" | "conical"
    n: float = 1.0
    tau_s: float = 0.0
    terms: tuple[GaussianTerm, ...] = ()
    radius_m: float = 0.0
    flame_speed_m_s: float = 0.0
    half_angle_rad: float = 0.0
    saturation: float | None = None

    def linear(self, freq_hz: np.ndarray | float) -> np.ndarray:
        """Small-amplitude FTF (Q̂'/Q̄)/(û_ref/ū_ref)."""
        if self.kind == "n_tau":
            return n_tau(freq_hz, self.n, self.tau_s)
        if self.kind == "gaussian":
            total = np.zeros(np.shape(freq_hz), dtype=complex)
            for t in self.terms:
                total = total + gaussian_delay(freq_hz, t.n, t.tau_s, t.sigma_s)
            return total
        if self.kind == "conical":
            return conical(freq_hz, self.radius_m, self.flame_speed_m_s, self.half_angle_rad)
        raise ValueError(f"unknown flame model {self.kind!r}")

    def saturation_factor(self, linear_gain: np.ndarray | float, amplitude_ratio: np.ndarray | float) -> np.ndarray:
        """N(γ), γ = a_s / (|F| a): the fraction of the linear response left at amplitude a."""
        if self.saturation is None:
            return np.ones(np.broadcast(np.asarray(linear_gain), np.asarray(amplitude_ratio)).shape)
        drive = np.asarray(linear_gain, dtype=float) * np.asarray(amplitude_ratio, dtype=float)
        gamma = np.where(drive > 0.0, self.saturation / np.maximum(drive, 1e-300), np.inf)
        return clip_describing_function(gamma)

    def describing(self, freq_hz: np.ndarray | float, amplitude_ratio: np.ndarray | float) -> np.ndarray:
        """FDF at peak amplitude ratio a = |û_ref|/ū_ref."""
        lin = self.linear(freq_hz)
        return lin * self.saturation_factor(np.abs(lin), amplitude_ratio)
