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


_ABORT = "drive brought to zero; sweep ended; every stored point is kept"
_UNCONFIRMED = ("the output could not be confirmed at zero: switch the amplifier off; sweep ended; every "
                "stored point is kept")


def ended_action(confirmed_zero: bool) -> str:
    """What the engine did on a fatal fault, truthfully: the output confirmed at zero, or not."""
    return _ABORT if confirmed_zero else _UNCONFIRMED
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
    FaultKind("audio-server-lost", True, _ABORT,
              "the sound card's stream died (audio server restarted or killed, device unplugged): restart it, "
              "then resume the run"),
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
    FaultKind("output-unconfirmed", True, _UNCONFIRMED,
              "switch the amplifier off, then check the generator's connection and power"),
    FaultKind("output-over-ceiling", True, _ABORT,
              "switch the amplifier off; check the generator's output mode (50 ohm / high-Z), the amplifier "
              "gain and the drive reference wiring before driving again"),
    FaultKind("backend-warning", False, "sweep goes on",
              "read the warning: on the simulated burner, docs/scenario-file.md says what it means and "
              "which scenario keys change it"),
    FaultKind("output-above-command", True, _ABORT,
              "check the generator's output load setting (a 50 ohm setting into a high-impedance input doubles "
              "the voltage) and the drive reference channel's wiring and scale"),
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


# output monitor: measured drive reference against the ceiling and the command (common practice:
# an independent read-back of the actuator signal, with margins above the measurement's noise)
OVER_CEILING = 1.05          # sine amplitude above 105 % of the ceiling
OVER_CEILING_PEAK = 1.25     # or any raw peak above 125 % of it
ABOVE_COMMAND = 1.3          # sine amplitude above 130 % of the command ...
ABOVE_COMMAND_FLOOR = 0.02   # ... plus 2 % of the ceiling (noise, zero command) until the noise is known
ABOVE_COMMAND_MIN_FLOOR = 0.002  # once the reference's noise is measured: at least 0.2 % of the ceiling
ABOVE_COMMAND_NOISE = 8.0    # ... or this many times the reference's rms with the drive off
ABOVE_COMMAND_UNKNOWN_NOISE_V = 5e-4  # before that is measured: never below 0.5 mV (an ADC channel's noise)
# flat tops: samples piled up at one extreme value
PILE_MIN_SAMPLES = 16
PILE_MIN_FRACTION = 2e-3
PILE_RATIO = 3.0
FLAT_RUN = 1.5               # mean run length at the extreme value: a flat top, not isolated samples


def flat_top(x: np.ndarray) -> tuple[float, int] | None:
    """(value, count) when samples pile up at the channel's largest or smallest value: clipping
    at a rail, whatever range was declared (common practice: a clipped record shows runs of
    identical extreme values and a spike in the histogram at its edge).

    Piled up means: at least ``PILE_MIN_SAMPLES`` and ``PILE_MIN_FRACTION`` of the samples hold
    exactly the extreme value, ``PILE_RATIO`` (3) times as many as any other single value
    within 2 % of the span (or two and a half code steps) from that edge. A quantised sine
    without clipping has at most about 2.4 times as many samples at its top code as at the
    next one (derived: its density near the peak goes as 1/sqrt(distance)), and a sine
    sampled at a rational fraction of the sample rate repeats every value equally often, so
    neither counts. And the value must be held for ``FLAT_RUN`` consecutive samples on
    average: a flat top, not isolated repeats (a coarsely sampled sine hits its few values
    once per period)."""
    n = x.size
    if n == 0:
        return None
    lo, hi = float(x.min()), float(x.max())
    span = hi - lo
    if span <= 0.0:
        return None
    need = max(PILE_MIN_SAMPLES, PILE_MIN_FRACTION * n)
    if max(np.count_nonzero(x == hi), np.count_nonzero(x == lo)) < need:
        return None
    codes = np.unique(x)
    width = max(0.02 * span, 2.5 * float(np.diff(codes).min())) if codes.size > 1 else span
    for edge in (x[x >= hi - width], -x[x <= lo + width]):
        values, counts = np.unique(edge, return_counts=True)
        top, at = float(values[-1]), int(counts[-1])
        if at < need:
            continue
        biggest_other = int(counts[:-1].max()) if values.size > 1 else 0
        if at < PILE_RATIO * max(1, biggest_other):
            continue
        value = top if top == hi else -top
        on = np.concatenate(([False], x == value, [False]))
        runs = int(np.count_nonzero(np.diff(on.astype(np.int8)) == 1))
        if at >= FLAT_RUN * runs:     # flat: the extreme value held for consecutive samples
            return value, at
    return None


