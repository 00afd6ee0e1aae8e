"""Quality figures of a record and the flags they raise against limits.

Figures (computed by ``app.core.response``): SNR per channel, multi-microphone residual
and pair spread, harmonic distortion of velocity and light, drift between the first and
second half of the record, each of pair spread and drift also over its own standard error
(``*_z``), the velocity's propagated uncertainty and the plane-wave fit's grade, and on a rig
with a hot-wire its cross-check (``hotwire_*``, ``app.core.hotwire``). Flags are
short stable names a reviewer can filter on; a figure beyond its threshold but within its
own noise (or, for cond(H), with an accurate velocity) raises none.

Must not import Qt, pyqtgraph, matplotlib, h5py, drivers, the engine or storage.
"""

from __future__ import annotations

from typing import Callable, Mapping

import numpy as np

from .harmonic import HarmonicFit, fit_harmonics


LIGHT_BLOCKS = 16        # batches for the light's mean-level standard error
SIGNIFICANCE_Z = 3.0     # a figure's deviation must exceed this many of its own standard errors


def drift_figures(fit: HarmonicFit, data: np.ndarray, velocity_of: Callable[[HarmonicFit], object],
                  light_row: int) -> dict[str, float]:
    """Relative change of velocity phasor and mean light between the record's two halves, and
    each change over its own standard error (``*_z``).

    A drifting operating point (mean flow, temperature) or a slowly dying flame shows up
    here before it shows in the point's scatter (common practice: compare halves). Uses
    the half-record fits the harmonic estimator already made, or fits the halves anew.

    Standard errors: the velocity's from each half's own noise covariance, E|δ(u₂ − u₁)|² =
    E|δu₁|² + E|δu₂|² (independent halves); the mean light's by batch means (the record cut
    into LIGHT_BLOCKS blocks, the forcing's fitted sinusoid and harmonics removed from each
    block's mean in closed form) with the successive-difference variance of the block means,
    which a slow trend does not inflate (von Neumann et al. 1941, Ann. Math. Stat. 12; batch
    means: common practice in simulation output analysis). A change within a few standard
    errors is the noise, not drift: a point forced weakly (target unreachable) has a large
    relative change of a tiny, noisy velocity and must not be flagged for drift.
    """
    if fit.halves is not None:
        fits = list(fit.halves)
    else:
        half = data.shape[1] // 2
        fits = [fit_harmonics(part, fit.sample_rate_hz, fit.freq_hz, n_harmonics=1)
                for part in (data[:, :half], data[:, half:2 * half])]
    vels = [velocity_of(f) for f in fits]
    u = [v.velocity_ref for v in vels]  # type: ignore[attr-defined]
    var_u = [v.var_velocity_ref for v in vels]  # type: ignore[attr-defined]
    mean_abs = 0.5 * (abs(u[0]) + abs(u[1]))
    light = [float(f.offset[light_row]) for f in fits]
    light_avg = 0.5 * (abs(light[0]) + abs(light[1]))
    du, dl = abs(u[1] - u[0]), abs(light[1] - light[0])
    se_u = float(np.sqrt(var_u[0] + var_u[1]))
    se_l = _light_difference_se(fit, data[light_row], light_row)
    return {
        "drift_velocity": float(du / mean_abs) if mean_abs > 0 else float("inf"),
        "drift_light": float(dl / light_avg) if light_avg > 0 else float("inf"),
        "drift_velocity_z": _z(du, se_u),
        "drift_light_z": _z(dl, se_l),
    }


def _z(deviation: float, standard_error: float) -> float:
    if standard_error > 0 and np.isfinite(standard_error):
        return float(deviation / standard_error)
    return 0.0 if deviation == 0 else float("inf")


def _light_difference_se(fit: HarmonicFit, x: np.ndarray, row: int) -> float:
    """Standard error of (mean of the second half − mean of the first) of one channel by batch means."""
    n = x.size
    k = LIGHT_BLOCKS
    length = n // k
    if length < 2:
        return float("nan")
    block = x[:k * length].reshape(k, length).mean(axis=1)
    # remove each block's mean of the fitted periodic part: Re{h · mean e^{iθn}} in closed form
    starts = np.arange(k) * length
    theta = 2 * np.pi * fit.freq_hz / fit.sample_rate_hz
    parts = [(1, complex(fit.amplitude[row]))]
    if fit.harmonics.size:
        parts += [(order + 2, complex(h)) for order, h in enumerate(fit.harmonics[row]) if np.isfinite(h)]
    for order, h in parts:
        t = order * theta
        step = np.exp(1j * t)
        if abs(1 - step) < 1e-12:
            continue
        mean_exp = np.exp(1j * t * starts) * (1 - step**length) / (length * (1 - step))
        block -= np.real(h * mean_exp)
    var_block = float(np.sum(np.diff(block) ** 2) / (2 * (k - 1)))
    return float(np.sqrt(4.0 * var_block / k))


