"""Adaptive refinement: where to insert frequencies after a coarse sweep.

Between two neighbouring measured points (same forcing amplitude) a frequency is inserted at
the midpoint when the curve changes there in a way a straight line through the neighbours
misses, and the change is both LARGE and REAL:

* large: the slope of ln(gain) or of the phase changes across a point by more than
  ``gain_change`` (relative gain) or ``phase_change`` (rad) over one interval; a gain peak
  (a local maximum) ranks higher still. A steady trend (a pure delay's falling phase, a
  smooth low-pass tail) bends little and gets nothing, however steep it is;
* real: the change is above ``sigmas`` times its own standard uncertainty (a bend within the
  noise is no reason to measure more).

Candidates are ranked by how far past the thresholds they are, a midpoint closer than
``min_spacing`` to a measured frequency is not inserted, and at most ``budget`` frequencies
are inserted over the whole run (the engine measures them in rounds, re-ranking with the new
points each time). Inserted points are flagged ``refined`` in what is stored.

Pure arithmetic: standard library and numpy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

REFINED_FLAG = "refined"


@dataclass(frozen=True)
class Measured:
    """What refinement needs of one settled point (standard uncertainties, not 95 % half-widths)."""

    freq_hz: float
    gain: float
    phase_rad: float
    sigma_gain: float
    sigma_phase_rad: float


def from_result(result: Any) -> Measured:
    """A core FtfPoint as a Measured (95 % half-widths over a coverage factor of 2)."""
    return Measured(float(result.freq_hz), float(result.gain), float(result.phase_rad),
                    float(result.gain_ci95) / 2.0, float(result.phase_ci95_rad) / 2.0)


def _wrap(x: float) -> float:
    return (x + math.pi) % (2.0 * math.pi) - math.pi


def candidates(points: Sequence[Measured], settings: Any, taken_hz: Sequence[float] = ()) -> list[float]:
    """Midpoints to insert, best first (at most ``settings.budget``), for one forcing amplitude."""
    pts = sorted((p for p in points if math.isfinite(p.gain) and p.gain > 0), key=lambda p: p.freq_hz)
    if len(pts) < 3:
        return []
    f = np.array([p.freq_hz for p in pts])
    log_g = np.log(np.array([p.gain for p in pts]))
    phase = np.unwrap(np.array([p.phase_rad for p in pts]))
    s_lg = np.array([p.sigma_gain / p.gain for p in pts])       # standard uncertainty of ln G
    s_ph = np.array([p.sigma_phase_rad for p in pts])
    n = len(pts)
    score = np.zeros(n - 1)
    for i in range(1, n - 1):
        half = 0.5 * (f[i + 1] - f[i - 1])
        # the change of slope across point i, over one interval: what a straight line through the
        # neighbours misses at i (a smooth low-pass tail or a pure delay bends little)
        bends = []
        for y, sy, limit in ((log_g, s_lg, settings.gain_change), (phase, s_ph, settings.phase_change)):
            left = (y[i] - y[i - 1]) / (f[i] - f[i - 1])
            right = (y[i + 1] - y[i]) / (f[i + 1] - f[i])
            bend = abs(right - left) * half
            # the bend's own uncertainty: second difference of three independent values
            noise = settings.sigmas * math.sqrt(sy[i - 1] ** 2 + 4.0 * sy[i] ** 2 + sy[i + 1] ** 2)
            bends.append(bend / limit if bend > noise else 0.0)
        peak = log_g[i] > log_g[i - 1] and log_g[i] > log_g[i + 1]
        s = max(bends) + (1.0 if peak and bends[0] > 0 else 0.0)
        score[i - 1] = max(score[i - 1], s)
        score[i] = max(score[i], s)
    known = np.concatenate([f, np.asarray(taken_hz, dtype=float)])
    out: list[float] = []
    for i in np.argsort(-score):
        if score[i] <= 1.0 or len(out) >= settings.budget:
            break
        mid = 0.5 * (f[i] + f[i + 1])
        if np.min(np.abs(known - mid)) < settings.min_spacing:
            continue
        out.append(float(mid))
        known = np.append(known, mid)
    return out

