"""Relative calibration of the pressure sensors by sensor swapping, in the duct itself.

Chung & Blaser (1980, J. Acoust. Soc. Am. 68:907–913): with sensors A and B at two axial
positions the measured transfer is H_I = (S_B/S_A)·H₁₂; with the two sensors exchanged (each
keeps its cable and channel) it is H_II = (S_B/S_A)/H₁₂, so H_c = √(H_I·H_II) = S_B/S_A
whatever the sound field. Each non-reference sensor is swapped with the reference in turn;
its factor (in the common-plane convention, p in the reference's units = C·p_i) is C = 1/H_c.

H = G_ref,i/G_ref,ref from the segments' phasors; the standard uncertainty of ln|H| and of
arg H from the coherence γ² over n_d segments is √(1-γ²)/(γ√(2n_d)) (Bendat & Piersol,
Random Data, ch. 9); for H_c, half the root-sum-square of the two measurements' (the two
records are independent).

Imports: numpy, ``app.core.calibration``, ``app.core.multimic`` (the swap identity) only.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from .calibration import CalibrationError, FrequencyFactors
from .multimic import sensor_swap_calibration


def transfer_from_reference(phasors: np.ndarray, reference_index: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """H_i = G_ref,i/G_ref,ref, its relative standard uncertainty and γ², per sensor; (segments, sensors)."""
    p = np.asarray(phasors, dtype=complex)
    n_d, n_s = p.shape
    if n_d < 2:
        raise CalibrationError(f"a coherence needs at least 2 segments, got {n_d}")
    g = p.conj().T @ p / n_d
    g_rr = float(np.real(g[reference_index, reference_index]))
    if not g_rr > 0:
        raise CalibrationError("the reference sensor shows no signal")
    g_ri = g[reference_index]
    h = g_ri / g_rr
    coherence = np.clip(np.abs(g_ri) ** 2 / (g_rr * np.real(np.diag(g))), 0.0, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.sqrt(1.0 - coherence) / (np.sqrt(coherence) * math.sqrt(2.0 * n_d))
    return h, u, coherence


def swap_factors(normal: np.ndarray, swapped: Mapping[int, np.ndarray], reference_index: int,
                 freq_hz: float) -> FrequencyFactors:
    """Factors at one frequency from the normal record's phasors and, for every non-reference
    sensor index i, the phasors recorded with sensor i and the reference exchanged."""
    h_n, u_n, c_n = transfer_from_reference(normal, reference_index)
    n_s = h_n.size
    missing = [i for i in range(n_s) if i != reference_index and i not in swapped]
    if missing:
        raise CalibrationError(f"at {freq_hz:g} Hz no swapped record for sensor number(s) "
                               f"{', '.join(str(i + 1) for i in missing)}")
    factor = np.ones(n_s, dtype=complex)
    u = np.zeros(n_s)
    coherence = np.ones(n_s)
    n_d = np.asarray(normal).shape[0]
    for i in range(n_s):
        if i == reference_index:
            continue
        h_s, u_s, c_s = transfer_from_reference(swapped[i], reference_index)
        if not (abs(h_n[i]) > 0 and abs(h_s[i]) > 0):
            raise CalibrationError(f"at {freq_hz:g} Hz sensor number {i + 1} shows no signal coherent with the "
                                   "reference")
        h_c = complex(sensor_swap_calibration(h_n[i], h_s[i]))
        factor[i] = 1.0 / h_c
        u[i] = 0.5 * math.hypot(float(u_n[i]), float(u_s[i]))
        coherence[i] = min(float(c_n[i]), float(c_s[i]))
        n_d = min(n_d, np.asarray(swapped[i]).shape[0])
    ref_amp = float(np.sqrt(np.mean(np.abs(np.asarray(normal)[:, reference_index]) ** 2)))
    return FrequencyFactors(float(freq_hz), factor, coherence, u.copy(), u.copy(), int(n_d), ref_amp)