class SignalChecks:
    """Checks on blocks, windows and results against the rig's ranges and the plan's limits."""

    def __init__(self, rig: Any, plan: Any):
        self.rig = rig
        self.limits = plan.faults
        self.pressure_channels = tuple(s.channel for s in rig.pressure_sensors)
        self.light_channel = rig.light.channel
        self.reference_channel = rig.drive.reference_channel
        self.baseline_light_v: float | None = None   # mean light above dark, drive off, at the start
        self.reference_noise_v: float | None = None  # rms of the drive reference, drive off, at the start

    # ---------------------------------------------------------------- per block
    def check_block(self, data: np.ndarray, channels: tuple[str, ...], where: str,
                    commanded_v: float | None = None, ceiling_v: float | None = None,
                    gap: bool = False) -> list[Finding]:
        """Cheap checks on every block: light above its safe maximum, the flame watch (mean light
        against its value at the start), and the output monitor (the measured drive reference
        against the ceiling and the commanded amplitude ``commanded_v``, the largest envelope
        of the last few blocks). A block in which the back-end counted a gap (``gap``: overflow or
        underflow, zero-filled) is not taken for a flame-out: the next whole block is."""
        out: list[Finding] = []
        light = data[channels.index(self.light_channel)]
        peak = float(light.max()) if light.size else 0.0
        if peak >= self.rig.light.safe_max:
            out.append(Finding("light-over-range", f"light channel '{self.light_channel}' reached {peak:.3g} V, "
                               f"at or above its safe maximum {self.rig.light.safe_max:g} V ({where})"))
        if self.baseline_light_v is not None and light.size and not gap:
            ratio = (float(light.mean()) - self.rig.light.dark_offset) / self.baseline_light_v
            if ratio < self.limits.flame_out_fraction:
                out.append(Finding("flame-out", f"mean light on '{self.light_channel}' fell to {ratio:.0%} of its "
                                   f"value at the start within one block ({where})"))
        if ceiling_v is not None and self.reference_channel in channels:
            out += self._output_monitor(data[channels.index(self.reference_channel)], commanded_v or 0.0,
                                        ceiling_v, where)
        return out

    def _output_monitor(self, ref: np.ndarray, commanded_v: float, ceiling_v: float, where: str) -> list[Finding]:
        """The drive reference measured independently of the guard: its sine amplitude (rms × √2,
        insensitive to single spikes) and its raw peak against the ceiling and the command."""
        if ref.size < 8:
            return []
        centred = ref - ref.mean()
        amplitude_v = float(np.sqrt(2.0) * centred.std())
        peak_v = float(np.abs(centred).max())
        name = self.reference_channel
        if amplitude_v > OVER_CEILING * ceiling_v or peak_v > OVER_CEILING_PEAK * ceiling_v:
            return [Finding("output-over-ceiling", f"drive reference '{name}' measured {amplitude_v:.3g} V "
                            f"amplitude ({peak_v:.3g} V peak), above the {ceiling_v:g} V ceiling; commanded "
                            f"{commanded_v:.3g} V ({where})")]
        floor_v = self.above_command_floor_v(ceiling_v)
        if amplitude_v > ABOVE_COMMAND * commanded_v + floor_v:
            return [Finding("output-above-command", f"drive reference '{name}' measured {amplitude_v:.3g} V "
                            f"amplitude while {commanded_v:.3g} V was commanded ({amplitude_v / max(commanded_v, 1e-12):.2g}"
                            f" times; ceiling {ceiling_v:g} V) ({where})")]
        return []

    def above_command_floor_v(self, ceiling_v: float) -> float:
        """Allowance on top of 1.3 x the command: the reference's own noise (the amplitude estimate
        rms x sqrt 2 reads sqrt(A^2 + 2 sigma^2)), once measured at the start; before that 2 % of
        the ceiling."""
        if self.reference_noise_v is None:
            return max(ABOVE_COMMAND_FLOOR * ceiling_v, ABOVE_COMMAND_UNKNOWN_NOISE_V)
        return max(ABOVE_COMMAND_MIN_FLOOR * ceiling_v, ABOVE_COMMAND_NOISE * self.reference_noise_v)

    # ---------------------------------------------------------------- per window/record
    def set_baseline(self, data: np.ndarray, channels: tuple[str, ...]) -> list[Finding]:
        """Mean light with the drive off at the start; a flame must be burning.

        Lit means: above the stated dark offset by more than what a lit flame gives at least
        (``light.min_flame_signal``), or by more than a margin that a dark offset mis-stated
        within its stated uncertainty cannot reach (see ``Light.lit_threshold_v``)."""
        findings = self.check_window(data, channels, drive_v=0.0, where="at the start, drive off")
        if self.reference_channel in channels:
            self.reference_noise_v = float(data[channels.index(self.reference_channel)].std())
        light_cfg = self.rig.light
        light = data[channels.index(self.light_channel)]
        above_dark = float(light.mean()) - light_cfg.dark_offset
        threshold = light_cfg.lit_threshold_v(self.limits.dead_rms)
        if above_dark <= threshold:
            why = (f"light.min_flame_signal {threshold * 1e3:.3g} mV" if light_cfg.min_flame_signal is not None else
                   f"{threshold * 1e3:.3g} mV: 4 x light.dark_offset_uncertainty "
                   f"({light_cfg.dark_offset_uncertainty * 1e3:.3g} mV) plus the noise floor")
            findings.append(Finding("flame-out", f"no flame at the start: mean light on '{self.light_channel}' is "
                                    f"{above_dark * 1e3:.2f} mV above the stated dark offset "
                                    f"{light_cfg.dark_offset * 1e3:.3g} mV; a lit flame gives more than {why}"))
        else:
            self.baseline_light_v = above_dark
        return findings

    def check_window(self, data: np.ndarray, channels: tuple[str, ...], drive_v: float,
                     where: str) -> list[Finding]:
        """Clipping, dead sensors, drive chain, flame-out and operating-point drift on one window."""
        out: list[Finding] = []
        peaks = np.abs(data).max(axis=1)
        limit = self.limits.clip_fraction * self.rig.acquisition.input_range
        for row, (name, peak) in enumerate(zip(channels, peaks)):
            if peak >= limit:
                out.append(Finding("input-clipping", f"channel '{name}' reached {peak:.3g} V, at or above "
                                   f"{limit:.3g} V of the {self.rig.acquisition.input_range:g} V input range ({where})"))
                continue
            pile = flat_top(data[row])
            if pile is not None:
                out.append(Finding("input-clipping", f"channel '{name}' is flat-topped: {pile[1]} samples sit at "
                                   f"exactly {pile[0]:.6g} V (a rail below the declared {self.rig.acquisition.input_range:g} V "
                                   f"range?) ({where})"))
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
