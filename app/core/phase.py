"""The phase as people read it: unwrapped along the frequency axis per forcing amplitude.

One rule for every place a person reads a phase (``review``, the sweep's progress lines,
the export's plot, CSV and JSON, the window's table and curve): the points of one
forcing amplitude are sorted by frequency (ties keep their given order) and their
phases unwrapped with ``numpy.unwrap`` (a jump of more than π between neighbours becomes
a jump of less than π by adding whole turns); the lowest frequency keeps its stored
value in (-π, π]. People read it in degrees (:func:`phase_as_read_deg`); data files may
keep radians (:func:`unwrapped_phase_rad`), with the same unwrapping.

Phases follow the time convention x(t) = Re{x̂ e^{+iωt}}: a delay gives a falling phase.
A point without a finite phase or frequency is left out of its neighbours' unwrapping
and reads NaN.

Imports: numpy only (no Qt, no storage, no engine).
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

AMPLITUDE_DIGITS = 9      # forcing amplitudes equal to this many decimals belong to one curve


def unwrapped_phase_rad(freq_hz: Sequence[float] | np.ndarray, phase_rad: Sequence[float] | np.ndarray,
                        amplitude: Sequence[float] | np.ndarray | None = None) -> np.ndarray:
    """Phases (radians) unwrapped along frequency, per forcing amplitude, in the order given.

    ``amplitude`` (e.g. the target |u'|/u of each point) groups the points into curves;
    ``None`` puts them all on one curve."""
    f = np.asarray(freq_hz, dtype=float).ravel()
    ph = np.asarray(phase_rad, dtype=float).ravel()
    if f.shape != ph.shape:
        raise ValueError(f"freq_hz ({f.size} values) and phase_rad ({ph.size} values) must have the same length")
    if amplitude is None:
        amp = np.zeros_like(f)
    else:
        amp = np.round(np.asarray(amplitude, dtype=float).ravel(), AMPLITUDE_DIGITS)
        if amp.shape != f.shape:
            raise ValueError(f"amplitude ({amp.size} values) and freq_hz ({f.size} values) must have the same "
                             f"length")
        amp = np.where(np.isfinite(amp), amp, -np.inf)     # points without an amplitude: one curve
    out = np.full_like(ph, np.nan)
    ok = np.isfinite(f) & np.isfinite(ph)
    for a in np.unique(amp[ok]):
        sel = np.flatnonzero(ok & (amp == a))
        order = sel[np.lexsort((sel, f[sel]))]           # by frequency, ties in the order given
        out[order] = np.unwrap(ph[order])
    return out


def phase_as_read_deg(freq_hz: Sequence[float] | np.ndarray, phase_rad: Sequence[float] | np.ndarray,
                      amplitude: Sequence[float] | np.ndarray | None = None) -> np.ndarray:
    """The phase as people read it: degrees, unwrapped along frequency per forcing amplitude."""
    return np.degrees(unwrapped_phase_rad(freq_hz, phase_rad, amplitude))
