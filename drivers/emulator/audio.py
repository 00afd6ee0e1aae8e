"""The emulator's audio loop: drive in from one null sink's monitor, sensor signals out to another.

One duplex PortAudio stream on the audio server (PortAudio's ALSA ``pulse`` device; the
source and sink are chosen with ``PULSE_SOURCE``/``PULSE_SINK`` in this process only).
The callback only copies: the received drive column into an input ring, the next rendered
frames of an output ring into ``outdata`` (zeros and a count when short), and the stream's
status flags into counters. The main thread takes blocks of ``block_n`` frames from the
input ring, runs :class:`~drivers.emulator.physics.ReceivedDriveBurner` on them and writes
the channels (digital = volts / full scale, clipped to [-1, 1] and counted) to the output
ring, ``lead_blocks`` blocks ahead of the callback. A late main thread (a loaded machine)
leaves the ring short: the callback then holds the last frame played (silence would read as
a flame-out on the light channel; the hold is a glitch flamebode sees on the drive reference)
and counts it (``starved``). A received block with a sample beyond
digital full scale (or not finite) is taken as silence and counted (``invalid_blocks``). After a short callback as many
rendered frames are left out, so the delay through the emulator stays at the lead instead of
growing.

Volts ↔ full scale: both ends read the same rig file's ``[hardware.soundcard]`` table.
flamebode plays drive volts / ``output_full_scale`` on ``output_channel``; the emulator reads
that channel × ``output_full_scale`` as volts at its amplifier input. The emulator plays each
rig channel's volts / ``full_scale.<channel>`` on input number ``inputs.<channel>`` of
flamebode, which multiplies it back.

Audio server lost (no callback for ``LOST_AFTER_S``, or the stream stopped): the stream is
abandoned, an ``audio-server-lost`` event logged, PortAudio re-initialised and the stream
reopened every ``RETRY_S`` until the server is back (``audio-server-back``). Physics time runs
on through the outage with a silent drive.

``clock_ppm`` emulates a second sample clock: the sensor signals are resampled by
(1 + ppm·1e-6) before they are played, so the delay flamebode measures drifts.

Imports: numpy, ``app.rig``, ``drivers.soundcard`` (the rig table), this package;
``sounddevice`` lazily. Never Qt, the engine, storage or the estimators.
"""

from __future__ import annotations

import math
import os
import threading
import time
from pathlib import Path
from typing import Any

import numpy as np

from app.rig import Rig
from drivers.soundcard import load_config

from .files import StatusLog, TruthFile
from .physics import ReceivedDriveBurner

LOST_AFTER_S = 2.0
RETRY_S = 0.5
STATUS_EVERY_S = 0.25


class Ring:
    """Single-producer single-consumer frame ring (counters only grow; the GIL orders them)."""

    def __init__(self, n: int, channels: int) -> None:
        self.buf = np.zeros((n, channels), dtype=np.float32)
        self.size = n
        self.w = 0
        self.r = 0

    def put(self, frames: np.ndarray) -> None:
        n = frames.shape[0]
        p = self.w % self.size
        first = min(n, self.size - p)
        self.buf[p:p + first] = frames[:first]
        self.buf[:n - first] = frames[first:]
        self.w += n

    def take(self, out: np.ndarray) -> int:
        n = min(out.shape[0], self.w - self.r)
        p = self.r % self.size
        first = min(n, self.size - p)
        out[:first] = self.buf[p:p + first]
        out[first:n] = self.buf[:n - first]
        self.r += n
        return n


