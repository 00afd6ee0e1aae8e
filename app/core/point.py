"""The typed result of one FTF point: what the engine publishes, storage keeps and front ends show.

``FtfPoint`` (frozen) carries the gain and phase with their 95 % intervals, the velocity at
the reference plane (``VelocityEstimate``), the quality figures and graded warnings, the
2 × 2 covariance of (Q̂'/Q̄, û'/ū) with its degrees of freedom (``PhasorCovariance``), the
interval's ingredients (``RatioInterval``) and the error budget's named systematic terms.
Made by ``app.core.response.evaluate_point``; every layer above the core types its points
with it instead of ``Any``.

Must not import Qt, pyqtgraph, matplotlib, h5py, drivers, the engine or storage.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .multimic import WaveFit
from .uncertainty import PhasorCovariance, RatioInterval


@dataclass(frozen=True)
class VelocityEstimate:
    """Acoustic velocity at the reference plane from the wall pressures."""

    freq_hz: float
    velocity_ref: complex          # û' at the reference plane, m/s (peak), positive in the flow direction
    amplitude_ratio: float         # |û'_ref| / ū_ref (peak)
    sigma_ratio: float             # standard uncertainty of amplitude_ratio
    var_velocity_ref: float        # E|δû|², (m/s)²
    mean_velocity_ref_m_s: float
    drive_phasor: complex | None   # drive reference channel's phasor in volts, if recorded
    cond: float
    residual: float
    pair_spread: float
    any_pair_in_band: bool
    pressure_peak_pa: float        # largest sensor pressure amplitude
    wave_fit: WaveFit = field(repr=False)
    dof: float = float("inf")      # effective degrees of freedom of var_velocity_ref


@dataclass(frozen=True)
class FtfPoint:
    """One evaluated FTF/FDF point with its uncertainty and quality figures."""

    freq_hz: float
    velocity: VelocityEstimate
    light_ratio: complex           # Q̂'/Q̄ from the light channel
    ftf: complex
    gain: float
    phase_rad: float
    gain_ci95: float               # 95 % half-width of the gain
    phase_ci95_rad: float          # 95 % half-width of the phase
    quality: dict[str, float]
    warnings: tuple[str, ...] = ()
    covariance: PhasorCovariance | None = field(default=None, repr=False)  # of (Q̂'/Q̄, û'/ū)
    interval: RatioInterval | None = None  # standard uncertainties, dof, coverage factors
    # the error budget's systematic terms: (input, complex δF/F for one standard uncertainty of it)
    budget: tuple[tuple[str, complex], ...] = field(default=(), repr=False)

    @property
    def amplitude_ratio(self) -> float:
        return self.velocity.amplitude_ratio


__all__ = ["FtfPoint", "VelocityEstimate"]
