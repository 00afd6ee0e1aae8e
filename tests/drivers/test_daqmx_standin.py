"""A strict stand-in for a DAQ card behind the nidaqmx package, and tests that it is strict.

The vendor runtime cannot be installed here, so the DAQ back-end is tested against
:class:`StandInCard`: every task, channel collection, timing, trigger, stream and
stream-reader/writer object is ``unittest.mock.create_autospec`` of the installed nidaqmx
class, so a wrong method name or argument fails exactly as it would on the real package.
Behind the autospecs the card behaves like a loopback bench:

* it accepts only sample rates ``master / k`` (a delta-sigma card's habit) and reports the
  rate it chose through ``timing.samp_clk_rate``;
* the output task plays its written samples from the input task's start trigger onward;
  each input channel is a gain, a fixed delay (samples) and an offset applied to that
  output, plus a little seeded noise;
* it checks array shapes, dtypes and memory order (float64, C-contiguous,
  (channels, samples)), free space before writes, call order (timing, buffer and
  regeneration configured before start; the triggered output started before the input),
  the start-trigger terminal, and that every task is closed; each breach is appended to
  ``violations`` (and raised where the real library would raise);
* time runs ``speed`` times faster than real time; reading later than the input buffer
  allows raises DAQmx error -200279, an output that runs dry raises -200290 on the next
  write, as the library does.

Imported by name from the other DAQ tests (tests are not a package).
"""

from __future__ import annotations

import inspect
import time
import warnings
from dataclasses import dataclass, field
from typing import Any
from unittest import mock

import numpy as np
import pytest

import nidaqmx
import nidaqmx.constants as c
import nidaqmx.errors
import nidaqmx.stream_readers
import nidaqmx.stream_writers
import nidaqmx.system
from nidaqmx.task._in_stream import InStream
from nidaqmx.task._out_stream import OutStream
from nidaqmx.task._timing import Timing
from nidaqmx.task.collections import AIChannelCollection, AOChannelCollection
from nidaqmx.task.triggering import StartTrigger, Triggers

DEVICE = "Dev1"
# the real classes, kept before any test replaces the package's names with stand-ins
TASK = nidaqmx.Task
READER = nidaqmx.stream_readers.AnalogMultiChannelReader
WRITER = nidaqmx.stream_writers.AnalogSingleChannelWriter


def _bound(real: Any, args: tuple, kwargs: dict) -> dict[str, Any]:
    """The call's arguments by name, defaults filled in, as the real method would see them."""
    ba = inspect.signature(real).bind(None, *args, **kwargs)
    ba.apply_defaults()
    return dict(list(ba.arguments.items())[1:])


@dataclass
class TaskState:
    name: str
    ai: list[dict[str, Any]] = field(default_factory=list)
    ao: list[dict[str, Any]] = field(default_factory=list)
    timing: dict[str, Any] | None = None
    rate_hz: float = 0.0
    trigger: str | None = None
    started: bool = False
    stopped: bool = False
    closed: bool = False
    read_index: int = 0
    written: int = 0
    t0: float = 0.0
    underflow: bool = False
    task: Any = None