# (figure key, flag name, threshold attribute, sense): a figure beyond its threshold raises the flag.
QUALITY_RULES = (
    ("snr_db_pressure_min", "low-snr-pressure", "snr_db_min", "min"),
    ("snr_db_light", "low-snr-light", "snr_db_min", "min"),
    ("mmm_residual", "high-residual", "residual_max", "max"),
    ("pair_spread", "pair-spread", "pair_spread_max", "max"),
    ("distortion_velocity", "distortion-velocity", "distortion_max", "max"),
    ("distortion_light", "distortion-light", "distortion_max", "max"),
    ("drift_velocity", "drift-velocity", "drift_max", "max"),
    ("drift_light", "drift-light", "drift_max", "max"),
    ("cond", "ill-conditioned", "cond_max", "max"),
    ("relative_ci95", "too-uncertain", "relative_ci95_max", "max"),
    # the hot-wire cross-check (app.core.hotwire), only on a rig with a [hot_wire] table
    ("hotwire_diff_z", "hotwire-disagrees", "hotwire_diff_z_max", "max"),
    ("hotwire_coherence", "hotwire-low-coherence", "hotwire_coherence_min", "min"),
)

# Figures compared with their own standard error too: the flag is raised only when the figure
# is beyond its threshold AND its deviation is more than SIGNIFICANCE_Z standard errors (the
# ``*_z`` figure), so pure noise does not raise it. (For a complex Gaussian deviation
# P(z > 3) = e^{-9} ≈ 1e-4 per figure.) A missing ``*_z`` figure (older results) leaves the
# fixed threshold alone.
SIGNIFICANCE = {"pair-spread": "pair_spread_z", "drift-velocity": "drift_velocity_z",
                "drift-light": "drift_light_z"}
# Likewise a large cond(H) flags the point only when it matters: when the velocity's propagated
# relative uncertainty (``velocity_rel_uncertainty``) exceeds VELOCITY_ERROR_CAUTION.
MATERIALITY = {"ill-conditioned": ("velocity_rel_uncertainty", 0.01)}

# Limits used when the thresholds object (a plan's [quality] table) does not define them.
# relative_ci95 = max(gain half-width / gain, phase half-width in rad): 0.3 is ±30 % in gain or
# ±17° in phase at 95 %, beyond which a point does not constrain a network model (judgement;
# first-order propagation already fails near there, see app.core.uncertainty).
# The hot-wire's limits: its difference from the multi-microphone velocity over its standard
# error (3: P = e^{-9} by chance) and a coherence γ² of 0.8 between the two (judgement).
DEFAULT_LIMITS = {"relative_ci95_max": 0.3, "hotwire_diff_z_max": 3.0, "hotwire_coherence_min": 0.8}

FLAG_TEXT = {
    "low-snr-pressure": "a pressure channel has a low signal-to-noise ratio at the forcing frequency",
    "low-snr-light": "the light channel has a low signal-to-noise ratio at the forcing frequency",
    "high-residual": "the pressures do not fit plane waves well (sensor position, calibration or higher modes)",
    "pair-spread": "sensor pairs disagree on the velocity at the reference plane, beyond their noise",
    "distortion-velocity": "the velocity has strong harmonics (speaker nonlinearity or a resonance)",
    "distortion-light": "the light has strong harmonics (flame saturation)",
    "drift-velocity": "the forcing at the reference plane drifted between the two halves of the record, "
                      "beyond its noise",
    "drift-light": "the mean light drifted between the two halves of the record beyond its noise (flow, "
                   "temperature or flame)",
    "ill-conditioned": "the multi-microphone fit is badly conditioned at this frequency (sensor spacing) and "
                       "the velocity's propagated error is more than 1 %",
    "too-uncertain": "the 95 % interval is too wide for the point to be used (low signal-to-noise ratio)",
    "hotwire-disagrees": "the hot-wire velocity differs from the multi-microphone velocity at its position beyond "
                         "their uncertainty (a convective disturbance locked to the forcing, or a calibration error)",
    "hotwire-low-coherence": "the hot-wire and the multi-microphone velocity are poorly coherent: the wire sees a "
                             "convective disturbance that is not sound",
}


