"""The SCPI generator back-end through the real protocol path: pyvisa-py over TCP to the
loopback SCPI emulator. Standard command batch, amplitude units, ramps through the ceiling
guard, the error queue, timeouts and the stale-answer trap, dropped connections, halt.
"""

from __future__ import annotations

import math
import socket
import threading
import time

import pytest

from app.errors import ConfigError
from app.rig import read_toml, rig_from_dict
from drivers import protocols, safety
from drivers.errors import BackendTimeout, CeilingExceeded, DriverError
from drivers.scpi_generator import (InstrumentConnectionLost, InstrumentError, ScpiGenerator, peak_to_unit,
                                    resource_manager, unit_to_peak)
from pathlib import Path

from scpi_emulator import ScpiEmulator

DEMO = Path(__file__).resolve().parents[2] / "configs" / "demo-rig.toml"


def make_rig(emu: ScpiEmulator | None, ramp_time: str = "0.3 s", **table):
    data = read_toml(DEMO)
    data["drive"]["ramp_time"] = ramp_time
    scpi = {"timeout": "2 s", "ramp_step": "20 ms", **table}
    if emu is not None:
        scpi.setdefault("resource", emu.resource)
    data["hardware"] = {"scpi": scpi}
    return rig_from_dict(data, str(DEMO))


@pytest.fixture
def emu():
    with ScpiEmulator() as e:
        yield e


@pytest.fixture
def gen(emu):
    g = ScpiGenerator(make_rig(emu))
    yield g
    try:
        g.stop()
    except DriverError:
        pass


def volts_sent(emu):
    return [float(m.split()[1]) for m in emu.commands("SOUR:VOLT ")]


def test_opening_sends_the_standard_batch(emu, gen):
    assert emu.received[:9] == ["*RST", "*CLS", "*IDN?", "SOUR:FUNC SIN", "SOUR:VOLT:UNIT VPP", "SOUR:VOLT:OFFS 0",
                                "OUTP OFF", "SYST:ERR?", "*OPC?"]
    ident = gen.identity()
    assert (ident["maker"], ident["model"], ident["serial"], ident["firmware"]) == (
        "flamebode", "SCPI test generator", "EMU-0001", "1.0")
    assert ident["tcp_nodelay"] == "on"
    assert gen._socket().getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) != 0
    for proto in (protocols.SineDrive, protocols.Identified, protocols.Stoppable, protocols.EmergencyHalt):
        assert isinstance(gen, proto)
    assert not isinstance(gen, protocols.Acquirer)
    assert any(o is gen for o in safety.registered())      # zeroed at exit
    gen.stop()
    assert not any(o is gen for o in safety.registered())


@pytest.mark.parametrize("unit, expected", [
    ("VPP", 1.0),                                    # Vpp = 2 Vp for a sine (common practice)
    ("VRMS", 0.5 / math.sqrt(2.0)),                  # Vrms = Vp / √2 for a sine
    ("DBM", 10 * math.log10(0.125 / 50.0 / 1e-3)),   # dBm = 10 log10(P / 1 mW), P = Vrms²/50 Ω: 3.979 dBm
])
def test_amplitude_units_are_explicit_and_converted(emu, unit, expected):
    g = ScpiGenerator(make_rig(emu, amplitude_unit=unit))
    g.set_drive(200.0, 0.5)
    assert f"SOUR:VOLT:UNIT {unit}" in emu.received
    assert volts_sent(emu)[-1] == pytest.approx(expected, rel=1e-9)
    assert emu.state.peak_v == pytest.approx(0.5, rel=1e-9)       # the emulator's own conversion back
    settings = g.actual_settings()
    assert (settings.freq_hz, settings.output_on, settings.unit) == (200.0, True, unit)
    assert settings.amplitude_v == pytest.approx(0.5, rel=1e-8)
    g.stop()
    assert emu.state.output is False


def test_unit_conversions_round_trip():
    for unit in ("VPP", "VRMS", "DBM"):
        for peak in (0.001, 0.3, 2.0):
            assert unit_to_peak(peak_to_unit(peak, unit, 600.0), unit, 600.0) == pytest.approx(peak, rel=1e-12)
    assert peak_to_unit(1.0, "DBM", 50.0) == pytest.approx(10.0, abs=0.01)   # 1 V peak into 50 Ω ≈ +10 dBm
    with pytest.raises(DriverError):
        peak_to_unit(0.0, "DBM")


def test_amplitude_changes_are_ramped_in_steps_and_frequency_changes_at_zero(emu, gen):
    ceiling, ramp_s, step_s = 2.0, 0.3, 0.02
    gen.set_drive(200.0, 1.0)
    up = [v / 2 for v in volts_sent(emu)]                           # peak volts
    assert up[-1] == pytest.approx(1.0) and len(up) >= 1.0 / (ceiling / ramp_s * step_s) - 1e-9
    assert all(b - a <= ceiling / ramp_s * step_s + 1e-9 and b >= a for a, b in zip([0.0] + up, up))
    assert emu.received.index("OUTP ON") > emu.received.index(emu.commands("SOUR:VOLT ")[0])  # amplitude first
    assert gen.drive_status().amplitude_v == 1.0 and not gen.drive_status().ramping
    n0 = len(emu.received)
    gen.set_drive(300.0, 0.5)
    tail = emu.received[n0:]
    off, freq = tail.index("OUTP OFF"), tail.index("SOUR:FREQ 300")
    assert off < freq < tail.index("OUTP ON")                       # down to zero, switch, up again
    assert tail[-1] == "SYST:ERR?"                                  # errors drained after the batch
    assert emu.state.freq_hz == 300.0 and emu.state.peak_v == pytest.approx(0.5)
    with pytest.raises(CeilingExceeded):
        gen.set_drive(300.0, 2.1)
    assert emu.state.peak_v == pytest.approx(0.5) and gen.drive_status().amplitude_v == 0.5