class StandInCard:
    """A loopback DAQ card behind autospecced nidaqmx objects. See the module docstring."""

    def __init__(self, wiring: dict[str, tuple[float, int, float]], master_hz: float = 51200.0,
                 speed: float = 2.0, noise_v: float = 1e-3, seed: int = 5) -> None:
        self.wiring = dict(wiring)                 # physical input -> (gain, delay samples, offset V)
        self.master_hz = master_hz
        self.speed = speed
        self.noise_v = noise_v
        self.rng = np.random.default_rng(seed)
        self.tasks: list[TaskState] = []
        self.log: list[tuple[str, str]] = []
        self.violations: list[str] = []
        self.out = np.zeros(0)                     # samples the buffered output task received, by index
        self.held_v: dict[str, float] = {}         # on-demand writes (the zeroing task)
        self.warn_on_read: int | None = None       # DAQmx warning code to raise on the next read
        self.fail_on_read: int | None = None       # DAQmx error code to raise on the next read
        self.out_end: int | None = None            # index where the buffered output was stopped
        self.device = mock.create_autospec(nidaqmx.system.Device, instance=True)
        self.device.name = DEVICE
        self.device.product_type = "SIM-DSA-8 (stand-in)"
        self.device.serial_num = 0x1F2E3D4C

    # ---------------------------------------------------------------- installation
    def install(self, monkeypatch: pytest.MonkeyPatch) -> None:
        monkeypatch.setattr(nidaqmx, "Task", mock.create_autospec(TASK, side_effect=self._new_task))
        monkeypatch.setattr(nidaqmx.stream_readers, "AnalogMultiChannelReader",
                            mock.create_autospec(READER, side_effect=self._new_reader))
        monkeypatch.setattr(nidaqmx.stream_writers, "AnalogSingleChannelWriter",
                            mock.create_autospec(WRITER, side_effect=self._new_writer))

    def _violate(self, text: str) -> None:
        self.violations.append(text)

    # ---------------------------------------------------------------- tasks
    def _new_task(self, new_task_name: str = "", *, grpc_options: Any = None) -> Any:
        st = TaskState(new_task_name)
        task = mock.create_autospec(TASK, instance=True)
        st.task = task
        task.ai_channels = mock.create_autospec(AIChannelCollection, instance=True)
        task.ai_channels.add_ai_voltage_chan.side_effect = lambda *a, **k: self._add(
            st, "ai", _bound(AIChannelCollection.add_ai_voltage_chan, a, k))
        task.ao_channels = mock.create_autospec(AOChannelCollection, instance=True)
        task.ao_channels.add_ao_voltage_chan.side_effect = lambda *a, **k: self._add(
            st, "ao", _bound(AOChannelCollection.add_ao_voltage_chan, a, k))
        task.timing = mock.create_autospec(Timing, instance=True, spec_set=True)
        task.timing.cfg_samp_clk_timing.side_effect = lambda *a, **k: self._timing(
            st, _bound(Timing.cfg_samp_clk_timing, a, k))
        task.triggers = mock.create_autospec(Triggers, instance=True, spec_set=True)
        task.triggers.start_trigger = mock.create_autospec(StartTrigger, instance=True, spec_set=True)
        task.triggers.start_trigger.cfg_dig_edge_start_trig.side_effect = lambda *a, **k: self._trigger(
            st, _bound(StartTrigger.cfg_dig_edge_start_trig, a, k))
        task.in_stream = mock.create_autospec(InStream, instance=True, spec_set=True)
        task.out_stream = mock.create_autospec(OutStream, instance=True, spec_set=True)
        type(task.out_stream).space_avail = mock.PropertyMock(side_effect=lambda: self._space(st))
        type(task).devices = mock.PropertyMock(return_value=[self.device])
        task.start.side_effect = lambda: self._start(st)
        task.stop.side_effect = lambda: self._event(st, "stop")
        task.close.side_effect = lambda: self._close(st)
        task.write.side_effect = lambda *a, **k: self._write_on_demand(st, _bound(TASK.write, a, k))
        self.tasks.append(st)
        self._event(st, "create")
        return task

    def _event(self, st: TaskState, what: str) -> None:
        if st.closed:
            self._violate(f"{st.name}: {what} after close")
        self.log.append((st.name, what))
        if what == "stop":
            st.stopped = True
            if st.ao and st.started and self.out_end is None:
                self.out_end = self._played()

    def _add(self, st: TaskState, kind: str, args: dict[str, Any]) -> None:
        self._event(st, f"add {kind} {args['physical_channel']}")
        if st.started:
            self._violate(f"{st.name}: channel added after start")
        if kind == "ai" and args["physical_channel"] not in self.wiring:
            raise nidaqmx.errors.DaqError(f"Physical channel {args['physical_channel']} does not exist", -200170)
        getattr(st, kind).append(args)

    def _coerce(self, rate: float) -> float:
        return self.master_hz / max(1, round(self.master_hz / rate))

    def _timing(self, st: TaskState, args: dict[str, Any]) -> None:
        self._event(st, "timing")
        if args["sample_mode"] != c.AcquisitionType.CONTINUOUS:
            self._violate(f"{st.name}: sample mode {args['sample_mode']} is not continuous")
        st.timing = args
        ai_tasks = [t for t in self.tasks if t.ai and t.timing is not None]
        if args["source"].endswith("/ai/SampleClock") and ai_tasks:
            st.rate_hz = ai_tasks[0].rate_hz
        else:
            st.rate_hz = self._coerce(args["rate"])
        st.task.timing.samp_clk_rate = st.rate_hz

    def _trigger(self, st: TaskState, args: dict[str, Any]) -> None:
        self._event(st, "trigger")
        st.trigger = args["trigger_source"]

    def _ai_task(self) -> TaskState | None:
        return next((t for t in self.tasks if t.ai and not t.closed), None)

    def _start(self, st: TaskState) -> None:
        self._event(st, "start")
        if st.timing is None:
            self._violate(f"{st.name}: started before its sample clock was configured")
        if st.ao:
            if st.task.out_stream.regen_mode != c.RegenerationMode.DONT_ALLOW_REGENERATION:
                self._violate(f"{st.name}: output started with regeneration allowed")
            if st.trigger != f"/{DEVICE}/ai/StartTrigger":
                self._violate(f"{st.name}: output not triggered by the input start trigger ({st.trigger!r})")
            if st.written == 0:
                self._violate(f"{st.name}: output started with an empty buffer")
            ai = self._ai_task()
            if ai is not None and ai.started:
                self._violate(f"{st.name}: the triggered output was started after the input")
        if st.ai:
            if not isinstance(st.task.in_stream.input_buf_size, int):
                self._violate(f"{st.name}: input started without an explicit buffer size")
            st.t0 = time.monotonic()
        st.started = True

    def _close(self, st: TaskState) -> None:
        self.log.append((st.name, "close"))
        st.closed = True

    # ---------------------------------------------------------------- streams
    def _stream_task(self, stream: Any, attr: str) -> TaskState:
        for t in self.tasks:
            if getattr(t.task, attr) is stream:
                return t
        raise AssertionError(f"stream reader/writer made from an object that is not a task's {attr}")

    def _new_reader(self, task_in_stream: Any) -> Any:
        st = self._stream_task(task_in_stream, "in_stream")
        reader = mock.create_autospec(READER, instance=True)
        real = READER.read_many_sample
        reader.read_many_sample.side_effect = lambda *a, **k: self._read(st, _bound(real, a, k))
        return reader

    def _new_writer(self, task_out_stream: Any, auto_start: Any = None) -> Any:
        st = self._stream_task(task_out_stream, "out_stream")
        if auto_start is not False:
            self._violate(f"{st.name}: writer may auto-start the output (pass auto_start=False)")
        writer = mock.create_autospec(WRITER, instance=True)
        real = WRITER.write_many_sample
        writer.write_many_sample.side_effect = lambda *a, **k: self._write(st, _bound(real, a, k))
        return writer

    def _buffer(self, st: TaskState) -> int:
        size = st.task.out_stream.output_buf_size
        return size if isinstance(size, int) else int(st.timing["samps_per_chan"]) if st.timing else 0

    def _played(self) -> int:
        ai = self._ai_task()
        return ai.read_index if ai is not None and ai.started else 0

    def _space(self, st: TaskState) -> int:
        return self._buffer(st) - (st.written - min(st.written, self._played()))

    def _write(self, st: TaskState, args: dict[str, Any]) -> int:
        data, n = args["data"], 0
        self._event(st, "write")
        if not (isinstance(data, np.ndarray) and data.dtype == np.float64 and data.ndim == 1
                and data.flags.c_contiguous):
            self._violate(f"{st.name}: write of {type(data).__name__} {getattr(data, 'dtype', '')} "
                          f"{getattr(data, 'shape', '')}: needs a 1-D C-contiguous float64 array")
            raise nidaqmx.errors.DaqError("Invalid array", -200229)
        if st.underflow:
            raise nidaqmx.errors.DaqError("Output underflow: the output ran out of samples", -200290)
        n = data.size
        if n > self._space(st):
            self._violate(f"{st.name}: wrote {n} samples with only {self._space(st)} free")
        limit = st.ao[0]["max_val"]
        if np.max(np.abs(data), initial=0.0) > limit:
            self._violate(f"{st.name}: sample beyond the ±{limit} V output range")
        self.out = np.concatenate([self.out, data])
        st.written += n
        return n

    def _write_on_demand(self, st: TaskState, args: dict[str, Any]) -> int:
        self._event(st, "write on demand")
        if st.timing is not None or not st.ao:
            self._violate(f"{st.name}: on-demand write on a timed or non-output task")
        self.held_v[st.ao[0]["physical_channel"]] = float(args["data"])
        return 1

    def _read(self, st: TaskState, args: dict[str, Any]) -> int:
        data, n = args["data"], args["number_of_samples_per_channel"]
        self._event(st, "read")
        want = (len(st.ai), n)
        if not (isinstance(data, np.ndarray) and data.dtype == np.float64 and data.flags.c_contiguous
                and data.shape == want and n > 0):
            self._violate(f"{st.name}: read into {getattr(data, 'dtype', type(data))} "
                          f"{getattr(data, 'shape', '')}: needs C-contiguous float64 of shape {want}")
            raise nidaqmx.errors.DaqError("Invalid array", -200229)
        if not st.started:
            raise nidaqmx.errors.DaqError("Task not running", -200473)
        if self.fail_on_read is not None:
            code, self.fail_on_read = self.fail_on_read, None
            raise nidaqmx.errors.DaqError(f"Stand-in error {code}", code)
        i0 = st.read_index
        due = st.t0 + (i0 + n) / st.rate_hz / self.speed
        late = time.monotonic() - due
        if late > st.task.in_stream.input_buf_size / st.rate_hz / self.speed:
            raise nidaqmx.errors.DaqError("Samples no longer available", -200279)
        if late < 0:
            time.sleep(-late)
        self._play_output(i0 + n)
        played = self._output_seen(i0, n)
        for row, chan in enumerate(st.ai):
            gain, delay, offset = self.wiring[chan["physical_channel"]]
            data[row] = gain * played(delay) + offset + self.noise_v * self.rng.standard_normal(n)
        st.read_index += n
        if self.warn_on_read is not None:
            code, self.warn_on_read = self.warn_on_read, None
            warnings.warn(nidaqmx.errors.DaqWarning("Stand-in warning", code))
        return n

    def _output_seen(self, i0: int, n: int) -> Any:
        """Output voltage at input samples i0..i0+n-1 seen through a delay (held value after a stop)."""
        out, end = self.out, self.out.size if self.out_end is None else min(self.out_end, self.out.size)
        held = next(iter(self.held_v.values()), out[end - 1] if end else 0.0)

        def seen(delay: int) -> np.ndarray:
            idx = np.arange(i0, i0 + n) - delay
            inside = (idx >= 0) & (idx < end)
            return np.where(inside, out[np.clip(idx, 0, max(end - 1, 0))] if end else 0.0,
                            np.where(idx >= end, held, 0.0))
        return seen

    def _play_output(self, upto: int) -> None:
        for t in self.tasks:
            if t.ao and t.started and not t.stopped and t.timing is not None and t.written < upto:
                if not t.underflow:
                    self._violate(f"{t.name}: output ran dry at sample {t.written} (needed {upto})")
                t.underflow = True

    # ---------------------------------------------------------------- checks
    def assert_clean(self) -> None:
        assert self.violations == []
        open_tasks = [t.name for t in self.tasks if not t.closed]
        assert open_tasks == [], f"tasks left open: {open_tasks}"

    def index(self, task_name: str, what: str) -> int:
        return self.log.index((task_name, what))


