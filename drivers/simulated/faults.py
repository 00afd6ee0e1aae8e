"""Fault injection of the simulated burner: when each switchable fault acts, per sample.

Each fault from the scenario's [faults] table turns into a sample index (counted from
the start of acquisition) from which it acts; the burner applies it to the SIGNALS the
way a real rig shows it (light at the dark level after a flame-out, a dead channel at a
constant level, light at the detector rail, pressures without the forcing line while
the drive reference goes on, a drive chain that delivers a multiple of the command, and
a back-end that no longer answers).

One fault is not switchable, because a real rig has it too: flow reversal. When the true
peak |û_ref|/ū_ref at the reference plane reaches 1, the flow there reverses during part
of each cycle and the flame blows off (common practice: a premixed flame cannot stay
anchored against a reversed flow). It latches like the scenario's ``flame_out`` and is
recorded as a rig-side event named "blow-off".

Imports: numpy and the scenario module only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .scenario import Faults

NEVER = np.iinfo(np.int64).max
FLOW_REVERSAL = 1.0  # peak |û_ref|/ū_ref at which the flow at the reference plane reverses
BLOW_OFF = "blow-off"
FLAME_OUT = "flame-out"


@dataclass(frozen=True)
class RigEvent:
    """Something that happened to the simulated rig itself (not a fault the engine raised)."""

    name: str  # "blow-off" (flow reversal) or "flame-out" (the scenario's flame_out fault)
    time_s: float  # simulated time of the sample it happened at
    sample_index: int
    amplitude_ratio: float  # true peak |û_ref|/ū_ref at that sample
    detail: str


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
    """Onsets of every fault of a scenario, in samples, the latched flame-out and the rig's events."""

    def __init__(self, faults: Faults, sample_rate_hz: float) -> None:
        fs = self.sample_rate_hz = sample_rate_hz
        self.faults = faults
        self.flame_out_time = onset_index(faults.flame_out.enabled, faults.flame_out.time, fs)
        self.flame_out_amplitude = (faults.flame_out.amplitude if faults.flame_out.enabled else None)
        drop = faults.sensor_dropout
        self.dropout_channel = drop.channel if drop.enabled else None
        self.dropout = onset_index(drop.enabled, drop.time, fs)
        self.light_saturation = onset_index(faults.light_saturation.enabled, faults.light_saturation.time, fs)
        self.disconnect = onset_index(faults.drive_disconnect.enabled, faults.drive_disconnect.time, fs)
        self.silent = onset_index(faults.stops_answering.enabled, faults.stops_answering.time, fs)
        self.output_gain = onset_index(faults.output_gain.enabled, faults.output_gain.time, fs)
        self.flame_out_index = NEVER  # latched: a blown-off flame stays out
        self.events: list[RigEvent] = []

    def flame_out_in_block(self, start_index: int, n_samples: int, amplitude_ratio: np.ndarray) -> int:
        """Latch and return the flame-out sample index, given this block's true |û|/ū envelope.

        A new flame-out is recorded in :attr:`events` (the earliest cause wins).
        """
        if self.flame_out_index < NEVER:
            return self.flame_out_index
        candidates: list[tuple[int, str, str]] = []
        reversed_flow = np.flatnonzero(amplitude_ratio >= FLOW_REVERSAL)
        if reversed_flow.size:
            candidates.append((start_index + int(reversed_flow[0]), BLOW_OFF,
                               "flow reversal at the reference plane (peak |u'|/u_mean >= 1)"))
        if self.flame_out_amplitude is not None:
            over = np.flatnonzero(amplitude_ratio > self.flame_out_amplitude)
            if over.size:
                candidates.append((start_index + int(over[0]), FLAME_OUT,
                                   f"scenario fault flame_out: amplitude above {self.flame_out_amplitude:g}"))
        if self.flame_out_time < start_index + n_samples:
            candidates.append((max(self.flame_out_time, start_index), FLAME_OUT, "scenario fault flame_out: timed"))
        if candidates:
            index, name, detail = min(candidates, key=lambda c: c[0])
            k = index - start_index
            ratio = float(amplitude_ratio[k]) if 0 <= k < amplitude_ratio.size else float("nan")
            self.flame_out_index = index
            self.events.append(RigEvent(name, index / self.sample_rate_hz, index, ratio, detail))
        return self.flame_out_index

    def drive_factor(self, start_index: int, n_samples: int) -> np.ndarray | None:
        """Delivered / commanded drive per sample of the block (the output_gain fault); None: 1."""
        on = active_mask(self.output_gain, start_index, n_samples)
        if on is None:
            return None
        return np.where(on, self.faults.output_gain.factor, 1.0)

    def answers(self, end_index: int) -> bool:
        """False once the back-end has stopped answering (before the block ending at end_index)."""
        return end_index <= self.silent
