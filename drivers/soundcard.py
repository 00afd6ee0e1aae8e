"""Sound-card back-end: one duplex audio device used as a low-cost DAQ.

An output of the device drives the amplifier; its inputs record microphones or conditioned
sensors, and one input is wired back from the drive output (the rig's
``drive.reference_channel``) so the output→input delay can be measured on every block.

Threads and buffers (everything preallocated when the stream opens):

* the **PortAudio callback** only copies: the next frames of a pre-rendered output ring
  into ``outdata`` (all of it, zeros where nothing is ready or after a halt), and
  ``indata`` plus the drive column it just played into a capture ring, with the count of
  status flags of that callback. No allocation, no lock, no I/O.
* a **renderer thread** owned by the back-end keeps about ``output_lead`` seconds of drive
  rendered ahead from :class:`drivers.guard.CeilingGuard` (the only source of drive
  samples: ramps, ceiling and phase continuity come from there). A dedicated thread
  rather than the caller's, because the engine's thread may block for seconds (waiting
  for storage) and a starved output would cut the drive without its ramp; rendering in
  the callback would allocate and take the guard's lock at real-time priority.
* the **owner thread** (the caller of :meth:`SoundCard.read_block`) takes blocks out of
  the capture ring, converts them to volts per channel and measures the delay.

Delay: the reference input is cross-correlated (normalised) with the drive actually played,
over lags 0..``max_delay``. With a steady sine the correlation repeats every period, so the
whole-period count is taken from blocks where the reference's envelope changes (the drive
coming on from zero, or any ramp arriving: the envelope makes the lag unambiguous, so a delay
that jumped while the drive was steady is found again at the next ramp) and other blocks
refine within half a period of the last estimate. Until a delay is measured, a ramp counts
as arrived only after ``max_delay`` (a loop through another process, e.g. the rig emulator,
takes far longer than the stream's own latency). Blocks are *not* shifted: input samples stay contiguous and every block states
the delay (:class:`SoundCardBlock`), and its drive frequency/amplitude are those of the drive
that reached the inputs in that block (the played drive ``delay`` samples earlier).

Counts (``Block.overflows``): the stream's status flags (input/output overflow and
underflow), callbacks that found the output ring short, a capture ring overrun, and a
glitch seen on the reference (the delay moved by more than two samples, or the reference no
longer matches the drive at the known delay: a gap the server or driver did not flag). The
first callbacks of a duplex stream are flagged while its input starts, so the acquisition
starts at the first clean callback (:attr:`SoundCard.first_frame`).

Rig file, ``[hardware.soundcard]`` (channel numbers count from 1, as printed on cards)::

    device = "pulse"               # PortAudio device name (substring) or index; default: system default
    sample_rate = "48 kHz"         # default: [acquisition] sample_rate
    output_channel = 1             # device output wired to the amplifier input
    output_full_scale = "1 V"      # peak volts at that output for a digital full scale
    latency = "high"               # PortAudio latency: "low", "high" or seconds
    max_delay = "0.25 s"           # longest output→input delay searched
    output_lead = "0.2 s"          # drive rendered ahead of the callback
    [hardware.soundcard.inputs]    # rig channel -> device input (every rig channel)
    drv_ref = 1
    p1 = 2
    [hardware.soundcard.full_scale]  # what a digital full scale means at each input
    drv_ref = "1 V"
    p1 = "120 Pa"                  # a calibrated microphone: volts = Pa x the rig's sensitivity

Imports: numpy, ``app.rig``/``app.units``/``app.errors`` (descriptions), ``drivers.protocols``,
``drivers.errors``, ``drivers.guard``, ``drivers.safety``; ``sounddevice`` lazily. Never Qt,
the engine, storage or the measurement estimators.
"""

from __future__ import annotations

import math
import os
import threading
import time
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from app.errors import ConfigError
from app.rig import Rig
from app.units import parse_quantity
from drivers import safety
from drivers.errors import BackendTimeout, BackendUnavailable, DriverError
from drivers.guard import CeilingGuard
from drivers.protocols import Availability, Block, DriveStatus

TABLE = "hardware.soundcard"
_KEYS = {"device", "sample_rate", "output_channel", "output_full_scale", "latency", "max_delay",
         "output_lead", "inputs", "full_scale"}
