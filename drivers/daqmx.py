"""DAQ cards through NI-DAQmx: synchronised sine drive output and multi-channel input.

:class:`DaqmxCard` implements SineDrive, Acquirer, Identified, Stoppable and EmergencyHalt
on one analog-output task (the drive) and one analog-input task (every rig channel):

* the output task is triggered by the input task's start trigger (terminal name built from
  the input task's device), or also clocked by its sample clock (``share_sample_clock``);
  the triggered output task is started first; the rate the card actually uses is read back
  and used everywhere (guard, blocks, delay);
* a pump thread does nothing but read fixed blocks of about ``block_duration`` into freshly
  allocated C-contiguous float64 (channels, samples) arrays with
  ``AnalogMultiChannelReader.read_many_sample``, top up the output queue and enqueue the
  block; the input buffer is set explicitly to several seconds;
* the output never regenerates: phase-continuous blocks rendered by
  :class:`drivers.guard.CeilingGuard` (amplitude ramped inside the block) are written with
  ``AnalogSingleChannelWriter`` after checking ``out_stream.space_avail``, keeping about
  ``output_queue`` seconds queued;
* with a loopback of the drive wired to ``rig.drive.reference_channel``, each block carries
  the fixed output-to-input delay found by cross-correlating that channel with the rendered
  drive (:func:`loopback_delay_samples`);
* DAQmx warnings are recorded, logged and carried by the next block and by ``identity()``;
  DAQmx errors become :class:`drivers.errors.DriverError` / ``BackendTimeout`` naming the
  error code and what was being done; tasks are always closed.

Configuration comes from the rig file's ``[hardware.daqmx]`` table (see docs/hardware.md).

Imports: numpy, ``app.rig``/``app.units``/``app.errors``, ``drivers.errors``/``guard``/
``protocols``/``safety`` and ``nidaqmx`` (lazily, inside methods). Never Qt, the engine or storage.
"""

from __future__ import annotations

import logging
import math
import queue
import threading
import warnings
from collections import deque
from dataclasses import dataclass, field
from importlib import metadata
from typing import Any

import numpy as np

from app.errors import ConfigError
from app.rig import Rig
from app.units import parse_quantity
from drivers import safety
from drivers.errors import BackendTimeout, DriveHalted, DriverError
from drivers.guard import CeilingGuard
from drivers.protocols import Availability, Block, DriveStatus

log = logging.getLogger(__name__)

RUNTIME_MISSING = "NI-DAQmx runtime not installed (libnidaqmx not found)"
TERMINALS = {"default": "DEFAULT", "rse": "RSE", "nrse": "NRSE", "diff": "DIFF", "pseudo_diff": "PSEUDO_DIFF"}
# DAQmx error codes with a plain meaning (nidaqmx.error_codes.DAQmxErrors)
SAMPLES_NOT_YET_AVAILABLE = -200284      # read timed out
SAMPLES_NO_LONGER_AVAILABLE = -200279    # input buffer overwritten: read too slowly
OUTPUT_UNDERFLOW = -200290               # non-regenerating output ran dry
KNOWN_CODES = {
    SAMPLES_NO_LONGER_AVAILABLE: "the input buffer overflowed (samples were read too slowly)",
    OUTPUT_UNDERFLOW: "the drive output ran out of samples (the output queue was not fed in time)",
    200015: "old and new output samples were mixed",
}
_WARN_LOCK = threading.Lock()


