"""The simulated burner driven by a drive signal it receives instead of one it renders.

:class:`ReceivedDriveBurner` subclasses :class:`drivers.simulated.SimulatedBurner` and
overrides only ``_render``: the drive samples of a block are the ones received (volts at the
amplifier input), and their frequency is estimated from the received signal
(:func:`estimate_frequency`, rising zero crossings with linear interpolation over a
history window). Everything downstream (loudspeaker, acoustics with flame feedback,
sensors, light, noise, drift, faults) is the simulator's own, unchanged.

Imports: numpy, ``app.rig``, ``drivers.protocols``, ``drivers.simulated``. Never the
measurement estimators.
"""

from __future__ import annotations

import math
from collections import deque

import numpy as np

from app.rig import Rig
from drivers.protocols import DriveStatus
from drivers.simulated import SimulatedBurner
from drivers.simulated import truth

MIN_DRIVE_V = 1e-4        # peak volts below which the drive counts as off (no frequency estimated)
HISTORY_S = 0.2           # received drive kept for the frequency estimate
TWO_PI = 2.0 * math.pi
FREQ_RESOLUTION_HZ = 0.01 # estimates are rounded to this (keeps the simulator's caches useful)


def estimate_frequency(x: np.ndarray, fs: float) -> float:
    """Frequency (Hz) of a sine from its rising zero crossings (linear interpolation); 0 if < 3.

    The median period between crossings, so a gap in the signal (a drop-out, a cut) or a
    frequency change inside the window does not pull the estimate off."""
    x = np.asarray(x, dtype=np.float64)
    x = x - x.mean()
    rising = np.flatnonzero((x[:-1] < 0.0) & (x[1:] >= 0.0))
    if rising.size < 3:
        return 0.0
    frac = -x[rising] / (x[rising + 1] - x[rising])
    t = rising + frac
    return float(fs / np.median(np.diff(t)))


def block_rig(rig: Rig, block_n: int) -> Rig:
    """The rig with its acquisition block set to ``block_n`` samples (the emulator's own step)."""
    acq = rig.acquisition.model_copy(update={"block_duration": block_n / float(rig.acquisition.sample_rate)})
    return rig.model_copy(update={"acquisition": acq})


def jumps(x: np.ndarray, theta: float, threshold: float) -> np.ndarray:
    """Indices k >= 2 of ``x`` where it leaves the sine recursion x[k] = 2cosθ x[k-1] - x[k-2]."""
    r = x[2:] - 2.0 * math.cos(theta) * x[1:-1] + x[:-2]
    return np.flatnonzero(np.abs(r) > threshold) + 2


def notch(n: int, centres: np.ndarray, width: int) -> np.ndarray:
    """Gains (n + width) that fall to 0 at each centre as a raised cosine of half-width ``width``."""
    gain = np.ones(n + width)
    k = np.arange(-width, width)
    w = 0.5 - 0.5 * np.cos(np.pi * np.abs(k) / width)
    for c in centres:
        idx = c + k
        ok = (idx >= 0) & (idx < gain.size)
        gain[idx[ok]] = np.minimum(gain[idx[ok]], w[ok])
    return gain


