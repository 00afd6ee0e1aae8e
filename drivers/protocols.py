"""Capability protocols: what a back-end can do, in a few small pieces.

The engine sees back-ends only through these protocols and asks ``isinstance(dev, X)``
before it uses an optional capability. Everything is SI: volts, hertz, seconds. Drive
amplitudes are *peak* volts at the amplifier input.

Imports: standard library and numpy only (no hardware library, no app layer).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np


@dataclass(frozen=True)
class Block:
    """One block of synchronously acquired samples.

    ``data`` has shape (len(channels), n_samples), float64, in volts as seen at the
    ADC input (the core converts to pascals with the rig's sensitivities).
    ``start_index`` counts samples since the acquisition started, so blocks can be
    checked for gaps; ``overflows`` counts input overflows/underflows seen in the block.
    """

    data: np.ndarray
    channels: tuple[str, ...]
    sample_rate_hz: float
    start_index: int
    overflows: int = 0
    drive_freq_hz: float = 0.0
    drive_amplitude_v: float = 0.0

    @property
    def n_samples(self) -> int:
        return int(self.data.shape[1])

    @property
    def start_time_s(self) -> float:
        return self.start_index / self.sample_rate_hz

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate_hz

    def channel(self, name: str) -> np.ndarray:
        return self.data[self.channels.index(name)]


@dataclass(frozen=True)
class DriveStatus:
    """What the output is doing now (after ramps), and what was last requested."""

    freq_hz: float
    amplitude_v: float
    target_amplitude_v: float
    ceiling_v: float
    ramping: bool = False


@dataclass(frozen=True)
class Availability:
    """Whether a back-end can be used on this machine, and if not, why in plain words."""

    available: bool
    reason: str = ""
    details: dict[str, str] = field(default_factory=dict)


@runtime_checkable
class SineDrive(Protocol):
    """Produces a sine drive. Requests go through the ceiling guard (drivers.guard)."""

    def set_drive(self, freq_hz: float, amplitude_v: float) -> None:
        """Request a sine of ``amplitude_v`` peak volts; ramped; raises CeilingExceeded above the ceiling."""

    def drive_status(self) -> DriveStatus: ...


@runtime_checkable
class MultiSineDrive(Protocol):
    """Produces a multi-sine drive: Σ a_k cos(2π m_k n / N + φ_k), N samples per period.

    The PEAK of the sum (not of each line) must be within the ceiling; the envelope of the
    whole sum is ramped like a sine's amplitude (soft start), through the ceiling guard. The
    status reports the grid frequency fs / N and the peak as its amplitude."""

    def set_multisine(self, period_samples: int, harmonics: tuple[int, ...], amplitudes_v: tuple[float, ...],
                      phases_rad: tuple[float, ...]) -> float:
        """Request it (ramped); returns the peak in volts; raises CeilingExceeded above the ceiling."""


@runtime_checkable
class Acquirer(Protocol):
    """Acquires named input channels in blocks, synchronously with the drive."""

    @property
    def channels(self) -> tuple[str, ...]: ...

    @property
    def sample_rate_hz(self) -> float:
        """The rate the hardware actually uses (read back, not the one asked for)."""

    def start(self) -> None: ...

    def read_block(self, timeout_s: float = 2.0) -> Block:
        """Next block; raises drivers.errors.BackendTimeout if none arrives in time."""


@runtime_checkable
class Identified(Protocol):
    def identity(self) -> dict[str, str]:
        """Maker, model, serial, firmware or library versions, as plain strings."""


@runtime_checkable
class Stoppable(Protocol):
    def stop(self) -> None:
        """Ramp/zero the drive, stop acquisition and release the hardware. Idempotent."""


@runtime_checkable
class EmergencyHalt(Protocol):
    def halt(self) -> None:
        """Outputs to zero at once, no ramp. Must work from any thread."""


@runtime_checkable
class Armable(Protocol):
    def arm(self, ceiling_v: float) -> None:
        """Start of a sweep: clear a halt latch and set this sweep's ceiling (never above the rig's).

        After ``halt()`` a back-end refuses every drive request until it is armed again, so
        nothing still running above it can bring the drive back."""


@runtime_checkable
class OutputConfirmation(Protocol):
    @property
    def output_confirmed_off(self) -> bool:
        """True only when the instrument itself has confirmed its output off (or at zero).

        False after a lost connection: the output may still be on, and the operator must be
        told to switch the amplifier off."""


@runtime_checkable
class Advisories(Protocol):
    @property
    def warnings(self) -> tuple[str, ...]:
        """Plain-language warnings about the back-end as it was opened (empty when all is well),
        e.g. the simulated burner's rig being linearly unstable with its flame lit."""


@runtime_checkable
class Paced(Protocol):
    """A back-end whose time base can run faster than real time (the simulator)."""

    def set_real_time(self, real_time: bool) -> None: ...
