"""The SCPI generator's output load check through the real protocol path (pyvisa-py over TCP
to the loopback emulator): a load setting that differs from the rig's is refused before the
output is ever switched on; a matching one is confirmed and recorded; ``set_load = true``
sets it; an instrument that does not know ``OUTP:LOAD?`` is said to be unconfirmed and used.
"""

from __future__ import annotations

import logging
import math

import pytest

from app.errors import ConfigError
from drivers.errors import DriverError
from drivers.scpi_generator import (InstrumentError, OutputLoadMismatch, ScpiGenerator, load_from_answer,
                                    parse_load, voltage_factor)
from scpi_emulator import ScpiEmulator, delivered_v
from test_scpi_generator import make_rig

LOG = "drivers.scpi_generator"


def opened(emu: ScpiEmulator, **table) -> ScpiGenerator:
    return ScpiGenerator(make_rig(emu, **table))


def test_voltage_across_a_load_the_instrument_did_not_assume():
    """A 50 ohm source set for a 50 ohm load doubles into an open circuit, halves the other way
    (voltage divider with the source impedance; common practice)."""
    assert voltage_factor(50.0, math.inf) == pytest.approx(2.0)
    assert voltage_factor(math.inf, 50.0) == pytest.approx(0.5)
    assert voltage_factor(50.0, 50.0) == voltage_factor(math.inf, math.inf) == pytest.approx(1.0)
    assert delivered_v(1.0, 50.0, math.inf) == pytest.approx(2.0)     # the emulator agrees
    assert delivered_v(1.0, 600.0, 600.0) == pytest.approx(1.0)


def test_load_answers_and_rig_values_are_read():
    # SCPI-1999: 9.9E37 stands for infinity; INF is also answered by some instruments (from memory)
    for answer, ohm in (("+5.000000000E+01", 50.0), ("50", 50.0), ("INF", math.inf), ("+9.9E+37", math.inf),
                        ("9.90000000E+37", math.inf), ("-113,\"Undefined header\"", None), ("HIGH", None), ("", None)):
        assert load_from_answer(answer) == ohm, answer
    for value, ohm in ((50, 50.0), ("600 ohm", 600.0), ("50 Ω", 50.0), ("high-z", math.inf), ("High-Z", math.inf),
                       ("inf", math.inf), (math.inf, math.inf), ("-3 ohm", None), ("lots", None), (True, None)):
        assert parse_load(value) == ohm, value


def test_a_50_ohm_setting_into_a_high_z_input_is_refused_before_any_output():
    """The reproduction: a generator left at its 50 ohm default (after *RST) drives an amplifier's
    high-impedance input; the emulator shows what the amplifier would really get: twice."""
    with ScpiEmulator() as emu:
        assert emu.state.load_ohm == 50.0 and emu.connected_load_ohm == math.inf
        with pytest.raises(OutputLoadMismatch) as err:
            opened(emu, load="high-z")
        text = str(err.value)
        for part in (emu.resource, "'+5.000000000E+01' (50 ohm)", "drives high impedance (hardware.scpi.load)",
                     "2x the commanded voltage", '"OUTP:LOAD INF"', "hardware.scpi.set_load = true",
                     "*RST restores", "set hardware.scpi.load = 50"):
            assert part in text, part
        assert emu.commands("OUTP:LOAD?") and not emu.commands("OUTP ON") and emu.state.output is False
        assert emu.state.load_ohm == 50.0                    # never changed without being asked
        emu.state.peak_v, emu.state.output = 0.5, True       # what driving it would have done:
        assert emu.delivered_peak_v == pytest.approx(1.0)    # 1 Vpp shown, 1 V peak delivered


def test_a_high_z_setting_into_a_50_ohm_input_is_refused_too():
    with ScpiEmulator(default_load_ohm=math.inf, connected_load_ohm=50.0) as emu:
        with pytest.raises(OutputLoadMismatch, match=r"'\+9.9E\+37' \(high impedance\).*drives 50 ohm .*not set"
                                                     r".*0.5x.*\"OUTP:LOAD 50\".*hardware.scpi.load = \"high-z\""):
            opened(emu)                                      # no load key: 50 ohm assumed