class ReceivedDriveBurner(SimulatedBurner):
    """A simulated burner whose drive is fed in block by block (:meth:`respond`)."""

    def __init__(self, rig: Rig, block_n: int, **options) -> None:
        super().__init__(block_rig(rig, block_n), real_time=False, **options)
        self.block_n = block_n
        self._received = np.zeros(block_n)
        self._cps = np.zeros(block_n)
        self._status = DriveStatus(0.0, 0.0, 0.0, 0.0)
        self._history: deque[np.ndarray] = deque()
        self._history_n = max(block_n, int(HISTORY_S * self._fs))
        self._freq_hz = 0.0
        self._pending = np.zeros(block_n)      # the block answered next (one block of look-ahead)
        self._raw_tail = np.zeros(2)           # last two raw samples before the pending block
        self._carry = np.ones(block_n)         # notch gains reaching into the pending block
        self.discontinuities = 0
        self.start()

    @property
    def freq_hz(self) -> float:
        """Frequency of the received drive at the last block (0 while it has been off)."""
        return self._freq_hz

    def _render(self):  # the simulator's hook: the received samples instead of the guard's
        return self._received, self._cps, self._status

    def respond(self, received_v: np.ndarray) -> tuple[np.ndarray, float, float]:
        """Channel volts (rig.input_channels order) for the block received *before* this one
        (one block of look-ahead); (data, freq_hz, peak_v).

        The simulator turns the drive into an analytic signal from consecutive samples, exact for
        a sine and wild at a jump (a drive cut off mid-period by a dying connection, a gap after a
        drop-out): a jump would read as a huge amplitude and blow the simulated flame off. Each
        jump is therefore notched (the drive faded to zero and back over about one period on
        either side, counted in ``discontinuities``); the look-ahead lets the fade start before it.
        """
        received_v = np.asarray(received_v, dtype=np.float64)
        if received_v.size != self.block_n:
            raise ValueError(f"expected {self.block_n} drive samples, got {received_v.size}")
        drive_v = self._pending.copy()
        n = self.block_n
        raw = np.concatenate([self._raw_tail, drive_v, received_v])
        f_est = self._freq_hz if self._freq_hz > 0 else 100.0
        width = min(n, max(16, int(self._fs / f_est)))
        peak_all = float(np.abs(raw).max())
        found = jumps(raw, TWO_PI * f_est / self._fs, 0.05 * peak_all) - 2 if peak_all >= MIN_DRIVE_V else np.array([], int)
        gain = notch(2 * n, found, width)          # a whole block of look-ahead: every fade starts in time
        new_carry = gain[n:2 * n].copy()
        gain = np.minimum(gain[:n], self._carry)
        fresh = found[(found >= 0) & (found < n)]  # those further on count in the next call
        self.discontinuities += int(np.count_nonzero(np.diff(fresh) > width)) + 1 if fresh.size else 0
        self._raw_tail = raw[n:n + 2].copy()           # the pending block's last two raw samples
        self._pending = received_v.copy()
        self._carry = new_carry
        drive_v *= gain
        self._history.append(drive_v)
        while sum(h.size for h in self._history) - self._history[0].size >= self._history_n:
            self._history.popleft()
        recent = np.concatenate(self._history)
        peak = float(np.abs(drive_v).max())
        if peak >= MIN_DRIVE_V:
            f = estimate_frequency(recent, self._fs)
            if f > 0.0:
                self._freq_hz = round(f / FREQ_RESOLUTION_HZ) * FREQ_RESOLUTION_HZ
        elif float(np.abs(recent).max()) < MIN_DRIVE_V:
            self._freq_hz = 0.0
        f = self._freq_hz
        self._received = drive_v
        # a drive seen before its frequency is known (first periods) is treated as 0 Hz: silent
        self._cps = np.full(self.block_n, f / self._fs)
        if f <= 0.0:
            self._received = np.zeros(self.block_n)
        self._status = DriveStatus(f, peak, peak, math.inf)
        block = self.read_block()
        return block.data, f, peak

    def true_point(self, freq_hz: float, drive_peak_v: float) -> dict[str, float]:
        """The emulator's truth at one frequency and drive level: FTF and amplitude ratio."""
        a = truth.true_amplitude_ratio(self, freq_hz, drive_peak_v) if drive_peak_v > 0 else 0.0
        h = truth.true_ftf(self, freq_hz, a)
        return {"freq_hz": float(freq_hz), "drive_peak_v": float(drive_peak_v), "amplitude_ratio": float(a),
                "ftf_re": float(h.real), "ftf_im": float(h.imag), "ftf_gain": abs(h),
                "ftf_phase_rad": float(np.angle(h))}