CAPTURE_S = 10.0          # capture ring length: the owner may fall this far behind
OUT_RING_S = 1.0          # output ring length (the lead is a fraction of it)
RENDER_CHUNK = 256        # frames rendered per step of the renderer thread
MIN_CORRELATION = 0.9     # below this the reference does not follow the drive: delay not measured
GLITCH_CORRELATION = 0.98 # a clean electrical loopback stays above this; lower means a gap in the chain
MIN_DRIVE_RMS = 1e-3      # digital rms of the played drive below which no delay is measured
START_SILENCE_S = 0.5     # longest wait at start for a signal on any input (see SoundCard.start)


# ============================================================================ configuration
@dataclass(frozen=True)
class SoundCardConfig:
    """The ``[hardware.soundcard]`` table, checked and in SI. Channel numbers are 1-based."""

    device: str | int | None
    sample_rate_hz: float
    block_n: int
    output_channel: int
    output_full_scale_v: float
    inputs: dict[str, int]
    volts_full_scale: dict[str, float]
    latency: str | float
    max_delay_s: float
    output_lead_s: float

    @property
    def n_inputs(self) -> int:
        return max(self.inputs.values())

    @property
    def n_outputs(self) -> int:
        return max(self.output_channel, 2)  # stereo at least: a loopback test hook may use output 2


def _int_channel(value: Any, where: str, problems: list[str]) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        problems.append(f"{where}: expected a channel number >= 1 (1 is the first), got {value!r}")
        return 1
    return value


def _quantity(value: Any, kind: str, where: str, problems: list[str], default: float) -> float:
    try:
        out = parse_quantity(value, kind)
    except ValueError as exc:
        problems.append(f"{where}: {exc}")
        return default
    if not math.isfinite(out) or out <= 0:
        problems.append(f"{where}: must be > 0, got {value!r}")
        return default
    return out


def _full_scale_v(rig: Rig, name: str, value: Any, where: str, problems: list[str]) -> float:
    """Volts at the input for a digital full scale; a value in Pa uses the sensor's sensitivity."""
    text = str(value).strip()
    if isinstance(value, str) and text.endswith("Pa") and not text.endswith("V/Pa"):
        pa = _quantity(value, "pressure", where, problems, 1.0)
        try:
            return pa * rig.sensor(name).sensitivity
        except KeyError:
            problems.append(f"{where}: a full scale in Pa needs a pressure sensor; '{name}' is not one "
                            f"(give volts instead)")
            return 1.0
    return _quantity(value, "voltage", where, problems, 1.0)


def _table(raw: dict[str, Any], key: str, problems: list[str]) -> dict[str, Any]:
    value = raw.get(key, {})
    if not isinstance(value, dict):
        problems.append(f"{TABLE}.{key}: expected a table (rig channel = value)")
        return {}
    return value


def load_config(rig: Rig, **options: Any) -> SoundCardConfig:
    """Read ``[hardware.soundcard]`` (keyword ``options`` override its keys); ConfigError naming the key."""
    raw = {**rig.hardware.get("soundcard", {}), **{k: v for k, v in options.items() if v is not None}}
    problems = [f"{TABLE}.{k}: unknown key (known: {', '.join(sorted(_KEYS))})" for k in raw if k not in _KEYS]
    device = raw.get("device")
    if device is not None and (isinstance(device, bool) or not isinstance(device, (str, int))):
        problems.append(f"{TABLE}.device: expected a device name or index, got {device!r}")
    fs = _quantity(raw.get("sample_rate", rig.acquisition.sample_rate), "frequency",
                   f"{TABLE}.sample_rate", problems, 48000.0)
    block_n = max(1, round(rig.acquisition.block_duration * fs))
    if "output_channel" not in raw:
        problems.append(f"{TABLE}.output_channel: required key is missing (the output wired to the amplifier)")
    out_ch = _int_channel(raw.get("output_channel", 1), f"{TABLE}.output_channel", problems)
    out_fs = _quantity(raw.get("output_full_scale", "1 V"), "voltage", f"{TABLE}.output_full_scale", problems, 1.0)
    inputs_raw, fs_raw = _table(raw, "inputs", problems), _table(raw, "full_scale", problems)
    inputs: dict[str, int] = {}
    volts: dict[str, float] = {}
    for name in rig.input_channels:
        if name not in inputs_raw:
            problems.append(f"{TABLE}.inputs.{name}: rig channel '{name}' has no device input")
            continue
        inputs[name] = _int_channel(inputs_raw[name], f"{TABLE}.inputs.{name}", problems)
        if name not in fs_raw:
            problems.append(f"{TABLE}.full_scale.{name}: missing (volts or pascals at a digital full scale)")
            continue
        volts[name] = _full_scale_v(rig, name, fs_raw[name], f"{TABLE}.full_scale.{name}", problems)
    for name in set(inputs_raw) | set(fs_raw):
        if name not in rig.input_channels:
            problems.append(f"{TABLE}: '{name}' is not a channel of this rig "
                            f"({', '.join(rig.input_channels)})")
    latency = raw.get("latency", "high")
    if not (latency in ("low", "high") or (isinstance(latency, (int, float)) and not isinstance(latency, bool)
                                          and latency > 0)):
        problems.append(f"{TABLE}.latency: expected 'low', 'high' or seconds > 0, got {latency!r}")
    max_delay = _quantity(raw.get("max_delay", "0.25 s"), "time", f"{TABLE}.max_delay", problems, 0.25)
    lead = _quantity(raw.get("output_lead", "0.2 s"), "time", f"{TABLE}.output_lead", problems, 0.2)
    if lead >= OUT_RING_S / 2:
        problems.append(f"{TABLE}.output_lead: must be below {OUT_RING_S / 2:g} s, got {lead:g} s")
    if max_delay >= CAPTURE_S / 4:
        problems.append(f"{TABLE}.max_delay: must be below {CAPTURE_S / 4:g} s, got {max_delay:g} s")
    if problems:
        raise ConfigError(rig.source_path or "<rig>", problems)
    return SoundCardConfig(device=device, sample_rate_hz=fs, block_n=block_n, output_channel=out_ch,
                           output_full_scale_v=out_fs, inputs=inputs, volts_full_scale=volts,
                           latency=latency, max_delay_s=max_delay, output_lead_s=lead)