class AudioEmulator:
    """The emulated rig behind an audio server (see the module docstring)."""

    def __init__(self, rig: Rig, drive_source: str, sensor_sink: str, truth_path: Path | None = None,
                 status_path: Path | None = None, block_n: int = 2048, lead_blocks: int = 5,
                 device: str = "pulse", clock_ppm: float = 0.0, seed: int | None = None,
                 latency: str | float = 0.25) -> None:
        self.rig = rig
        self.cfg = load_config(rig)
        self.fs = self.cfg.sample_rate_hz
        self.block_n, self.lead_n = int(block_n), int(block_n) * int(lead_blocks)
        self.drive_source, self.sensor_sink, self.device, self.latency = drive_source, sensor_sink, device, latency
        self.n_in = self.cfg.n_outputs                 # flamebode's outputs are our inputs
        self.n_out = self.cfg.n_inputs
        self.drive_col = self.cfg.output_channel - 1
        self.burner = ReceivedDriveBurner(rig, self.block_n, seed=seed)
        self.rows = [(self.burner.channels.index(c), self.cfg.inputs[c] - 1, 1.0 / self.cfg.volts_full_scale[c])
                     for c in self.cfg.inputs]
        self.truth = TruthFile(truth_path, self.burner.true_point)
        self.status = StatusLog(status_path)
        self.clock_ratio = 1.0 + float(clock_ppm) * 1e-6
        self._resample_pos = 0.0
        self._resample_tail = np.zeros((1, self.n_out))
        self.counts = {"input_overflow": 0, "input_underflow": 0, "output_underflow": 0, "output_overflow": 0,
                       "starved": 0, "clipped": 0, "reconnects": 0, "blocks": 0, "invalid_blocks": 0}
        self._stop = threading.Event()
        self._stream: Any = None
        self._sd: Any = None
        self._last_callback = 0.0
        self._new_rings()

    # ------------------------------------------------------------------ real-time part
    def _new_rings(self) -> None:
        self.in_ring = Ring(int(4 * self.fs), 1)
        self.out_ring = Ring(int(4 * self.fs), self.n_out)
        self.out_ring.put(np.zeros((self.lead_n, self.n_out), dtype=np.float32))
        self._cb_flags = np.zeros(4, dtype=np.int64)
        self._hold = np.zeros(self.n_out, dtype=np.float32)   # last frame played
        self._cb_starved = 0
        self._cb_starved_frames = 0       # zeros the callback played for want of data
        self._dropped_frames = 0          # rendered frames left out since, to keep the delay at the lead

    def _callback(self, indata: np.ndarray, outdata: np.ndarray, frames: int, _time: Any, status: Any) -> None:
        self.in_ring.put(indata[:, self.drive_col:self.drive_col + 1])
        got = self.out_ring.take(outdata)
        if got < frames:
            outdata[got:] = outdata[got - 1] if got else self._hold   # hold, not silence: see the docstring
            self._cb_starved += 1
            self._cb_starved_frames += frames - got
        self._hold[:] = outdata[frames - 1]
        f = self._cb_flags
        f[0] += int(status.input_overflow)
        f[1] += int(status.input_underflow)
        f[2] += int(status.output_underflow)
        f[3] += int(status.output_overflow)
        self._last_callback = time.monotonic()

    # ------------------------------------------------------------------ connection
    def _open(self) -> bool:
        os.environ["PULSE_SOURCE"] = self.drive_source
        os.environ["PULSE_SINK"] = self.sensor_sink
        if self._sd is None:
            import sounddevice as sd

            self._sd = sd
        sd = self._sd
        try:
            sd._terminate()
            sd._initialize()
            self._new_rings()
            stream = sd.Stream(device=(self.device, self.device), samplerate=self.fs,
                               channels=(self.n_in, self.n_out), dtype="float32", latency=self.latency,
                               callback=self._callback)
            self._last_callback = time.monotonic()
            stream.start()
        except Exception as exc:  # the server is away: PortAudioError, ValueError (no device)
            self._last_error = f"{type(exc).__name__}: {exc}"
            return False
        self._stream = stream
        return True

    def _abandon(self) -> None:
        stream, self._stream = self._stream, None
        if stream is None:
            return
        closer = threading.Thread(target=self._close_quietly, args=(stream,), daemon=True)
        closer.start()
        closer.join(2.0)   # a dead server can make close() hang: give up on it after 2 s

    @staticmethod
    def _close_quietly(stream: Any) -> None:
        try:
            stream.abort()
            stream.close()
        except Exception:
            pass

    def _lost(self) -> bool:
        s = self._stream
        return s is None or not s.active or time.monotonic() - self._last_callback > LOST_AFTER_S

    # ------------------------------------------------------------------ main loop
    def stop(self) -> None:
        self._stop.set()

    def run(self, duration_s: float | None = None) -> None:
        """Emulate until :meth:`stop` (or ``duration_s``); always leaves the outputs silent."""
        t_end = math.inf if duration_s is None else time.monotonic() + duration_s
        self.status.write(event="start", sample_rate_hz=self.fs, block_n=self.block_n, lead_n=self.lead_n,
                          drive_source=self.drive_source, sensor_sink=self.sensor_sink, pid=os.getpid())
        if not self._open():
            self.status.write(event="audio-server-lost", reason=self._last_error)
            self._wait_for_server(t_end)
        else:
            self.status.write(event="connected", latency_s=list(self._stream.latency))
        acc = _Interval()
        next_status = time.monotonic() + STATUS_EVERY_S
        block = np.zeros((self.block_n, 1), dtype=np.float32)
        try:
            while not self._stop.is_set() and time.monotonic() < t_end:
                if self._lost():
                    self.status.write(event="audio-server-lost", **self._counts())
                    self._abandon()
                    self._wait_for_server(t_end)
                    acc = _Interval()           # what follows is received on the new connection only
                    continue
                if self.in_ring.w - self.in_ring.r < self.block_n:
                    time.sleep(0.002)
                else:
                    self.in_ring.take(block)
                    if not np.all(np.abs(block) <= 1.0):
                        # beyond full scale (or not a number): no converter plays that; it is what a
                        # dying connection leaves in a buffer. A gap, counted, not a drive.
                        block.fill(0.0)
                        self.counts["invalid_blocks"] += 1
                    t0 = time.perf_counter()
                    self._process(block[:, 0].astype(np.float64) * self.cfg.output_full_scale_v, acc)
                    acc.proc_max_s = max(acc.proc_max_s, time.perf_counter() - t0)
                now = time.monotonic()
                if now >= next_status:
                    self.status.write(**acc.fields(), freq_hz=self.burner.freq_hz, **self._counts(),
                                      delay_s=(self.out_ring.w - self.out_ring.r) / self.fs)
                    acc = _Interval()
                    next_status = now + STATUS_EVERY_S
        finally:
            self._abandon()
            self.status.write(event="stop", **self._counts())
            self.status.close()

    def _wait_for_server(self, t_end: float) -> None:
        while not self._stop.is_set() and time.monotonic() < t_end:
            time.sleep(RETRY_S)
            if self._open():
                self.counts["reconnects"] += 1
                self.status.write(event="audio-server-back", latency_s=list(self._stream.latency), **self._counts())
                return

    def _counts(self) -> dict[str, int]:
        c = dict(self.counts)
        for k, v in zip(("input_overflow", "input_underflow", "output_underflow", "output_overflow"), self._cb_flags):
            c[k] += int(v)
        c["starved"] += self._cb_starved
        c["dropped_frames"] = self._dropped_frames
        c["discontinuities"] = self.burner.discontinuities
        return c

    def _process(self, drive_v: np.ndarray, acc: "_Interval") -> None:
        data, freq_hz, peak_v = self.burner.respond(drive_v)
        acc.add(drive_v)
        self.truth.add(freq_hz, peak_v)
        frames = np.zeros((self.block_n, self.n_out))
        for row, col, scale in self.rows:
            frames[:, col] = data[row] * scale
        over = np.abs(frames) > 1.0
        if over.any():
            self.counts["clipped"] += int(over.sum())
            np.clip(frames, -1.0, 1.0, out=frames)
        if self.clock_ratio != 1.0:
            frames = self._resample(frames)
        self.counts["blocks"] += 1
        # a starved callback played zeros: everything after them would be late by as many frames.
        # Leave out as many rendered frames (a gap, which flamebode sees as a glitch) so the
        # delay through the emulator stays at its lead instead of growing with every starvation.
        excess = self._cb_starved_frames - self._dropped_frames
        if excess > 0:
            k = min(excess, frames.shape[0])
            frames = frames[k:]
            self._dropped_frames += k
        if frames.shape[0]:
            self.out_ring.put(frames.astype(np.float32))

    def _resample(self, frames: np.ndarray) -> np.ndarray:
        """Linear resampling by the clock ratio, phase carried across blocks."""
        x = np.concatenate([self._resample_tail, frames])
        pos = self._resample_pos + np.arange(0.0, x.shape[0] - 1 - self._resample_pos, self.clock_ratio)
        i = pos.astype(np.int64)
        frac = (pos - i)[:, None]
        out = x[i] * (1.0 - frac) + x[i + 1] * frac
        nxt = pos[-1] + self.clock_ratio if pos.size else self._resample_pos
        self._resample_tail = x[-1:]
        self._resample_pos = nxt - (x.shape[0] - 1)
        return out


class _Interval:
    """Received drive over one status interval."""

    def __init__(self) -> None:
        self.peak, self.sq, self.n = 0.0, 0.0, 0
        self.proc_max_s = 0.0

    def add(self, drive_v: np.ndarray) -> None:
        self.peak = max(self.peak, float(np.abs(drive_v).max()))
        self.sq += float(np.dot(drive_v, drive_v))
        self.n += drive_v.size

    def fields(self) -> dict[str, float]:
        return {"drive_peak_v": self.peak, "drive_rms_v": math.sqrt(self.sq / self.n) if self.n else 0.0,
                "frames": self.n, "process_max_s": self.proc_max_s}
