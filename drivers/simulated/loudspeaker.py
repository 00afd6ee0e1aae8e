"""Loudspeaker and amplifier of the simulated burner (e^{+iωt}).

Linear part: a mass-spring-damper cone driven by a force proportional to the amplifier
output voltage, so the cone velocity per volt is a second-order band-pass
v/V = v_pk · (iω/(ω_s Q)) / (1 - (ω/ω_s)² + iω/(ω_s Q)) (Beranek 1954, Acoustics, ch. 7;
Small 1972, J. Audio Eng. Soc. 20), peaking at v_pk at the resonance ω_s. Multiplied by
the cone area this is the volume velocity the speaker injects.

Mild nonlinearity at high drive (common practice for moving-coil drivers): the
fundamental compresses as 1/√(1 + (V/V_c)²) and harmonics k = 2, 3 grow as V^(k-1)
relative to the fundamental.

Imports: numpy only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

TWO_PI = 2.0 * np.pi


@dataclass(frozen=True)
class Loudspeaker:
    resonance_hz: float
    quality: float
    amplifier_gain: float  # V/V, amplifier input → speaker terminals
    peak_velocity_per_volt: float  # m/s of cone per volt at the terminals, at resonance
    cone_area_m2: float
    compression_v: float  # amplifier-input peak volts at which the fundamental is down 3 dB
    second_harmonic_per_v: float  # 2nd-harmonic amplitude / fundamental, per input volt
    third_harmonic_per_v2: float  # 3rd-harmonic amplitude / fundamental, per input volt²

    def volume_velocity_per_volt(self, freq_hz: np.ndarray | float) -> np.ndarray:
        """Small-signal volume velocity (m³/s) per peak volt at the amplifier input."""
        x = np.asarray(freq_hz, dtype=float) / self.resonance_hz
        band = (1j * x / self.quality) / (1.0 - x * x + 1j * x / self.quality)
        return self.amplifier_gain * self.peak_velocity_per_volt * self.cone_area_m2 * band

    def compression(self, drive_v: np.ndarray | float) -> np.ndarray:
        """Fraction of the small-signal fundamental left at peak input ``drive_v``."""
        return 1.0 / np.sqrt(1.0 + (np.asarray(drive_v, dtype=float) / self.compression_v) ** 2)

    def harmonic_ratio(self, order: int, drive_v: np.ndarray | float) -> np.ndarray:
        """Harmonic ``order`` amplitude relative to the fundamental at peak input ``drive_v``."""
        v = np.asarray(drive_v, dtype=float)
        if order == 2:
            return self.second_harmonic_per_v * v
        if order == 3:
            return self.third_harmonic_per_v2 * v * v
        raise ValueError(f"only harmonics 2 and 3 are modelled, not {order}")