# ============================================================================ delay
def normalised_xcorr(x: np.ndarray, history: np.ndarray, max_lag: int) -> np.ndarray:
    """ρ(L) for L = 0..max_lag between ``x`` (n samples) and the drive played L samples earlier.

    ``history`` holds the played drive from ``max_lag`` samples before ``x``'s first sample to
    its last: x[n] is compared with history[max_lag + n - L]. ρ = Σ x·d_L / sqrt(Σx² Σd_L²).
    """
    n = x.size
    nfft = 1 << math.ceil(math.log2(n + history.size))
    spec = np.fft.rfft(history, nfft) * np.conj(np.fft.rfft(x, nfft))
    full = np.fft.irfft(spec, nfft)           # full[k] = Σ_n x[n] history[n + k]
    k = max_lag - np.arange(max_lag + 1)      # lag L uses offset k = max_lag - L
    num = full[k]
    csum = np.concatenate(([0.0], np.cumsum(history.astype(np.float64) ** 2)))
    energy_d = csum[k + n] - csum[k]
    denom = np.sqrt(np.maximum(energy_d, 0.0) * float(np.dot(x, x)))
    return np.where(denom > 0, num / np.where(denom > 0, denom, 1.0), 0.0)


def pick_delay(rho: np.ndarray, previous: int | None, period_samples: float) -> int | None:
    """The lag of best correlation; within half a period of ``previous`` once that is known."""
    if previous is not None and math.isfinite(period_samples) and period_samples > 0:
        half = max(1, int(period_samples // 2))
        lo, hi = max(0, previous - half), min(rho.size, previous + half + 1)
        if lo < hi:
            best = lo + int(np.argmax(rho[lo:hi]))
            return best if rho[best] >= MIN_CORRELATION else None
    best = int(np.argmax(rho))
    return best if rho[best] >= MIN_CORRELATION else None


class AudioServerLost(DriverError):
    """The duplex stream died under the back-end (audio server restarted or killed, device unplugged)."""

    fault_name = "audio-server-lost"      # the engine's fault kind for it


def envelope_changes(x: np.ndarray, period_samples: float, ratio: float = 1.25) -> bool:
    """Whether the rms of ``x`` differs by more than ``ratio`` between its parts (a ramp in it).

    Up to four parts of at least two periods each (fewer: no verdict, False)."""
    periods = x.size / period_samples if math.isfinite(period_samples) and period_samples > 0 else 0.0
    parts = int(min(4, periods // 2))
    if parts < 2:
        return False
    n = x.size // parts
    rms = np.sqrt(np.mean(np.reshape(x[:n * parts], (parts, n)) ** 2, axis=1))
    lo = float(rms.min())
    return bool(float(rms.max()) > ratio * lo) if lo > 0 else bool(rms.max() > 0)


# ============================================================================ blocks
@dataclass(frozen=True)
class SoundCardBlock(Block):
    """A block plus the output→input delay found on it (-1 when not yet known)."""

    delay_samples: int = -1
    delay_measured: bool = False      # True when this block's own correlation gave the delay
    correlation: float = math.nan     # peak normalised correlation of reference and drive

    @property
    def delay_s(self) -> float:
        return self.delay_samples / self.sample_rate_hz if self.delay_samples >= 0 else math.nan


# ============================================================================ probing
def _import_sounddevice() -> tuple[Any, str]:
    try:
        import sounddevice as sd
    except OSError as exc:
        return None, f"PortAudio library missing ({exc}); install the system package libportaudio2"
    except ImportError as exc:
        return None, f"the Python package sounddevice is not installed ({exc})"
    return sd, ""


def _no_device_reason() -> str:
    server = os.environ.get("PULSE_SERVER")
    if server:
        return (f"no duplex audio device: PortAudio lists no device with inputs and outputs, and no "
                f"audio server answers at PULSE_SERVER={server}")
    return ("no duplex audio device: PortAudio lists no device with both inputs and outputs (no sound "
            "card is connected, or the audio server is not running)")


class SoundCard:
    """Sound card as DAQ: drive on one output, inputs in volts, delay from a looped-back reference."""

    title = "Sound card (duplex audio device as DAQ)"

    @classmethod
    def probe(cls) -> Availability:
        """Whether PortAudio and a duplex device are there; never raises."""
        try:
            sd, why = _import_sounddevice()
            if sd is None:
                return Availability(False, why)
            devices = list(sd.query_devices())
            duplex = [d for d in devices if d["max_input_channels"] > 0 and d["max_output_channels"] > 0]
            if not duplex:
                return Availability(False, _no_device_reason())
            names = ", ".join(f"{d['index']}: {d['name']}" for d in duplex)
            return Availability(True, f"duplex devices: {names}",
                                {"portaudio": str(sd.get_portaudio_version()[1]), "devices": names})
        except Exception as exc:  # never raise from a probe
            return Availability(False, f"PortAudio query failed: {type(exc).__name__}: {exc}")

    @classmethod
    def check_settings(cls, rig: Rig) -> str:
        """Whether the configured device takes the rig's sample rate and channels (PortAudio's own
        check, no stream opened); raises BackendUnavailable naming what it refuses."""
        sd, why = _import_sounddevice()
        if sd is None:
            raise BackendUnavailable(f"sound card: {why}")
        cfg = load_config(rig)
        fs = float(rig.acquisition.sample_rate)
        dev = cfg.device if cfg.device is not None else sd.default.device[0]
        try:
            info = sd.query_devices(dev, None if cfg.device is not None else "input")
            sd.check_input_settings(device=info["index"], channels=cfg.n_inputs, samplerate=fs, dtype="float32")
            sd.check_output_settings(device=info["index"], channels=cfg.n_outputs, samplerate=fs, dtype="float32")
        except (ValueError, sd.PortAudioError) as exc:
            raise BackendUnavailable(f"sound card: device {dev!r} refuses {fs:g} Hz with {cfg.n_inputs} inputs and "
                                     f"{cfg.n_outputs} outputs (acquisition.sample_rate and [{TABLE}] in "
                                     f"{rig.source_path or 'the rig file'}): {exc}") from None
        return f"sound card {info['name']!r} takes {fs:g} Hz with {cfg.n_inputs} inputs and {cfg.n_outputs} outputs"

    # ------------------------------------------------------------------ construction
    def __init__(self, rig: Rig, **options: Any) -> None:
        self.rig = rig
        self.config = load_config(rig, **options)
        sd, why = _import_sounddevice()
        if sd is None:
            raise BackendUnavailable(f"sound card: {why}")
        self._sd = sd
        self._device_index, self._device_name = self._resolve_device()
        cfg = self.config
        self._channels = tuple(rig.input_channels)
        self._fs = cfg.sample_rate_hz
        self.guard = CeilingGuard(min(rig.drive.ceiling, cfg.output_full_scale_v), self._fs, rig.drive.ramp_time)
        self._in_cols = np.array([cfg.inputs[c] - 1 for c in self._channels])
        self._scale = np.array([cfg.volts_full_scale[c] for c in self._channels])[:, None]
        self._ref_row = (self._channels.index(rig.drive.reference_channel)
                         if rig.drive.reference_channel else None)
        self._stream: Any = None
        self._renderer: threading.Thread | None = None
        self._running = False
        self._stopped = True
        self._halted = False
        self._resume = False
        self._halt_epoch = 0
        self._allocate()

    def _resolve_device(self) -> tuple[int, str]:
        sd, dev = self._sd, self.config.device
        kind = None if dev is not None else "input"
        try:
            info = sd.query_devices(dev, kind) if dev is not None else sd.query_devices(kind=kind)
        except (ValueError, sd.PortAudioError) as exc:
            raise BackendUnavailable(f"sound card: device {dev!r} from [{TABLE}] not found ({exc}); "
                                     f"{self.probe().reason}") from None
        cfg = self.config
        if info["max_input_channels"] < cfg.n_inputs or info["max_output_channels"] < cfg.n_outputs:
            raise BackendUnavailable(
                f"sound card: device {info['name']!r} has {info['max_input_channels']} inputs and "
                f"{info['max_output_channels']} outputs; [{TABLE}] needs input {cfg.n_inputs} and output "
                f"{cfg.output_channel}")
        return int(info["index"]), str(info["name"])

    def _allocate(self) -> None:
        cfg, fs = self.config, self._fs
        self._out_size = int(OUT_RING_S * fs)
        self._out_ring = np.zeros((self._out_size, cfg.n_outputs), dtype=np.float32)
        self._lead_n = max(RENDER_CHUNK, int(cfg.output_lead_s * fs))
        self._cap_size = int(CAPTURE_S * fs)
        self._cap = np.zeros((self._cap_size, cfg.n_inputs + 1), dtype=np.float32)  # + the played drive
        self._cap_flags = np.zeros(self._cap_size, dtype=np.int32)
        self._chunk = np.zeros((RENDER_CHUNK, cfg.n_outputs), dtype=np.float32)
        self._max_lag = round(cfg.max_delay_s * fs)
        self._reset_counters()

    def _reset_counters(self) -> None:
        self._out_w = self._out_r = 0     # frames rendered / taken by the callback
        self._cap_w = 0                   # frames captured (== frames played)
        self._starved = 0                 # callbacks that found the output ring short
        self._read = 0                    # next frame index read_block hands out
        self._settle_mark = 0             # capture index by which the last ramp has been played
        self._delay: int | None = None
        self._lost = 0
        self._origin = -1                 # capture index of start_index 0 (set by the callback)
        self._first_clean = -1            # capture index of the first unflagged callback
        self._arriving_v = 0.0            # amplitude of the drive reaching the inputs in the last block read
        self._origin_open = True          # the callback may still set the origin

    # ------------------------------------------------------------------ identity
    def identity(self) -> dict[str, str]:
        sd = self._sd
        return {"maker": "PortAudio", "model": self._device_name, "serial": f"device {self._device_index}",
                "library": f"sounddevice {sd.__version__}, {sd.get_portaudio_version()[1]}",
                "sample_rate_hz": f"{self._fs:g}", "output_channel": str(self.config.output_channel),
                "inputs": ", ".join(f"{c}={self.config.inputs[c]}" for c in self._channels)}

    @property
    def channels(self) -> tuple[str, ...]:
        return self._channels

    @property
    def sample_rate_hz(self) -> float:
        return self._fs

    @property
    def delay_samples(self) -> int | None:
        """Output→input delay found on the latest blocks (None until the drive has been on)."""
        return self._delay

    @property
    def delay_s(self) -> float:
        return math.nan if self._delay is None else self._delay / self._fs

    # ------------------------------------------------------------------ the real-time part
    def _callback(self, indata: np.ndarray, outdata: np.ndarray, frames: int, _time: Any, status: Any) -> None:
        """Copy only: output ring -> outdata (all of it), indata + played drive -> capture ring."""
        r, avail = self._out_r, self._out_w - self._out_r
        halted = self._halted
        if halted:
            outdata.fill(0.0)
            self._out_r = self._out_w           # drop what was rendered before the halt
            if self._resume:                    # set_drive after a halt: play from the next callback
                self._halted = self._resume = False
        else:
            k = min(frames, avail)
            p = r % self._out_size
            first = min(k, self._out_size - p)
            outdata[:first] = self._out_ring[p:p + first]
            outdata[first:k] = self._out_ring[:k - first]
            if k < frames:
                outdata[k:] = 0.0
                self._starved += 1
            self._out_r = r + k
        w = self._cap_w
        p = w % self._cap_size
        first = min(frames, self._cap_size - p)
        n_in = indata.shape[1]
        drive_col = self.config.output_channel - 1
        self._cap[p:p + first, :n_in] = indata[:first]
        self._cap[:frames - first, :n_in] = indata[first:]
        self._cap[p:p + first, n_in] = outdata[:first, drive_col]
        self._cap[:frames - first, n_in] = outdata[first:, drive_col]
        self._cap_flags[p:p + first] = 0
        self._cap_flags[:frames - first] = 0
        flags = (int(status.input_overflow) + int(status.input_underflow) + int(status.output_underflow)
                 + int(status.output_overflow) + int(not halted and avail < frames))
        self._cap_flags[p] = flags
        if flags == 0 and self._origin_open:
            if self._first_clean < 0:
                self._first_clean = w
            if self._origin < 0 and indata.any():
                self._origin = w                # the first clean callback with a signal: acquisition starts here
        self._cap_w = w + frames

    # ------------------------------------------------------------------ renderer thread
    def extra_outputs(self, drive_digital: np.ndarray, frames: np.ndarray) -> None:
        """Hook for outputs other than the drive (``frames`` is (n, n_outputs), drive already in).

        The base back-end leaves them silent. Runs on the renderer thread, never in the callback.
        """

    def _render_loop(self) -> None:
        chunk, drive_col = self._chunk, self.config.output_channel - 1
        scale = 1.0 / self.config.output_full_scale_v
        pause_s = min(0.005, 0.25 * self.config.output_lead_s)
        while self._running:
            if self._halted or self._out_w - self._out_r >= self._lead_n:
                time.sleep(pause_s)
                continue
            epoch, was_settled = self._halt_epoch, self.guard.settled()
            drive_v = self.guard.render(RENDER_CHUNK)
            chunk.fill(0.0)
            chunk[:, drive_col] = drive_v * scale
            self.extra_outputs(chunk[:, drive_col], chunk)
            if epoch != self._halt_epoch or self._halted:
                chunk.fill(0.0)
            p = self._out_w % self._out_size
            first = min(RENDER_CHUNK, self._out_size - p)
            self._out_ring[p:p + first] = chunk[:first]
            self._out_ring[:RENDER_CHUNK - first] = chunk[first:]
            self._out_w += RENDER_CHUNK
            if not was_settled:
                # rendered frame i reaches the capture ring at index i + (frames the callback
                # filled with zeros while starved, bounded by the current difference)
                self._settle_mark = self._out_w + max(0, self._cap_w - self._out_r)

    # ------------------------------------------------------------------ acquisition
    def start(self) -> None:
        """Open the duplex stream and start the drive renderer (output silent until set_drive)."""
        if self._running:
            return
        sd, cfg = self._sd, self.config
        self._reset_counters()
        self._halted = self._resume = False
        self._cap.fill(0.0)
        self._cap_flags.fill(0)
        try:
            self._stream = sd.Stream(device=(self._device_index, self._device_index), samplerate=self._fs,
                                     channels=(cfg.n_inputs, cfg.n_outputs), dtype="float32",
                                     latency=cfg.latency, callback=self._callback)
        except (sd.PortAudioError, ValueError) as exc:
            raise DriverError(f"sound card: cannot open device {self._device_name!r} at {self._fs:g} Hz with "
                              f"{cfg.n_inputs} inputs / {cfg.n_outputs} outputs: {exc}") from None
        actual = float(self._stream.samplerate)
        if abs(actual - self._fs) > 1e-6 * self._fs:
            self._stream.close()
            raise DriverError(f"sound card: device {self._device_name!r} runs at {actual:g} Hz, not the "
                              f"{self._fs:g} Hz asked for in [{TABLE}] sample_rate")
        self._running, self._stopped = True, False
        self._renderer = threading.Thread(target=self._render_loop, name="soundcard-render", daemon=True)
        self._renderer.start()
        safety.register(self)
        deadline = time.monotonic() + 2.0
        while self._out_w < self._lead_n and time.monotonic() < deadline:
            time.sleep(0.002)             # output lead ready before the first callback
        try:
            self._stream.start()
        except self._sd.PortAudioError as exc:
            self._stopped = True
            self._close()
            raise DriverError(f"sound card: cannot start the stream on {self._device_name!r}: {exc}") from None
        # Duplex streams flag the first callbacks (PortAudio zero-fills the input while the
        # input side starts), and an audio server's capture first delivers exact digital
        # silence, which no input of a real chain shows (a dead-sensor check would fire): the
        # acquisition starts at the first clean callback with a signal on any input, or, if
        # every input stays exactly silent for START_SILENCE_S (a pure digital loopback with
        # the drive off), at the first clean callback.
        deadline = time.monotonic() + START_SILENCE_S
        while self._origin < 0 and time.monotonic() < deadline:
            time.sleep(0.005)
        self._origin_open = False
        if self._origin < 0:
            # never clean: start at once and let the counts show it
            self._origin = self._first_clean if self._first_clean >= 0 else 0
        self._read = self._origin

    @property
    def first_frame(self) -> int:
        """Stream frame (counted from the stream start, output and input alike) of start_index 0."""
        return max(self._origin, 0)

    def read_block(self, timeout_s: float = 2.0) -> SoundCardBlock:
        """The next block of the rig's block duration, in volts; BackendTimeout if none comes in time."""
        if not self._running:
            raise DriverError("sound card: acquisition is not running (call start() first)")
        n = self.config.block_n
        deadline = time.monotonic() + float(timeout_s)
        while self._cap_w - self._read < n:
            if time.monotonic() > deadline:
                raise BackendTimeout(f"sound card: no block from {self._device_name!r} within {timeout_s:g} s "
                                     f"({self._cap_w - self._read} of {n} frames arrived)")
            if not self._stream.active:
                raise AudioServerLost(
                    f"sound card: audio-server-lost: the stream on {self._device_name!r} stopped by itself (the audio "
                    f"server or the device went away; {self._cap_w - self._read} of {n} frames of the block had "
                    f"arrived); nothing plays any more. Restart the audio server, then resume the run")
            time.sleep(min(0.005, n / self._fs / 4))
        lost = self._skip_lost()
        start = self._read
        raw = self._ring_rows(self._cap, start, n)            # (n, n_inputs + 1)
        flags = int(self._ring_rows(self._cap_flags, start, n).sum()) + lost
        self._read = start + n
        data = raw[:, self._in_cols].T.astype(np.float64) * self._scale
        drive_played = raw[:, -1]
        delay, rho, glitch = self._measure_delay(data, start, n)
        freq_hz, amp_v = self._drive_at(start + n, drive_played)
        self._arriving_v = amp_v
        return SoundCardBlock(data=np.ascontiguousarray(data), channels=self._channels, sample_rate_hz=self._fs,
                              start_index=start - self._origin, overflows=flags + int(glitch), drive_freq_hz=freq_hz,
                              drive_amplitude_v=amp_v, delay_samples=-1 if self._delay is None else self._delay,
                              delay_measured=delay is not None, correlation=rho)

    def _skip_lost(self) -> int:
        """If the owner fell a whole capture ring behind, jump ahead (a gap in start_index) and count it."""
        oldest = self._cap_w - self._cap_size + self._max_lag + self.config.block_n
        if self._read < oldest:
            self._read = oldest
            self._lost += 1
            return 1
        return 0

    def _ring_rows(self, ring: np.ndarray, start: int, n: int) -> np.ndarray:
        idx = (start + np.arange(n)) % ring.shape[0]
        return ring[idx]

    def _measure_delay(self, data: np.ndarray, start: int, n: int) -> tuple[int | None, float, bool]:
        """(delay found on this block or None, its ρ, glitch): a glitch counts as one overflow.

        A glitch (a gap somewhere in the output→input chain) shows as the tracked delay moving by
        more than two samples, or the reference no longer matching the drive at the known delay.
        """
        if self._ref_row is None:
            return None, math.nan, False
        # before the stream has played max_delay, the history reaches back into the ring's
        # never-written part: zeros, which is what was played before the stream started
        history = self._ring_rows(self._cap[:, -1], start - self._max_lag, n + self._max_lag).astype(np.float64)
        x = data[self._ref_row]
        d = self._delay if self._delay is not None else 0
        aligned = history[self._max_lag - d:self._max_lag - d + n]
        if float(np.sqrt(np.mean(aligned ** 2))) < MIN_DRIVE_RMS or not np.any(x):
            return None, math.nan, False
        rho = normalised_xcorr(x, history, self._max_lag)
        freq = self.guard.status().freq_hz
        period = self._fs / freq if freq > 0 else math.nan
        previous = self._delay
        ramp = envelope_changes(x, period)
        if previous is None and not ramp:
            return None, float(rho.max()), False   # a steady sine alone cannot tell whole periods apart
        delay = pick_delay(rho, None if ramp else previous, period)
        peak = float(rho[delay]) if delay is not None else float(rho.max())
        if delay is not None:
            self._delay = delay
        glitch = previous is not None and (delay is None or abs(delay - previous) > 2 or peak < GLITCH_CORRELATION)
        return delay, peak, glitch

    def _drive_at(self, end: int, drive_played: np.ndarray) -> tuple[float, float]:
        """Frequency and peak amplitude of the drive that reached the inputs by frame ``end``."""
        status = self.guard.status()
        if status.freq_hz <= 0:
            return 0.0, 0.0
        d = self._delay or 0
        period = math.ceil(self._fs / status.freq_hz) + 1
        stop = end - d
        lo = max(0, stop - period, self._cap_w - self._cap_size)
        if stop <= lo:
            return status.freq_hz, 0.0
        seg = self._ring_rows(self._cap[:, -1], lo, stop - lo)
        return status.freq_hz, float(np.abs(seg).max()) * self.config.output_full_scale_v

    # ------------------------------------------------------------------ drive
    def set_drive(self, freq_hz: float, amplitude_v: float) -> None:
        """Ramped sine request through the ceiling guard (CeilingExceeded above the ceiling)."""
        if self._stopped:
            raise DriverError("sound card: stopped; call start() before driving")
        self.guard.request(freq_hz, amplitude_v)
        if self._halted:
            self._resume = True   # the callback drops the pre-halt samples, then plays again

    def arm(self, ceiling_v: float) -> None:
        """New sweep: clear a halt latch; this sweep's ceiling (never above the rig's or the output's full scale)."""
        self.guard.arm(min(ceiling_v, self.guard.hard_ceiling_v))

    def drive_status(self) -> DriveStatus:
        """The guard's status; still ``ramping`` until the end of the ramp has reached the inputs.

        While it is, ``amplitude_v`` is at least the amplitude of the drive that reached the
        inputs in the last block read: a caller comparing what it reads with what was commanded
        (an over-output check) must not see the previous, larger drive, still on its way through
        a long loop or a backlog of unread blocks, as an output above its command."""
        status = self.guard.status()
        if self._running:
            # until a delay is measured, the longest one configured: a loop through another
            # process (an emulator, an external mixer) takes longer than this stream's latency
            lag = self._delay if self._delay is not None else max(self._max_lag,
                                                                  int(self._stream.latency[1] * self._fs * 2))
            if status.ramping or self._read < self._settle_mark + lag:   # the next block read starts after the ramp
                return replace(status, ramping=True, amplitude_v=max(status.amplitude_v, self._arriving_v))
        return status

    def stop(self) -> None:
        """Ramp the drive to zero, let the ramp play out, stop and close the stream. Idempotent."""
        if self._stopped:
            return
        self._stopped = True
        try:
            self.guard.ramp_down()
            deadline = time.monotonic() + self.guard.time_to_settle_s() + self.config.output_lead_s + 2.0
            while not self.guard.settled() and time.monotonic() < deadline:
                time.sleep(0.01)          # the renderer plays the ramp out
            rendered = self._out_w
            while self._stream.active and self._out_r < rendered and time.monotonic() < deadline:
                time.sleep(0.01)          # the callback has taken the end of the ramp
            time.sleep(min(0.5, float(self._stream.latency[1])))   # and the device has played it
        except self._sd.PortAudioError:
            pass   # PortAudio already shut down (interpreter exit): nothing plays any more
        finally:
            self._close()

    def _close(self) -> None:
        self._halted = True
        self._running = False
        if self._renderer is not None:
            self._renderer.join(2.0)
            self._renderer = None
        if self._stream is not None:
            try:
                self._stream.stop()
                self._stream.close()
            except self._sd.PortAudioError:
                pass
            self._stream = None
        safety.unregister(self)

    def halt(self) -> None:
        """Outputs to zero from the next callback, no ramp. Lock-free: any thread or a signal handler."""
        self._resume = False
        self._halted = True
        self._halt_epoch += 1
        self.guard.halt()


__all__ = ["AudioServerLost", "SoundCard", "SoundCardBlock", "SoundCardConfig", "load_config", "normalised_xcorr", "pick_delay"]