# =============================================================================== self-tests
def _wired_task(card: StandInCard) -> Any:
    task = nidaqmx.Task("t")
    task.ai_channels.add_ai_voltage_chan("Dev1/ai0", min_val=-5.0, max_val=5.0)
    task.timing.cfg_samp_clk_timing(25000.0, sample_mode=c.AcquisitionType.CONTINUOUS, samps_per_chan=1000)
    return task


def test_standin_refuses_wrong_names_and_arguments(monkeypatch):
    """The autospecs fail on a misspelt method, keyword or property, as the real package would."""
    card = StandInCard({"Dev1/ai0": (1.0, 0, 0.0)})
    card.install(monkeypatch)
    task = _wired_task(card)
    with pytest.raises(AttributeError):
        task.strat()
    with pytest.raises(TypeError):
        task.ai_channels.add_ai_voltage_chan("Dev1/ai0", minval=-1.0)
    with pytest.raises(TypeError):
        task.timing.cfg_samp_clk_timing(1000.0, samplemode=c.AcquisitionType.CONTINUOUS)
    with pytest.raises(AttributeError):
        task.in_stream.input_buffer_size = 100
    with pytest.raises(TypeError):
        nidaqmx.Task("a", "b")


def test_standin_coerces_rate_and_checks_read_arrays(monkeypatch):
    """Rates snap to master/k (delta-sigma habit, common practice); reads need C-contiguous float64."""
    card = StandInCard({"Dev1/ai0": (1.0, 0, 0.25)}, noise_v=0.0, speed=50.0)
    card.install(monkeypatch)
    task = _wired_task(card)
    assert task.timing.samp_clk_rate == pytest.approx(25600.0)
    task.in_stream.input_buf_size = 10**7          # no overflow however late this test runs
    task.start()
    reader = nidaqmx.stream_readers.AnalogMultiChannelReader(task.in_stream)
    good = np.empty((1, 64))
    reader.read_many_sample(good, number_of_samples_per_channel=64)
    assert np.all(good == 0.25)
    with pytest.raises(nidaqmx.errors.DaqError):
        reader.read_many_sample(np.empty((64, 1)), number_of_samples_per_channel=64)
    with pytest.raises(nidaqmx.errors.DaqError):
        reader.read_many_sample(np.empty((1, 64), dtype=np.float32), number_of_samples_per_channel=64)
    with pytest.raises(nidaqmx.errors.DaqError):
        reader.read_many_sample(np.asfortranarray(np.empty((2, 64)))[:1], number_of_samples_per_channel=64)
    task.close()
    assert len(card.violations) == 3


def test_standin_flags_an_untriggered_output_started_late(monkeypatch):
    card = StandInCard({"Dev1/ai0": (1.0, 0, 0.0)}, speed=50.0)
    card.install(monkeypatch)
    ai = _wired_task(card)
    ai.in_stream.input_buf_size = 4096
    ao = nidaqmx.Task("o")
    ao.ao_channels.add_ao_voltage_chan("Dev1/ao0")
    ai.start()
    ao.start()
    for t in (ai, ao):
        t.close()
    joined = " | ".join(card.violations)
    assert "before its sample clock" in joined and "regeneration allowed" in joined
    assert "not triggered" in joined and "after the input" in joined and "empty buffer" in joined