# =========================================================================== configuration
@dataclass(frozen=True)
class DaqmxConfig:
    """The ``[hardware.daqmx]`` table, checked against the rig. SI units."""

    inputs: tuple[tuple[str, str], ...]          # (rig channel, physical channel), rig order
    output: str | None                           # physical channel of the drive; None: input only
    terminal_config: dict[str, str]             # rig channel -> TerminalConfiguration member name
    input_ranges_v: dict[str, float]            # rig channel -> ± volts
    output_range_v: float
    input_buffer_s: float = 5.0
    output_queue_s: float = 0.2
    max_delay_s: float = 0.002
    share_sample_clock: bool = False

    KEYS = ("channels", "terminal_config", "input_ranges", "output_range", "input_buffer", "output_queue",
            "max_loopback_delay", "share_sample_clock", "input_only")

    @classmethod
    def from_rig(cls, rig: Rig, **overrides: Any) -> "DaqmxConfig":
        table = {**rig.hardware.get("daqmx", {}), **overrides}
        where = rig.source_path or "<rig>"
        problems = [f"hardware.daqmx.{k}: unknown key (known: {', '.join(cls.KEYS)})" for k in table
                    if k not in cls.KEYS]
        chans = table.get("channels", {})
        if not isinstance(chans, dict):
            problems.append("hardware.daqmx.channels: expected a table {rig channel = \"Dev1/ai0\"}")
            chans = {}
        inputs = []
        for name in rig.input_channels:
            if not isinstance(chans.get(name), str) or not chans[name].strip():
                problems.append(f"hardware.daqmx.channels.{name}: physical channel missing (e.g. \"Dev1/ai0\")")
            else:
                inputs.append((name, chans[name].strip()))
        input_only = bool(table.get("input_only", False))
        output = None if input_only else chans.get(rig.drive.channel)
        if not input_only and not isinstance(output, str):
            problems.append(f"hardware.daqmx.channels.{rig.drive.channel}: physical output channel missing "
                            f"(e.g. \"Dev1/ao0\"), or set input_only = true")
        extra = sorted(set(chans) - set(rig.input_channels) - {rig.drive.channel})
        problems += [f"hardware.daqmx.channels.{k}: not a channel of this rig" for k in extra]
        terminals = _terminals(table.get("terminal_config", "default"), rig, problems)
        ranges = _ranges(table.get("input_ranges", {}), rig, problems)
        out_range = _quantity(table, "output_range", "voltage", max(10.0, rig.drive.ceiling), problems)
        if out_range < rig.drive.ceiling:
            problems.append(f"hardware.daqmx.output_range: {out_range:g} V is below the drive ceiling "
                            f"{rig.drive.ceiling:g} V")
        values = {k: _quantity(table, key, "time", default, problems) for k, key, default in (
            ("input_buffer_s", "input_buffer", 5.0), ("output_queue_s", "output_queue", 0.2),
            ("max_delay_s", "max_loopback_delay", 0.002))}
        if values["input_buffer_s"] < 1.0:
            problems.append("hardware.daqmx.input_buffer: give at least 1 s (several seconds is usual)")
        if problems:
            raise ConfigError(where, problems)
        return cls(inputs=tuple(inputs), output=output, terminal_config=terminals, input_ranges_v=ranges,
                   output_range_v=out_range, share_sample_clock=bool(table.get("share_sample_clock", False)),
                   **values)


def _quantity(table: dict, key: str, kind: str, default: float, problems: list[str]) -> float:
    try:
        return float(parse_quantity(table[key], kind)) if key in table else float(default)
    except ValueError as exc:
        problems.append(f"hardware.daqmx.{key}: {exc}")
        return float(default)


def _terminals(value: Any, rig: Rig, problems: list[str]) -> dict[str, str]:
    per = value if isinstance(value, dict) else {c: value for c in rig.input_channels}
    out = {}
    for name in rig.input_channels:
        raw = str(per.get(name, "default")).strip().lower()
        if raw not in TERMINALS:
            problems.append(f"hardware.daqmx.terminal_config ({name}): {raw!r} is not one of {', '.join(TERMINALS)}")
        out[name] = TERMINALS.get(raw, "DEFAULT")
    return out


