"""Fault injection of the simulated burner: when each switchable fault acts, per sample.

Each fault from the scenario's [faults] table turns into a sample index (counted from
the start of acquisition) from which it acts; the burner applies it to the SIGNALS the
way a real rig shows it (light at the dark level after a flame-out, a dead channel at a
constant level, light at the detector rail, pressures without the forcing line while
the drive reference goes on, and a back-end that no longer answers).

Imports: numpy and the scenario module only.
"""

from __future__ import annotations

import math

import numpy as np

from .scenario import Faults

NEVER = np.iinfo(np.int64).max


def onset_index(enabled: bool, time_s: float | None, sample_rate_hz: float) -> int:
    """First sample index at which a timed fault acts (NEVER if disabled or untimed)."""
    if not enabled or time_s is None:
        return NEVER
    return int(math.ceil(time_s * sample_rate_hz - 1e-9))


def active_mask(onset: int, start_index: int, n_samples: int) -> np.ndarray | None:
    """Boolean mask of the block's samples at or after ``onset``; None if none are."""
    if onset >= start_index + n_samples:
        return None
    return np.arange(start_index, start_index + n_samples) >= onset


class FaultClock:
    """Onsets of every fault of a scenario, in samples, and the latched flame-out."""

    def __init__(self, faults: Faults, sample_rate_hz: float) -> None:
        fs = sample_rate_hz
        self.faults = faults
        self.flame_out_time = onset_index(faults.flame_out.enabled, faults.flame_out.time, fs)
        self.flame_out_amplitude = (faults.flame_out.amplitude if faults.flame_out.enabled else None)
        drop = faults.sensor_dropout
        self.dropout_channel = drop.channel if drop.enabled else None
        self.dropout = onset_index(drop.enabled, drop.time, fs)
        self.light_saturation = onset_index(faults.light_saturation.enabled, faults.light_saturation.time, fs)
        self.disconnect = onset_index(faults.drive_disconnect.enabled, faults.drive_disconnect.time, fs)
        self.silent = onset_index(faults.stops_answering.enabled, faults.stops_answering.time, fs)
        self.flame_out_index = NEVER  # latched: a blown-off flame stays out

    def flame_out_in_block(self, start_index: int, n_samples: int, amplitude_ratio: np.ndarray) -> int:
        """Latch and return the flame-out sample index, given this block's |û|/ū envelope."""
        candidates = [self.flame_out_index, self.flame_out_time]
        if self.flame_out_amplitude is not None:
            over = np.flatnonzero(amplitude_ratio > self.flame_out_amplitude)
            if over.size:
                candidates.append(start_index + int(over[0]))
        self.flame_out_index = min(candidates)
        return self.flame_out_index

    def answers(self, end_index: int) -> bool:
        """False once the back-end has stopped answering (before the block ending at end_index)."""
        return end_index <= self.silent
