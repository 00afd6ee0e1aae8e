"""Quality figures of a record and the flags they raise against limits.

Figures (computed by ``app.core.response``): SNR per channel, multi-microphone residual
and pair spread, harmonic distortion of velocity and light, drift between the first and
second half of the record. Flags are short stable names a reviewer can filter on.

Must not import Qt, pyqtgraph, matplotlib, h5py, drivers, the engine or storage.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Mapping

import numpy as np

from .harmonic import HarmonicFit, fit_harmonics


def drift_figures(fit: HarmonicFit, data: np.ndarray, velocity_of: Callable[[HarmonicFit], object],
                  light_row: int) -> dict[str, float]:
    """Relative change of velocity phasor and mean light between the record's two halves.

    A drifting operating point (mean flow, temperature) or a slowly dying flame shows up
    here before it shows in the point's scatter (common practice: compare halves). Uses
    the half-record fits the harmonic estimator already made, or fits the halves anew.
    """
    if fit.halves is not None:
        fits = list(fit.halves)
    else:
        half = data.shape[1] // 2
        fits = [fit_harmonics(part, fit.sample_rate_hz, fit.freq_hz, n_harmonics=1)
                for part in (data[:, :half], data[:, half:2 * half])]
    vels = [velocity_of(f) for f in fits]
    u = [v.velocity_ref for v in vels]  # type: ignore[attr-defined]
    mean_abs = 0.5 * (abs(u[0]) + abs(u[1]))
    light = [float(f.offset[light_row]) for f in fits]
    light_avg = 0.5 * (abs(light[0]) + abs(light[1]))
    return {
        "drift_velocity": float(abs(u[1] - u[0]) / mean_abs) if mean_abs > 0 else float("inf"),
        "drift_light": float(abs(light[1] - light[0]) / light_avg) if light_avg > 0 else float("inf"),
    }


@dataclass(frozen=True)
class QualityLimits:
    """Thresholds above/below which a settled point is flagged (defaults: common practice)."""

    min_snr_db: float = 20.0
    max_mmm_residual: float = 0.05
    max_pair_spread: float = 0.10
    max_distortion: float = 0.10
    max_drift: float = 0.05
    max_cond: float = 10.0


FLAG_TEXT = {
    "low-snr": "a pressure or light channel has a low signal-to-noise ratio at the forcing frequency",
    "mmm-residual": "the pressures do not fit plane waves well (sensor position, calibration or higher modes)",
    "pair-spread": "sensor pairs disagree on the velocity at the reference plane",
    "distortion": "velocity or light has strong harmonics (speaker nonlinearity or flame saturation)",
    "drift": "the operating point drifted between the two halves of the record",
    "ill-conditioned": "the multi-microphone fit is badly conditioned at this frequency",
    "out-of-band": "no sensor pair is in its usable band at this frequency",
}


def quality_flags(figures: Mapping[str, float], limits: QualityLimits, any_pair_in_band: bool = True) -> tuple[str, ...]:
    """Flags raised by a point's figures; empty when everything is within limits."""
    flags = []
    if min(figures.get("snr_db_pressure_min", np.inf), figures.get("snr_db_light", np.inf)) < limits.min_snr_db:
        flags.append("low-snr")
    if figures.get("mmm_residual", 0.0) > limits.max_mmm_residual:
        flags.append("mmm-residual")
    if figures.get("pair_spread", 0.0) > limits.max_pair_spread:
        flags.append("pair-spread")
    if max(figures.get("distortion_velocity", 0.0), figures.get("distortion_light", 0.0)) > limits.max_distortion:
        flags.append("distortion")
    if max(figures.get("drift_velocity", 0.0), figures.get("drift_light", 0.0)) > limits.max_drift:
        flags.append("drift")
    if figures.get("cond", 1.0) > limits.max_cond:
        flags.append("ill-conditioned")
    if not any_pair_in_band:
        flags.append("out-of-band")
    return tuple(flags)