def _ranges(value: Any, rig: Rig, problems: list[str]) -> dict[str, float]:
    if not isinstance(value, dict):
        problems.append("hardware.daqmx.input_ranges: expected a table {rig channel = \"5 V\"}")
        value = {}
    out = {}
    for name in rig.input_channels:
        try:
            out[name] = float(parse_quantity(value.get(name, rig.acquisition.input_range), "voltage"))
        except ValueError as exc:
            problems.append(f"hardware.daqmx.input_ranges.{name}: {exc}")
            out[name] = rig.acquisition.input_range
        if out[name] <= 0:
            problems.append(f"hardware.daqmx.input_ranges.{name}: must be > 0")
    return out


# =========================================================================== signal helpers
def loopback_delay_samples(reference: np.ndarray, drive: np.ndarray, max_lag: int) -> float:
    """Delay (samples, fractional) of ``reference`` behind ``drive`` by cross-correlation.

    ``drive`` holds the ``max_lag`` samples before the block and then the block's samples
    (``len(drive) == len(reference) + max_lag``). The correlation peak over lags 0..max_lag
    is refined by a parabola through its neighbours. NaN when the drive is silent, the
    reference does not resemble it (correlation coefficient below 0.5) or the peak lies on
    the edge of the search range.
    """
    n = reference.size
    if drive.size != n + max_lag or n == 0:
        raise ValueError(f"drive must hold {n + max_lag} samples, got {drive.size}")
    c = np.correlate(drive, reference, mode="valid")[::-1]       # c[k]: reference vs drive k samples earlier
    k = int(np.argmax(c))
    seg = drive[max_lag - k:max_lag - k + n]
    energy = math.sqrt(float(reference @ reference) * float(seg @ seg))
    if energy == 0.0 or c[k] / energy < 0.5:
        return math.nan
    if k == 0:
        return 0.0
    if k == max_lag:
        return math.nan                  # the true delay may lie beyond the search range
    den = c[k - 1] - 2.0 * c[k] + c[k + 1]
    return float(k + (0.5 * (c[k - 1] - c[k + 1]) / den if den != 0.0 else 0.0))


class _DriveHistory:
    """Rendered drive samples by absolute output index, with the drive status at each chunk's end."""

    def __init__(self) -> None:
        # start index, samples, frequency and amplitude at the end, whether the envelope was constant
        self._chunks: deque[tuple[int, np.ndarray, float, float, bool]] = deque()
        self.next_index = 0

    def append(self, samples: np.ndarray, freq_hz: float, amp_v: float, steady: bool) -> None:
        self._chunks.append((self.next_index, samples, freq_hz, amp_v, steady))
        self.next_index += samples.size

    def steady(self, start: int, stop: int) -> bool:
        """True when every sample in [start, stop) was written at one constant, non-zero envelope."""
        parts = [(f, a, ok) for i0, s, f, a, ok in self._chunks if i0 < stop and i0 + s.size > start]
        covered = sum(min(stop, i0 + s.size) - max(start, i0) for i0, s, *_ in self._chunks
                      if i0 < stop and i0 + s.size > start)
        return (covered == stop - start and all(ok and a > 0 for _, a, ok in parts)
                and len({(f, a) for f, a, _ in parts}) == 1)

    def segment(self, start: int, stop: int) -> np.ndarray:
        """Samples [start, stop); zero before the first chunk or where nothing was written."""
        out = np.zeros(stop - start)
        for i0, s, *_ in self._chunks:
            lo, hi = max(start, i0), min(stop, i0 + s.size)
            if lo < hi:
                out[lo - start:hi - start] = s[lo - i0:hi - i0]
        return out

    def status_at(self, index: int) -> tuple[float, float] | None:
        """(freq_hz, amplitude_v) at the end of the chunk holding ``index``."""
        for i0, s, f, a, _ in self._chunks:
            if i0 <= index < i0 + s.size:
                return f, a
        return None

    def trim(self, before: int) -> None:
        while self._chunks and self._chunks[0][0] + self._chunks[0][1].size <= before:
            self._chunks.popleft()

    def clear(self) -> None:
        self._chunks.clear()