# Grades of the multi-microphone fit (0 sound, 1 caution, 2 unreliable) by the propagated
# relative standard uncertainty of û/ū (noise and every stated systematic input) and by cond(H).
# Limits are judgement (common practice: a few per cent of velocity error is what an FTF
# point tolerates; cond(H) beyond 100 amplifies any unstated sensor error a hundredfold).
VELOCITY_ERROR_CAUTION = 0.01
VELOCITY_ERROR_UNRELIABLE = 0.05
COND_CAUTION = 10.0         # the plan's default cond_max: below it the fit amplifies no input error much
COND_UNRELIABLE = 100.0
GRADE_WORDS = ("well determined", "poorly determined: use with care", "unreliable")


def conditioning_grade(cond: float, velocity_rel_uncertainty: float) -> int:
    """0, 1 or 2: how far the plane-wave fit's conditioning spoils û/ū. A fit with cond(H) up to
    COND_CAUTION is sound whatever the velocity's error (that error comes from the inputs — noise,
    uncalibrated sensors — and is in the point's interval already); above it, graded by the
    velocity's propagated error, and above COND_UNRELIABLE (near a half-wavelength spacing) at
    least caution. An undetermined velocity is unreliable."""
    err = float(velocity_rel_uncertainty)
    if not np.isfinite(err):
        return 2
    if np.isfinite(cond) and cond <= COND_CAUTION:
        return 0
    grade = 0 if err <= VELOCITY_ERROR_CAUTION else 1 if err <= VELOCITY_ERROR_UNRELIABLE else 2
    if not np.isfinite(cond) or cond > COND_UNRELIABLE:
        grade = max(grade, 1)
    return grade


def conditioning_warning(freq_hz: float, cond: float, velocity_rel_uncertainty: float, any_pair_in_band: bool
                         ) -> str | None:
    """A graded warning about the plane-wave fit, or None when it is sound (grade 0): a warning
    flags the point, and a point whose velocity is well determined is not flagged for its
    sensor spacing (e.g. far below every pair's usable band but accurate to 0.2 %)."""
    grade = conditioning_grade(cond, velocity_rel_uncertainty)
    if grade == 0:
        return None
    where = ("no sensor pair lies in its usable band (0.1π < ks < 0.8π)" if not any_pair_in_band
             else "the plane-wave fit is badly conditioned")
    cond_text = f"cond(H) = {cond:.3g}" if np.isfinite(cond) else "cond(H) infinite (singular)"
    err = (f"û/ū uncertain by {100 * velocity_rel_uncertainty:.2g} % (1σ, noise and stated errors)"
           if np.isfinite(velocity_rel_uncertainty) else "û/ū undetermined")
    return f"at {freq_hz:g} Hz {where}; {cond_text}, {err}: {GRADE_WORDS[grade]}"


def quality_flags(figures: Mapping[str, float], thresholds: object) -> tuple[str, ...]:
    """Flags for every figure beyond its threshold (``thresholds`` has the attributes named in
    QUALITY_RULES, e.g. a plan's ``[quality]`` table, or DEFAULT_LIMITS for those it lacks); a NaN
    figure gives ``<flag>-unknown``."""
    flags = []
    for key, flag, attr, sense in QUALITY_RULES:
        value = figures.get(key)
        if value is None:
            continue
        limit = getattr(thresholds, attr, DEFAULT_LIMITS.get(attr))
        if limit is None:
            continue
        value = float(value)
        if not np.isfinite(value) and not (sense == "min" and value == np.inf):
            flags.append(f"{flag}-unknown")
        elif (sense == "min" and value < limit) or (sense == "max" and value > limit):
            z = figures.get(SIGNIFICANCE.get(flag, ""))
            if z is not None and np.isfinite(float(z)) and float(z) <= SIGNIFICANCE_Z:
                continue        # within its own noise
            key_limit = MATERIALITY.get(flag)
            if key_limit is not None:
                err = figures.get(key_limit[0])
                if err is not None and np.isfinite(float(err)) and float(err) <= key_limit[1]:
                    continue    # badly conditioned, but the velocity is still accurate
            flags.append(flag)
    return tuple(flags)
