"""Named faults, their reactions, and the checks that find them in the signals.

Every fault has a stable name, a reaction (``fatal``: the drive is brought to zero and the
sweep ends, keeping everything stored; otherwise the point is flagged, or skipped, and the
sweep goes on), and advice for the operator. :class:`SignalChecks` looks for them in blocks,
tuning windows, records and the core's results; :func:`quality_flags` turns the core's
quality figures into flags with the plan's thresholds.

Imports: standard library, numpy, ``app.engine.events`` and the plan/rig descriptions only
(no drivers, no storage, no Qt).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .events import FaultRaised


@dataclass(frozen=True)
class FaultKind:
    name: str
    fatal: bool
    action: str
    advice: str


_ABORT = "drive ramped to zero; sweep ended; every stored point is kept"
FAULTS: dict[str, FaultKind] = {f.name: f for f in (
    FaultKind("input-clipping", False, "point flagged; sweep continues",
              "lower the sensor gain or the forcing amplitude, or raise the input range"),
    FaultKind("light-over-range", True, _ABORT,
              "reduce the photodetector gain or supply voltage before the detector is harmed"),
    FaultKind("flame-out", True, _ABORT,
              "check the flame, fuel supply and ignition; re-light and resume from the last stored point"),
    FaultKind("sensor-dead", True, _ABORT,
              "check the sensor's cable, supply and amplifier channel"),
    FaultKind("sensor-noisy", False, "point flagged; sweep continues",
              "check the sensor's mounting and cable; consider a longer record"),
    FaultKind("pressure-too-high", False, "drive set to zero; point skipped; sweep continues",
              "lower the forcing amplitude near this frequency or raise the plan's pressure limit"),
    FaultKind("drive-not-answering", True, _ABORT,
              "check the generator/amplifier output and the drive reference cable"),
    FaultKind("backend-timeout", True, _ABORT,
              "check the instrument's connection and power; the back-end did not deliver data in time"),
    FaultKind("driver-error", True, _ABORT, "see the message; check the instrument"),
    FaultKind("tuning-not-converged", False, "recorded at the closest voltage found; point flagged",
              "raise tuning.max_steps or tuning.tolerance, or lengthen the tuning window"),
    FaultKind("target-unreachable", False, "see the plan's tuning.when_unreachable; point flagged",
              "lower the target amplitude at this frequency or check the speaker chain"),
    FaultKind("operating-point-drift", False, "point flagged; sweep continues",
              "check flows and temperatures; the mean light moved from its value at the start"),
    FaultKind("evaluation-failed", False, "point not stored; sweep continues",
              "see the message; the record could not be evaluated"),
    FaultKind("store-failed", True, _ABORT,
              "check the run folder's disk space and permissions"),
)}


def fault_event(name: str, message: str, point_index: int | None, action: str | None = None) -> FaultRaised:
    kind = FAULTS[name]
    return FaultRaised(name=name, message=message, action=action or kind.action, advice=kind.advice,
                       point_index=point_index, fatal=kind.fatal)


@dataclass(frozen=True)
class Finding:
    """A fault found in the signals (not yet published)."""

    name: str
    message: str

    @property
    def fatal(self) -> bool:
        return FAULTS[self.name].fatal


class SignalChecks:
    """Checks on blocks, windows and results against the rig's ranges and the plan's limits."""

    def __init__(self, rig: Any, plan: Any):
        self.rig = rig
        self.limits = plan.faults
        self.pressure_channels = tuple(s.channel for s in rig.pressure_sensors)
        self.light_channel = rig.light.channel
        self.reference_channel = rig.drive.reference_channel
        self.baseline_light_v: float | None = None   # mean light above dark, drive off, at the start

    # ---------------------------------------------------------------- per block
    def check_block(self, data: np.ndarray, channels: tuple[str, ...], where: str) -> list[Finding]:
        """Cheap checks on every block: light above its safe maximum."""
        light = data[channels.index(self.light_channel)]
        peak = float(light.max()) if light.size else 0.0
        if peak >= self.rig.light.safe_max:
            return [Finding("light-over-range", f"light channel '{self.light_channel}' reached {peak:.3g} V, "
                            f"at or above its safe maximum {self.rig.light.safe_max:g} V ({where})")]
        return []

    # ---------------------------------------------------------------- per window/record
    def set_baseline(self, data: np.ndarray, channels: tuple[str, ...]) -> list[Finding]:
        """Mean light with the drive off at the start; a flame must be burning."""
        findings = self.check_window(data, channels, drive_v=0.0, where="at the start, drive off")
        light = data[channels.index(self.light_channel)]
        above_dark = float(light.mean()) - self.rig.light.dark_offset
        if above_dark <= 10.0 * self.limits.dead_rms:
            findings.append(Finding("flame-out", f"no flame at the start: mean light on '{self.light_channel}' is "
                                    f"{above_dark * 1e3:.2f} mV above the dark level"))
        else:
            self.baseline_light_v = above_dark
        return findings

    def check_window(self, data: np.ndarray, channels: tuple[str, ...], drive_v: float,
                     where: str) -> list[Finding]:
        """Clipping, dead sensors, drive chain, flame-out and operating-point drift on one window."""
        out: list[Finding] = []
        peaks = np.abs(data).max(axis=1)
        limit = self.limits.clip_fraction * self.rig.acquisition.input_range
        for name, peak in zip(channels, peaks):
            if peak >= limit:
                out.append(Finding("input-clipping", f"channel '{name}' reached {peak:.3g} V, at or above "
                                   f"{limit:.3g} V of the {self.rig.acquisition.input_range:g} V input range ({where})"))
        std = data.std(axis=1)
        for name in self.pressure_channels + (self.light_channel,):
            s = float(std[channels.index(name)])
            if s < self.limits.dead_rms:
                out.append(Finding("sensor-dead", f"channel '{name}' is flat (rms {s * 1e6:.2g} uV, below "
                                   f"{self.limits.dead_rms * 1e6:.3g} uV) ({where})"))
        if self.reference_channel and drive_v > 0 and self.reference_channel in channels:
            s = float(std[channels.index(self.reference_channel)])
            expected = drive_v / np.sqrt(2.0)
            if s < 0.2 * expected:
                out.append(Finding("drive-not-answering", f"drive reference '{self.reference_channel}' shows "
                                   f"{s:.3g} V rms while {drive_v:.3g} V peak was requested ({where})"))
        out += self._light_level(data[channels.index(self.light_channel)], where)
        return out

    def _light_level(self, light: np.ndarray, where: str) -> list[Finding]:
        if self.baseline_light_v is None:
            return []
        above_dark = float(light.mean()) - self.rig.light.dark_offset
        ratio = above_dark / self.baseline_light_v
        if ratio < self.limits.flame_out_fraction:
            return [Finding("flame-out", f"mean light on '{self.light_channel}' fell to {ratio:.0%} of its value "
                            f"at the start ({where})")]
        if abs(ratio - 1.0) > self.limits.light_drift_max:
            return [Finding("operating-point-drift", f"mean light on '{self.light_channel}' is {ratio:.0%} of its "
                            f"value at the start, beyond ±{self.limits.light_drift_max:.0%} ({where})")]
        return []

    # ---------------------------------------------------------------- per result
    def check_pressure(self, pressure_peak_pa: float, where: str) -> list[Finding]:
        if np.isfinite(pressure_peak_pa) and pressure_peak_pa > self.limits.pressure_max:
            return [Finding("pressure-too-high", f"pressure amplitude {pressure_peak_pa:.4g} Pa above the plan's "
                            f"limit {self.limits.pressure_max:g} Pa ({where})")]
        return []

    def check_response(self, estimate: Any, drive_v: float, ceiling_v: float, where: str) -> list[Finding]:
        """A drive well above zero with no forcing line in the pressures: the speaker chain is broken."""
        ratio, sigma = float(estimate.amplitude_ratio), float(estimate.sigma_ratio)
        if drive_v >= 0.25 * ceiling_v and np.isfinite(sigma) and ratio < 3.0 * sigma:
            return [Finding("drive-not-answering", f"no forcing line in the pressures at {drive_v:.3g} V "
                            f"(|u'|/u = {ratio:.2g}, noise {sigma:.2g}); the amplifier or speaker does not "
                            f"answer ({where})")]
        return []

    def check_result(self, result: Any, where: str) -> list[Finding]:
        out = self.check_pressure(float(result.velocity.pressure_peak_pa), where)
        snr = float(result.quality.get("snr_db_pressure_min", np.inf))
        if snr < self.limits.noisy_snr_db_min:
            out.append(Finding("sensor-noisy", f"lowest pressure SNR {snr:.1f} dB, below "
                               f"{self.limits.noisy_snr_db_min:g} dB ({where})"))
        return out


# quality figure -> (flag, plan attribute, "min" or "max")
