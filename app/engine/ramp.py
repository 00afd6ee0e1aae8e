"""How much of a drive ramp counts as settling time (``timing.settle`` after a drive change).

The settle time is counted from the moment the drive began its final approach at the new
frequency: a ramp through zero counts from the switch at zero (the ramp down at the old
frequency does not count), a direct retune or an amplitude change at one frequency counts from
the request. The response then has been driven at the new frequency for the whole ramp and the
samples after the ramp's end in the last block of the wait; the settle still waits for what is
left of the settle time after them, so the total is never shorter than asked.

Where in the last block the ramp ended is told from the ramp rate every back-end's ceiling guard
keeps (``rig.drive.ceiling / rig.drive.ramp_time`` volts per second, ``drivers.guard``): the
time before the switch is at most the ramp down from the old amplitude or half a period of the
old frequency (a direct retune switches at the next peak), whichever is longer. A ramp that
ends later than that rate allows (a back-end slower than its guard says) gets no credit: the
settle then counts from the end of the wait, as it always did.

Imports: standard library only. Never Qt, never storage, never a back-end.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class DriveChange:
    """One sine drive request: the output's actual frequency and amplitude when it was made, and the request."""

    old_freq_hz: float
    old_amplitude_v: float
    new_freq_hz: float
    new_amplitude_v: float

    @property
    def retunes(self) -> bool:
        """True when the frequency changes while the output is on (the old frequency plays first)."""
        return self.old_amplitude_v > 0.0 and not math.isclose(self.old_freq_hz, self.new_freq_hz, rel_tol=1e-12)

    def before_switch_s(self, rate_v_per_s: float) -> float:
        """The longest the output stays at the old frequency after the request."""
        if not self.retunes:
            return 0.0
        return max(self.old_amplitude_v / rate_v_per_s, 0.5 / self.old_freq_hz)

    def longest_ramp_s(self, rate_v_per_s: float) -> float:
        """The longest the whole ramp takes at the guard's rate (through zero, or direct)."""
        up = self.new_amplitude_v if self.retunes else abs(self.new_amplitude_v - self.old_amplitude_v)
        return self.before_switch_s(rate_v_per_s) + up / rate_v_per_s


def settle_credit(change: DriveChange | None, waited: int, last_block: int, sample_rate_hz: float,
                  rate_v_per_s: float) -> int:
    """Samples of the wait ``waited`` (its last block ``last_block`` samples) already at the new
    frequency, counted towards the settle time; 0 when it cannot be told (see the module docstring)."""
    if change is None or waited <= 0 or not rate_v_per_s > 0:
        return 0
    latest_end = math.ceil(change.longest_ramp_s(rate_v_per_s) * sample_rate_hz) + 1
    if waited - last_block > latest_end:      # the ramp ran past the block the rate allows: no credit
        return 0
    return max(0, waited - math.ceil(change.before_switch_s(rate_v_per_s) * sample_rate_hz))