def test_instrument_errors_carry_the_instruments_text(emu):
    emu.max_peak_v = 0.4                       # this instrument cannot give 1 V peak
    g = ScpiGenerator(make_rig(emu))
    with pytest.raises(InstrumentError, match=r'-222,"Data out of range"'):
        g.set_drive(200.0, 1.0)
    assert emu.state.output is False and g.drive_status().amplitude_v == 0.0   # switched off after the error
    g.stop()


def test_emulator_error_queue_and_stale_answer_trap_are_real(emu):
    """The emulator's faults through plain pyvisa: an undefined header queues -113 (SCPI-1999
    error list), and without a flush a late answer is read as the answer to the next query."""
    import pyvisa

    inst = resource_manager("@py").open_resource(emu.resource, read_termination="\n", write_termination="\n",
                                                 timeout=2000)
    try:
        inst.write("SOUR:BOGUS 1")
        assert inst.query("SYST:ERR?") == '-113,"Undefined header"'
        assert inst.query("SYST:ERR?") == '0,"No error"'
        emu.delay_next_reply(0.6)
        inst.timeout = 200
        with pytest.raises(pyvisa.errors.VisaIOError):
            inst.query("*IDN?")
        inst.timeout = 5000
        assert inst.query("OUTP?") == emu.idn          # the stale answer of the timed-out query
    finally:
        inst.close()


def test_timeout_is_named_and_the_stale_answer_never_read(emu):
    g = ScpiGenerator(make_rig(emu, timeout="0.3 s"))
    g.set_drive(200.0, 0.4)
    emu.delay_next_reply(1.5)
    t0 = time.monotonic()
    with pytest.raises(BackendTimeout, match="no answer to 'SOUR:FREQ\\?' within 0.3 s"):
        g.actual_settings()
    settings = g.actual_settings()             # a new session: right answers, no wait for the late one
    assert time.monotonic() - t0 < 1.4
    assert (settings.freq_hz, settings.unit, settings.output_on) == (200.0, "VPP", True)
    assert settings.amplitude_v == pytest.approx(0.4)
    g.stop()
    assert emu.state.output is False


def test_dropped_connection_is_a_named_fault_and_stop_still_switches_off(emu, gen):
    gen.set_drive(200.0, 0.4)
    emu.drop_connections()
    with pytest.raises(InstrumentConnectionLost, match="connection was lost"):
        gen.actual_settings()
    assert emu.state.output is True
    with pytest.raises(InstrumentConnectionLost):
        gen.stop()                              # reports the loss, but reconnected to switch off
    assert emu.state.output is False


def test_connection_dropped_while_waiting_for_an_answer(emu):
    g = ScpiGenerator(make_rig(emu, timeout="0.5 s"))
    emu.drop_on = "SOUR:FREQ?"
    with pytest.raises(InstrumentConnectionLost, match="waiting for the answer"):
        g.actual_settings()
    emu.drop_on = None
    g.stop()


def test_instrument_gone_for_good(emu):
    g = ScpiGenerator(make_rig(emu, timeout="0.5 s"))
    g.set_drive(200.0, 0.2)
    emu.close()
    with pytest.raises(InstrumentConnectionLost):
        g.stop()
    with pytest.raises(InstrumentConnectionLost, match="cannot open"):
        ScpiGenerator(make_rig(emu, timeout="0.5 s"))


def test_halt_from_another_thread_cuts_a_ramp_short(emu):
    g = ScpiGenerator(make_rig(emu, ramp_time="3 s", ramp_step="50 ms"))    # a full ramp: 60 steps, 3 s
    worker = threading.Thread(target=g.set_drive, args=(200.0, 2.0))
    worker.start()
    deadline = time.monotonic() + 10.0
    while "OUTP ON" not in emu.received and time.monotonic() < deadline:
        time.sleep(0.005)
    g.halt()
    worker.join(timeout=5.0)
    assert not worker.is_alive()
    assert emu.state.output is False and g.drive_status().amplitude_v == 0.0
    assert len(volts_sent(emu)) < 60
    with pytest.raises(DriverError, match="halted"):
        g.set_drive(200.0, 0.1)
    g.stop()


def test_configuration_errors_name_the_key():
    with pytest.raises(ConfigError) as err:
        ScpiGenerator(make_rig(None, amplitude_unit="dBV", load="-3 ohm", ramp_stp="1 s"))
    text = str(err.value)
    for key in ("hardware.scpi.resource", "hardware.scpi.amplitude_unit", "hardware.scpi.load",
                "hardware.scpi.ramp_stp: unknown key"):
        assert key in text


REAL = __import__("os").environ.get("FLAMEBODE_SCPI_RESOURCE", "")


@pytest.mark.hardware
@pytest.mark.skipif(not REAL, reason="needs a real SCPI generator: set FLAMEBODE_SCPI_RESOURCE to its VISA address")
def test_real_generator_round_trip():
    """Bench run: a small drive and its read-back on a real instrument, output off at the end."""
    g = ScpiGenerator(make_rig(None, resource=REAL, timeout="5 s"))
    try:
        g.set_drive(200.0, 0.05)
        s = g.actual_settings()
        assert s.freq_hz == pytest.approx(200.0, rel=1e-6) and s.output_on
        assert s.amplitude_v == pytest.approx(0.05, rel=0.01)
    finally:
        g.stop()
