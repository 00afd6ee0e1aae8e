"""Has a pressure sensor drifted since its last relative calibration?

Both calibrations are expressed against one reference (C_i/r = C_i/r0 / C_r/r0), compared at
their common frequencies, and each sensor's change in ln|C| and arg C is divided by the two
calibrations' combined standard uncertainty (independent calibrations: the variances add). A
sensor whose largest such ratio exceeds the limit has drifted. The limit keeps the false alarm
per sensor at ``alpha`` (1 %) over its 2·n comparisons (gain and phase at n frequencies):
Bonferroni's bound on the normal tail, z = Φ⁻¹(1 - α/(4n)), about 3.7 at 20 frequencies.
The reference sensor's own drift cannot be seen this way (it sets the scale); its certificate
or a pistonphone checks it.

Imports: numpy, scipy.stats and ``app.core.calibration`` only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from .calibration import Calibration, CalibrationError


@dataclass(frozen=True)
class SensorDrift:
    sensor: str
    z: float                  # largest |change| / combined standard uncertainty
    part: str                 # "gain" or "phase"
    freq_hz: float
    change: float             # relative gain change, or phase change in rad, at that frequency
    drifted: bool


def _against(cal: Calibration, reference: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    r = cal.column(reference)
    factor = cal.factor / cal.factor[:, [r]]
    u_g = np.sqrt(cal.u_gain_rel ** 2 + cal.u_gain_rel[:, [r]] ** 2)
    u_p = np.sqrt(cal.u_phase_rad ** 2 + cal.u_phase_rad[:, [r]] ** 2)
    u_g[:, r] = 0.0
    u_p[:, r] = 0.0
    return factor, u_g, u_p


def drift_limit(n_freqs: int, alpha: float = 0.01) -> float:
    return float(norm.isf(alpha / (4.0 * max(int(n_freqs), 1))))


def sensor_drift(previous: Calibration, current: Calibration, alpha: float = 0.01) -> list[SensorDrift]:
    """One entry per sensor other than ``current``'s reference, in ``current``'s order."""
    if set(previous.sensors) != set(current.sensors):
        raise CalibrationError(f"the previous calibration is of sensors {', '.join(previous.sensors)}, this one of "
                               f"{', '.join(current.sensors)}: no drift can be told")
    common = np.intersect1d(previous.freq_hz, current.freq_hz)
    if common.size == 0:
        raise CalibrationError("the previous calibration shares no frequency with this one")
    ref = current.reference
    fa, ga, pa = _against(previous, ref)
    fb, gb, pb = _against(current, ref)
    ia, ib = np.searchsorted(previous.freq_hz, common), np.searchsorted(current.freq_hz, common)
    limit = drift_limit(common.size, alpha)
    out = []
    for name in current.sensors:
        if name == ref:
            continue
        a, b = previous.column(name), current.column(name)
        ratio = fb[ib, b] / fa[ia, a]
        best = (0.0, "gain", float(common[0]), 0.0)
        for part, dev, u in (("gain", np.log(np.abs(ratio)), np.hypot(ga[ia, a], gb[ib, b])),
                             ("phase", np.angle(ratio), np.hypot(pa[ia, a], pb[ib, b]))):
            with np.errstate(divide="ignore", invalid="ignore"):
                z = np.where(u > 0, np.abs(dev) / u, np.where(np.abs(dev) > 0, np.inf, 0.0))
            k = int(np.argmax(z))
            if z[k] >= best[0]:
                change = float(np.expm1(dev[k])) if part == "gain" else float(dev[k])
                best = (float(z[k]), part, float(common[k]), change)
        out.append(SensorDrift(name, best[0], best[1], best[2], best[3], best[0] > limit))
    return out