@dataclass(frozen=True)
class DaqmxBlock(Block):
    """A Block with the loopback delay (seconds; NaN without a loopback, with the drive off or
    while its envelope moves) and the DAQmx warnings seen since the previous block."""

    loopback_delay_s: float = math.nan
    warnings: tuple[str, ...] = field(default=())


# =========================================================================== the back-end
class DaqmxCard:
    """DAQ card (NI-DAQmx). Drive output and every rig channel on one synchronised card."""

    title = "DAQ card (NI-DAQmx)"

    def __init__(self, rig: Rig, **options: Any) -> None:
        self.rig = rig
        self.config = DaqmxConfig.from_rig(rig, **options)
        self._channels = tuple(name for name, _ in self.config.inputs)
        self._ai: Any = None
        self._ao: Any = None
        self._closed = False
        self._started = False
        self._stopped = False
        self._halt_flag = False
        self._halted = False
        self._warnings: list[str] = []
        self._all_warnings: dict[str, None] = {}
        self._queue: queue.Queue[Any] = queue.Queue()
        self._max_queued = 1
        self._stop_event = threading.Event()
        self._pump: threading.Thread | None = None
        self._cond = threading.Condition()
        self._played: tuple[float, float] = (0.0, 0.0)
        self._history = _DriveHistory()
        self._index = 0
        self._overflows = 0
        self._delay_s = math.nan
        self._devices: list[dict[str, str]] = []
        try:
            self._configure()
        except BaseException:
            self._close_tasks()
            raise
        safety.register(self)        # zeroed and closed at exit and on SIGINT/SIGTERM

    # ------------------------------------------------------------------ availability
    @classmethod
    def probe(cls) -> Availability:
        """Library, vendor runtime and at least one device; never raises."""
        try:
            import nidaqmx
            import nidaqmx.system
        except ImportError as exc:
            return Availability(False, f"nidaqmx package not installed ({exc}); pip install nidaqmx")
        try:
            system = nidaqmx.system.System.local()
            version = system.driver_version
            names = [d.name for d in system.devices]
        except nidaqmx.errors.DaqNotFoundError:
            return Availability(False, RUNTIME_MISSING)
        except Exception as exc:   # noqa: BLE001 - probe must never raise
            return Availability(False, f"NI-DAQmx runtime could not be queried: {type(exc).__name__}: {exc}")
        ver = f"{version.major_version}.{version.minor_version}.{version.update_version}"
        if not names:
            return Availability(False, f"NI-DAQmx runtime {ver} found, but no DAQ device is connected")
        return Availability(True, f"NI-DAQmx {ver}; devices: {', '.join(names)}",
                            {"driver": ver, "devices": ", ".join(names)})

    @classmethod
    def check_settings(cls, rig: Rig) -> str:
        """Configure the tasks as a sweep would (channels, ranges, sample clock), read back the rate
        the card chose, and close them again without starting anything: the card's own answer to
        what the rig asks. Raises the card's named error when it refuses."""
        card = cls(rig)
        try:
            fs, asked = card._fs, float(rig.acquisition.sample_rate)
        finally:
            card.stop()          # never started: only closes the tasks
        note = "" if abs(fs - asked) <= 1e-6 * asked else f" (asked {asked:g} Hz: the card's nearest rate)"
        return f"DAQ card samples at {fs:g} Hz{note} with {len(card._channels)} inputs"

    # ------------------------------------------------------------------ set-up
    def _daq(self, what: str, fn: Any, *args: Any, **kwargs: Any) -> Any:
        """Call into DAQmx: warnings recorded and logged, errors named.

        ``catch_warnings`` swaps process-wide state; the lock keeps this back-end's own calls
        from interleaving, and other warnings caught meanwhile are re-emitted unchanged."""
        import nidaqmx.errors as nerr

        with _WARN_LOCK, warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", nerr.DaqWarning)
            try:
                result = fn(*args, **kwargs)
            except nerr.DaqError as exc:
                raise _named_error(what, exc) from None
        for w in caught:
            if isinstance(w.message, nerr.DaqWarning):
                self._record_warning(what, w.message)
            else:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        return result

    def _record_warning(self, what: str, warning: Any) -> None:
        code = getattr(warning, "error_code", 0)
        meaning = KNOWN_CODES.get(code, str(warning).splitlines()[0] if str(warning) else "")
        text = f"DAQmx warning {code} while {what}: {meaning}"
        log.warning(text)
        self._warnings.append(text)
        self._all_warnings[text] = None

    def _configure(self) -> None:
        import nidaqmx
        import nidaqmx.constants as c
        import nidaqmx.stream_readers
        import nidaqmx.stream_writers

        cfg, rig = self.config, self.rig
        self._ai = self._daq("creating the input task", nidaqmx.Task, "flamebode-input")
        for name, phys in cfg.inputs:
            r = cfg.input_ranges_v[name]
            self._daq(f"adding input {name} ({phys})", self._ai.ai_channels.add_ai_voltage_chan, phys,
                      name_to_assign_to_channel=name,
                      terminal_config=c.TerminalConfiguration[cfg.terminal_config[name]], min_val=-r, max_val=r)
        block_n = max(1, round(rig.acquisition.block_duration * rig.acquisition.sample_rate))
        buffer_n = max(round(cfg.input_buffer_s * rig.acquisition.sample_rate), 4 * block_n)
        self._daq("setting the input sample clock", self._ai.timing.cfg_samp_clk_timing,
                  rig.acquisition.sample_rate, sample_mode=c.AcquisitionType.CONTINUOUS, samps_per_chan=buffer_n)
        self._daq("setting the input buffer", setattr, self._ai.in_stream, "input_buf_size", buffer_n)
        self._fs = float(self._daq("reading back the sample rate", getattr, self._ai.timing, "samp_clk_rate"))
        if not math.isfinite(self._fs) or self._fs <= 0:
            raise DriverError(f"DAQ card: the card reports a sample rate of {self._fs!r} Hz")
        self._block_n = max(1, round(rig.acquisition.block_duration * self._fs))
        self._max_queued = max(4, math.ceil(cfg.input_buffer_s * self._fs / self._block_n))
        self._max_lag = max(1, round(cfg.max_delay_s * self._fs))
        devices = self._daq("listing the input devices", getattr, self._ai, "devices")
        self._devices = [{"name": str(d.name), "model": str(d.product_type), "serial": str(d.serial_num)}
                         for d in devices]
        self._reader = nidaqmx.stream_readers.AnalogMultiChannelReader(self._ai.in_stream)
        self.guard = CeilingGuard(rig.drive.ceiling, self._fs, rig.drive.ramp_time)
        if cfg.output is not None:
            self._configure_output(c, nidaqmx)

    def _configure_output(self, c: Any, nidaqmx: Any) -> None:
        cfg = self.config
        dev = self._devices[0]["name"]
        self._ao = self._daq("creating the output task", nidaqmx.Task, "flamebode-drive")
        self._daq(f"adding the drive output ({cfg.output})", self._ao.ao_channels.add_ao_voltage_chan,
                  cfg.output, name_to_assign_to_channel=self.rig.drive.channel,
                  min_val=-cfg.output_range_v, max_val=cfg.output_range_v)
        self._queue_n = max(2 * self._block_n, round(cfg.output_queue_s * self._fs))
        source = f"/{dev}/ai/SampleClock" if cfg.share_sample_clock else ""
        self._daq("setting the output sample clock", self._ao.timing.cfg_samp_clk_timing, self._fs,
                  source=source, sample_mode=c.AcquisitionType.CONTINUOUS, samps_per_chan=2 * self._queue_n)
        self._daq("switching off regeneration", setattr, self._ao.out_stream, "regen_mode",
                  c.RegenerationMode.DONT_ALLOW_REGENERATION)
        self._daq("setting the output buffer", setattr, self._ao.out_stream, "output_buf_size", 2 * self._queue_n)
        self._daq("triggering the output from the input", self._ao.triggers.start_trigger.cfg_dig_edge_start_trig,
                  f"/{dev}/ai/StartTrigger")
        fs_out = float(self._daq("reading back the output rate", getattr, self._ao.timing, "samp_clk_rate"))
        if not math.isclose(fs_out, self._fs, rel_tol=1e-9):
            raise DriverError(f"DAQ card: output runs at {fs_out:g} Hz but input at {self._fs:g} Hz; "
                              f"choose a sample rate both accept (hardware.daqmx / acquisition.sample_rate)")
        self._writer = nidaqmx.stream_writers.AnalogSingleChannelWriter(self._ao.out_stream, auto_start=False)

    # ------------------------------------------------------------------ identity
    def identity(self) -> dict[str, str]:
        try:
            version = metadata.version("nidaqmx")
        except metadata.PackageNotFoundError:
            version = "unknown"
        out = {"maker": "National Instruments (NI-DAQmx)",
               "model": ", ".join(d["model"] for d in self._devices),
               "serial": ", ".join(d["serial"] for d in self._devices),
               "devices": ", ".join(d["name"] for d in self._devices),
               "nidaqmx": version, "sample_rate_hz": repr(self._fs),
               "channels": ", ".join(f"{n}={p}" for n, p in self.config.inputs),
               "drive_output": self.config.output or "none (input only)",
               "loopback_delay_s": repr(self._delay_s),
               "warnings": "; ".join(self._all_warnings) or "none"}
        return out

    # ------------------------------------------------------------------ acquisition
    @property
    def channels(self) -> tuple[str, ...]:
        return self._channels

    @property
    def sample_rate_hz(self) -> float:
        return self._fs

    @property
    def loopback_delay_s(self) -> float:
        """The latest output-to-input delay from the loopback channel (NaN without one)."""
        return self._delay_s

    def start(self) -> None:
        """Prefill the output, start the triggered output task, then the input task, then the pump."""
        if self._closed:
            raise DriverError("DAQ card: the tasks are closed; open the back-end again")
        if self._started:
            return
        if self._ao is not None:
            self._feed_output()
            self._daq("starting the drive output", self._ao.start)
        self._daq("starting the input", self._ai.start)
        self._started = True
        self._pump = threading.Thread(target=self._pump_loop, name="daqmx-pump", daemon=True)
        self._pump.start()

    def read_block(self, timeout_s: float = 2.0) -> Block:
        if not self._started or self._closed:
            raise DriverError("DAQ card: acquisition is not running (call start() first)")
        try:
            item = self._queue.get(timeout=timeout_s)
        except queue.Empty:
            raise BackendTimeout(f"DAQ card: no block of samples within {timeout_s:g} s") from None
        if isinstance(item, BaseException):
            self._queue.put(item)         # every later call fails the same way
            raise item
        return item

    # ------------------------------------------------------------------ drive
    def set_drive(self, freq_hz: float, amplitude_v: float) -> None:
        if self._ao is None:
            raise DriverError("DAQ card: configured input only (hardware.daqmx.input_only); it has no drive")
        if self._stopped or self._halted:
            raise DriverError("DAQ card: the drive was stopped or halted; open the back-end again")
        self.guard.request(freq_hz, amplitude_v)

    def arm(self, ceiling_v: float) -> None:
        """New sweep: this sweep's ceiling. After a halt the output task is stopped: open the back-end again."""
        if self._halted or self._halt_flag:
            raise DriveHalted("DAQ card: the drive was halted; open the back-end again for a new sweep")
        self.guard.arm(ceiling_v)

    def drive_status(self) -> DriveStatus:
        """What the card is putting out now (the queued samples not yet played are not counted)."""
        g = self.guard.status()
        with self._cond:
            freq, amp = self._played
        ramping = g.ramping or not math.isclose(amp, g.amplitude_v, abs_tol=1e-12) or (amp > 0 and freq != g.freq_hz)
        return DriveStatus(freq_hz=freq or g.freq_hz, amplitude_v=amp, target_amplitude_v=g.target_amplitude_v,
                           ceiling_v=g.ceiling_v, ramping=ramping)

    def halt(self) -> None:
        """Zero at once: the guard renders zeros and the pump stops the output task and writes 0 V.

        Only flags are set here (safe from a signal handler or any thread)."""
        self.guard.halt()
        self._halt_flag = True

    def stop(self) -> None:
        """Ramp the drive to zero (as played), stop the pump and the tasks, close them. Idempotent."""
        if self._closed:
            return
        try:
            if self._started and self._ao is not None and not self._halted and self._pump_alive():
                self.guard.ramp_down()
                self._wait_played_zero(self.rig.drive.ramp_time + self.config.output_queue_s + 2.0)
        finally:
            self._stopped = True
            self._stop_event.set()
            if self._pump is not None:
                self._pump.join(timeout=5.0)
            try:
                if self._started:
                    self._stop_tasks()
            finally:
                self._close_tasks()
                safety.unregister(self)

    # ------------------------------------------------------------------ internals
    def _pump_alive(self) -> bool:
        return self._pump is not None and self._pump.is_alive()

    def _wait_played_zero(self, timeout_s: float) -> None:
        with self._cond:
            done = self._cond.wait_for(lambda: self._played[1] == 0.0 and self.guard.settled()
                                       or not self._pump_alive(), timeout=timeout_s)
        if not done:
            log.error("DAQ card: the drive did not ramp to zero within %.1f s; halting", timeout_s)
            self.halt()

    def _pump_loop(self) -> None:
        """Read a block, top up the output, enqueue. Errors are enqueued for the reader."""
        try:
            while not self._stop_event.is_set():
                if self._halt_flag and not self._halted:
                    self._do_halt()
                block = self._read_one()
                if self._ao is not None and not self._halted:
                    self._feed_output()
                self._enqueue(block)
        except BaseException as exc:  # handed to the engine's thread by read_block
            if not self._stop_event.is_set():
                self._queue.put(exc if isinstance(exc, DriverError) else
                                DriverError(f"DAQ card: acquisition failed: {type(exc).__name__}: {exc}"))
        finally:
            with self._cond:
                self._cond.notify_all()

    def _read_one(self) -> DaqmxBlock:
        n, i0 = self._block_n, self._index
        data = np.empty((len(self._channels), n), dtype=np.float64)       # C-contiguous (channels, samples)
        self._daq("reading a block", self._reader.read_many_sample, data, number_of_samples_per_channel=n,
                  timeout=max(2.0, 10.0 * self.rig.acquisition.block_duration))
        self._index += n
        delay_s = self._estimate_delay(data, i0, n)
        with self._cond:
            if self._halted:
                self._played = (self._played[0], 0.0)
            else:
                self._played = self._history.status_at(i0 + n - 1) or self._played
            self._history.trim(i0 + n - self._max_lag)
            self._cond.notify_all()
        freq, amp = self._played
        found, self._warnings = tuple(self._warnings), []
        return DaqmxBlock(data=data, channels=self._channels, sample_rate_hz=self._fs, start_index=i0,
                          drive_freq_hz=freq, drive_amplitude_v=amp, loopback_delay_s=delay_s, warnings=found)

    def _estimate_delay(self, data: np.ndarray, i0: int, n: int) -> float:
        ref = self.rig.drive.reference_channel
        if self._ao is None or not ref or ref not in self._channels:
            return math.nan
        if not self._history.steady(i0 - self._max_lag, i0 + n):   # a ramp would bias the peak
            return math.nan
        drive = self._history.segment(i0 - self._max_lag, i0 + n)
        lag = loopback_delay_samples(data[self._channels.index(ref)], drive, self._max_lag)
        if math.isfinite(lag):
            self._delay_s = lag / self._fs
            return self._delay_s
        return math.nan

    def _enqueue(self, block: DaqmxBlock) -> None:
        if self._queue.qsize() >= self._max_queued:   # the consumer fell behind by a whole input buffer
            try:
                self._queue.get_nowait()
                self._overflows += 1
            except queue.Empty:
                pass
        if self._overflows:
            block = _with_overflows(block, self._overflows)
            self._overflows = 0
        self._queue.put(block)

    def _feed_output(self) -> None:
        """Top the output queue up to about ``output_queue`` seconds, never beyond the free space."""
        space = int(self._daq("checking the output space", getattr, self._ao.out_stream, "space_avail"))
        queued = 2 * self._queue_n - space
        n = min(self._queue_n - queued, space)
        if n <= 0:
            return
        before = self.guard.status()
        samples = np.ascontiguousarray(self.guard.render(n), dtype=np.float64)
        status = self.guard.status()
        steady = not before.ramping and (before.freq_hz, before.amplitude_v) == (status.freq_hz, status.amplitude_v)
        with self._cond:
            self._history.append(samples, status.freq_hz, status.amplitude_v, steady)
        self._daq("writing the drive", self._writer.write_many_sample, samples,
                  timeout=max(2.0, 10.0 * self.rig.acquisition.block_duration))

    def _do_halt(self) -> None:
        """Stop the output task at once and hold 0 V on the output (pump thread only)."""
        self._halted = True
        with self._cond:
            self._history.clear()
            self._played = (self._played[0], 0.0)
        try:
            self._daq("stopping the drive output on halt", self._ao.stop)
        finally:
            self._write_zero()

    def _write_zero(self) -> None:
        """Hold 0 V on the drive output with a one-sample on-demand task."""
        if self.config.output is None:
            return
        import nidaqmx

        task = self._daq("creating the zeroing task", nidaqmx.Task, "flamebode-zero")
        try:
            self._daq("adding the drive output", task.ao_channels.add_ao_voltage_chan, self.config.output,
                      min_val=-self.config.output_range_v, max_val=self.config.output_range_v)
            self._daq("writing 0 V to the drive output", task.write, 0.0, auto_start=True)
        finally:
            self._daq("closing the zeroing task", task.close)

    def _stop_tasks(self) -> None:
        errors = []
        for what, task in (("stopping the drive output", self._ao), ("stopping the input", self._ai)):
            if task is None:
                continue
            try:
                self._daq(what, task.stop)
            except DriverError as exc:
                errors.append(exc)
        if self._ao is not None:
            self._close_one("_ao")
            try:
                self._write_zero()
            except DriverError as exc:
                errors.append(exc)
        if errors:
            raise errors[0]

    def _close_one(self, attr: str) -> None:
        task = getattr(self, attr)
        setattr(self, attr, None)
        if task is not None:
            try:
                self._daq("closing a task", task.close)
            except DriverError as exc:
                log.error("%s", exc)

    def _close_tasks(self) -> None:
        self._close_one("_ao")
        self._close_one("_ai")
        self._closed = True


def _with_overflows(block: DaqmxBlock, n: int) -> DaqmxBlock:
    from dataclasses import replace

    return replace(block, overflows=block.overflows + n)


def _named_error(what: str, exc: Any) -> DriverError:
    code = int(getattr(exc, "error_code", 0))
    first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    meaning = KNOWN_CODES.get(code, first)
    message = f"DAQ card: {what} failed: DAQmx error {code}: {meaning}"
    if code == SAMPLES_NOT_YET_AVAILABLE:
        return BackendTimeout(message)
    return DriverError(message)


__all__ = ["DaqmxBlock", "DaqmxCard", "DaqmxConfig", "RUNTIME_MISSING", "loopback_delay_samples"]
