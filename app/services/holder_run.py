"""Driving a calibration holder: stepped sine, tuned to a pressure amplitude, soft and stoppable.

:class:`HolderRun` steps through the frequencies on an opened back-end whose pressure
sensors sit in a calibration holder. At each frequency it tunes the drive so that the
reference sensor reads the target pressure amplitude, then records and hands the sensors'
pressures (volts over their nominal sensitivities) to the core's common-plane estimate.

Safety, in this order of precedence:

* every drive request goes through the back-end's ``set_drive``, i.e. its ceiling guard
  (never above the rig's ceiling; refused, not clipped);
* soft start: the first frequency opens at ``first_fraction`` of the ceiling, each later one
  at a tenth of the drive the previous one needed; the drive then rises by at most
  ``max_step`` per tuning step, and falls at once if the pressure overshoots;
* :meth:`HolderRun.halt` (called from a signal handler) zeroes the output at once through
  the back-end's latched halt and makes the loop stop at the next block;
* :meth:`HolderRun.ramp_to_zero` ends every normal run.

Imports: numpy, ``app.core.calibration``, ``app.errors``. Never Qt, never a concrete back-end, never a command.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

from ..core.calibration import MIN_PERIODS_PER_SEGMENT, MIN_SEGMENTS, CalibrationError, segment_phasors
from ..errors import FlamebodeError


class HolderRunError(FlamebodeError):
    """The holder run cannot go on (no pressure, the back-end misbehaves)."""


class Halted(FlamebodeError):
    """The run was halted (a signal or an emergency stop); the output is at zero."""


@dataclass(frozen=True)
class DriveSettings:
    target_pa: float                 # peak pressure amplitude wanted at the reference sensor
    ceiling_v: float                 # the rig's drive ceiling (the guard enforces it; used to plan steps)
    first_fraction: float = 0.002    # first drive of the run, as a fraction of the ceiling
    max_step: float = 4.0            # largest factor by which one tuning step raises the drive
    tolerance: float = 0.10          # tuned when |p / target - 1| is within this
    max_tuning_steps: int = 12
    overshoot: float = 2.0           # p above overshoot x target: drive cut at once to the estimate
    tuning_window_s: float = 0.2
    settle_s: float = 0.2            # acoustic settling after each ramp before anything is measured


@dataclass(frozen=True)
class HolderRecord:
    """What was recorded at one frequency (pressures in nominal Pa, one row per sensor)."""

    freq_hz: float
    drive_v: float
    pressure_pa: float               # reached at the reference sensor (peak)
    pressures: np.ndarray
    at_ceiling: bool = False


class HolderRun:
    """Tunes, records and stops; ``on_record`` receives each :class:`HolderRecord` as it is made."""

    def __init__(self, device: Any, sensors: Sequence[str], sensitivities: Sequence[float], reference: str,
                 settings: DriveSettings, record_s: float, block_s: float) -> None:
        self.device = device
        self._block_duration_s = float(block_s)
        self.settings = settings
        self.record_s = float(record_s)
        channels = list(device.channels)
        missing = [s for s in sensors if s not in channels]
        if missing:
            raise HolderRunError(f"the back-end gives no channel {', '.join(missing)} (it has {', '.join(channels)})")
        self._rows = np.array([channels.index(s) for s in sensors])
        self._scale = 1.0 / np.asarray(sensitivities, dtype=float)[:, None]
        self._ref = list(sensors).index(reference)
        self._fs = float(device.sample_rate_hz)
        self.halted: str | None = None
        self._freq_hz = 0.0

    # ------------------------------------------------------------------ stopping
    def halt(self, reason: str = "halted") -> None:
        """Zero the output at once (lock-free, from a signal handler) and stop at the next block."""
        if self.halted is None:
            self.halted = reason
        halt = getattr(self.device, "halt", None)
        if callable(halt):
            halt()

    def ramp_to_zero(self, timeout_s: float = 10.0) -> None:
        """Ask for zero and let the guard's ramp play out (the normal end of a run)."""
        if self.halted is not None or self._freq_hz <= 0:
            return
        self.device.set_drive(self._freq_hz, 0.0)
        self._wait_ramp(timeout_s, check_halt=False)

    # ------------------------------------------------------------------ acquisition
    def _block(self) -> np.ndarray:
        if self.halted is not None:
            raise Halted(f"halted: {self.halted}")
        block = self.device.read_block()
        if self.halted is not None:
            raise Halted(f"halted: {self.halted}")
        return np.asarray(block.data)

    def _wait_ramp(self, timeout_s: float = 30.0, check_halt: bool = True) -> None:
        waited = 0.0
        while self.device.drive_status().ramping:
            if check_halt:
                self._block()
            else:
                self.device.read_block()
            waited += self._block_s()
            if waited > timeout_s:
                raise HolderRunError(f"the drive did not reach its setting within {timeout_s:g} s")

    def _block_s(self) -> float:
        return self._block_duration_s

    def _read(self, duration_s: float) -> np.ndarray:
        """At least ``duration_s`` of contiguous blocks: the sensors' pressures in nominal Pa."""
        blocks, n = [], 0
        need = int(math.ceil(duration_s * self._fs))
        while n < need:
            data = self._block()
            blocks.append(data[self._rows])
            n += data.shape[1]
        return np.concatenate(blocks, axis=1) * self._scale

    def _settle(self) -> None:
        self._wait_ramp()
        self._read(self.settings.settle_s)

    # ------------------------------------------------------------------ one frequency
    def _pressure(self, freq_hz: float) -> float:
        # a window long enough for 4 segments of 4 periods at this frequency (0.2 s holds only 10
        # periods of 50 Hz), so that a low frequency is tuned, not refused after it was driven
        x = self._read(max(self.settings.tuning_window_s, 1.05 * MIN_SEGMENTS * MIN_PERIODS_PER_SEGMENT / freq_hz))
        try:
            ph = segment_phasors(x[self._ref:self._ref + 1], self._fs, freq_hz, n_segments=MIN_SEGMENTS)
        except CalibrationError as exc:
            raise HolderRunError(f"at {freq_hz:g} Hz: {exc}") from None
        return float(np.sqrt(np.mean(np.abs(ph[:, 0]) ** 2)))

    def tune(self, freq_hz: float, start_v: float) -> tuple[float, float, bool]:
        """Drive (V), pressure reached (Pa) and whether the ceiling stopped it short of the target."""
        s = self.settings
        v = min(max(start_v, s.first_fraction * s.ceiling_v), s.ceiling_v)
        for _ in range(s.max_tuning_steps):
            self._freq_hz = freq_hz
            self.device.set_drive(freq_hz, v)
            self._settle()
            p = self._pressure(freq_hz)
            if not p > 0:
                raise HolderRunError(f"at {freq_hz:g} Hz the reference sensor shows no pressure at {v:g} V")
            ratio = p / s.target_pa
            if abs(ratio - 1.0) <= s.tolerance:
                return v, p, False
            wanted = v / ratio
            if ratio > s.overshoot:
                new_v = wanted                                    # too loud: down at once
            else:
                new_v = min(max(wanted, v / s.max_step), v * s.max_step)
            if new_v >= s.ceiling_v and v >= s.ceiling_v * (1 - 1e-9):
                return v, p, True                                 # at the ceiling and still short
            v = min(new_v, s.ceiling_v)
        return v, p, v >= s.ceiling_v * (1 - 1e-9)

    def run(self, freqs_hz: Sequence[float], on_record: Callable[[HolderRecord], None]) -> list[HolderRecord]:
        """Every frequency in turn; raises :class:`Halted` when halted (output already zero)."""
        self.device.start()
        arm = getattr(self.device, "arm", None)
        if callable(arm):
            arm(self.settings.ceiling_v)
        out: list[HolderRecord] = []
        start_v = self.settings.first_fraction * self.settings.ceiling_v
        for f in freqs_hz:
            v, p, short = self.tune(float(f), start_v)
            rec = HolderRecord(float(f), v, p, self._read(self.record_s), short)
            out.append(rec)
            on_record(rec)
            start_v = v / 10.0
        self.ramp_to_zero()
        return out