@pytest.mark.parametrize("rig_load, instrument_ohm, inf_answer", [
    ("high-z", math.inf, "INF"),
    ("inf", math.inf, "+9.9E+37"),
    (50, 50.0, "INF"),
    ("600 ohm", 600.0, "INF"),
])
def test_a_matching_load_is_confirmed_before_the_output_goes_on(rig_load, instrument_ohm, inf_answer, caplog):
    with ScpiEmulator(default_load_ohm=instrument_ohm, inf_answer=inf_answer, connected_load_ohm=instrument_ohm) as emu:
        g = opened(emu, load=rig_load)
        try:
            ident = g.identity()
            assert ident["load_check"] == "confirmed"
            assert ident["load_instrument"] == (inf_answer if math.isinf(instrument_ohm) else f"{instrument_ohm:+.9E}")
            assert ident["load_rig"] == ("high impedance" if math.isinf(instrument_ohm) else f"{instrument_ohm:g} ohm")
            g.set_drive(200.0, 0.3)
            assert emu.received.index("OUTP:LOAD?") < emu.received.index("OUTP ON")
            assert emu.delivered_peak_v == pytest.approx(0.3)      # what was asked is what arrives
        finally:
            g.stop()
    assert not [r for r in caplog.records if r.name == LOG and r.levelno >= logging.WARNING]


def test_an_unstated_load_is_assumed_50_ohm_with_a_warning(caplog):
    with ScpiEmulator() as emu:
        g = opened(emu)
        g.stop()
    assert g.identity()["load_rig"] == "50 ohm (assumed)" and g.identity()["load_check"] == "confirmed"
    assert any("hardware.scpi.load is not set" in r.getMessage() for r in caplog.records if r.name == LOG)


def test_set_load_true_sets_the_instrument_then_confirms_it():
    with ScpiEmulator() as emu:
        g = opened(emu, load="high-z", set_load=True)
        try:
            assert emu.state.load_ohm == math.inf and g.identity()["load_check"] == "set and confirmed"
            assert emu.received.index("OUTP:LOAD INF") < emu.received.index("OUTP:LOAD?")
            assert emu.received.index("OUTP OFF") < emu.received.index("OUTP:LOAD INF")   # never with the output on
            g.set_drive(200.0, 0.4)
            assert emu.delivered_peak_v == pytest.approx(0.4)
        finally:
            g.stop()


def test_an_instrument_that_does_not_know_the_query_is_used_unconfirmed(caplog):
    with ScpiEmulator(load_supported=False) as emu:
        g = opened(emu, load="high-z", timeout="0.5 s")
        try:
            check = g.identity()["load_check"]
            assert check.startswith("not confirmed (no answer to OUTP:LOAD? within 0.5 s")
            assert '-113,"Undefined header"' in check                # SCPI-1999 error list
            assert any("could not be confirmed" in r.getMessage() and r.levelno == logging.WARNING
                       for r in caplog.records if r.name == LOG)
            g.set_drive(200.0, 0.25)                                 # the session is not confused after it
            s = g.actual_settings()
            assert (s.freq_hz, s.output_on) == (200.0, True) and s.amplitude_v == pytest.approx(0.25)
        finally:
            g.stop()
        assert emu.state.output is False


def test_an_instrument_that_answers_the_query_with_an_error_text_is_unconfirmed():
    with ScpiEmulator(inf_answer='-113,"Undefined header"', default_load_ohm=math.inf) as emu:
        g = opened(emu, load="high-z")
        assert g.identity()["load_check"] == "not confirmed (OUTP:LOAD? answered '-113,\"Undefined header\"')"
        g.stop()


def test_set_load_on_an_instrument_without_it_is_refused():
    with ScpiEmulator(load_supported=False) as emu:
        with pytest.raises(InstrumentError, match=r'-113,"Undefined header" after: OUTP OFF; OUTP:LOAD INF'):
            opened(emu, load="high-z", set_load=True, timeout="0.5 s")
        assert not emu.commands("OUTP ON")


def test_set_load_that_the_instrument_does_not_take_is_refused():
    with ScpiEmulator() as emu:
        with pytest.raises(DriverError, match=r"-222,\"Data out of range\" after: OUTP OFF; OUTP:LOAD 1e\+06"):
            opened(emu, load=1e6, set_load=True)


def test_load_keys_are_checked():
    with pytest.raises(ConfigError) as err:
        ScpiGenerator(make_rig(None, resource="TCPIP0::127.0.0.1::1::SOCKET", load="high-z", amplitude_unit="DBM",
                               set_load="yes"))
    text = str(err.value)
    assert "hardware.scpi.amplitude_unit: DBM needs a finite load" in text
    assert "hardware.scpi.set_load: expected true or false, got 'yes'" in text
    with pytest.raises(ConfigError, match=r'hardware.scpi.load: expected a resistance in ohms > 0 or "high-z"'):
        ScpiGenerator(make_rig(None, resource="TCPIP0::127.0.0.1::1::SOCKET", load="open"))
