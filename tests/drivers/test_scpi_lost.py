"""Truthful drive state when the SCPI generator is lost (pyvisa-py over TCP to the loopback
emulator): ``drive_status()`` reports zero only after ``OUTP?`` confirmed ``OUTP OFF``;
otherwise it reports the last amplitude that may be on the output, and
``output_confirmed_off`` says so, whether the instrument was killed mid-ramp, died as the
off command arrived, or froze. ``halt()`` stays short and safe from a signal handler.
"""

from __future__ import annotations

import signal
import threading
import time

import pytest

from drivers.errors import DriverError
from drivers.scpi_generator import ScpiGenerator
from drivers.scpi_recorder import Composite
from scpi_emulator import ScpiEmulator
from test_scpi_generator import make_rig, volts_sent

SLOW = {"ramp_time": "3 s", "ramp_step": "50 ms"}      # a full ramp: 60 steps, 3 s


@pytest.fixture
def emu():
    with ScpiEmulator() as e:
        yield e


def ramp_in_background(g: ScpiGenerator, emu: ScpiEmulator, steps: int = 10):
    """Start a ramp to 2 V on another thread; return (thread, errors) once ``steps`` are out."""
    errors: list[DriverError] = []

    def run() -> None:
        try:
            g.set_drive(200.0, 2.0)
        except DriverError as exc:
            errors.append(exc)

    worker = threading.Thread(target=run)
    worker.start()
    deadline = time.monotonic() + 10.0
    while len(volts_sent(emu)) < steps and time.monotonic() < deadline:
        time.sleep(0.002)
    return worker, errors


def stop_quietly(g: ScpiGenerator) -> DriverError | None:
    try:
        g.stop()
    except DriverError as exc:
        return exc
    return None


def assert_not_confirmed_at(g: ScpiGenerator, emu: ScpiEmulator) -> None:
    """Not zero: the last amplitude put out (within one ramp step of what the instrument holds)."""
    status = g.drive_status()
    assert g.output_confirmed_off is False
    assert emu.state.output is True                                  # the emulator really is still on
    assert status.amplitude_v > 0.0
    assert status.amplitude_v == pytest.approx(emu.state.peak_v, abs=2.0 / 3.0 * 0.05 + 1e-9)


def test_opening_ramping_and_ramping_down_confirm_the_output_state(emu):
    g = ScpiGenerator(make_rig(emu))
    assert g.output_confirmed_off is True and g.drive_status().amplitude_v == 0.0
    assert emu.received.index("OUTP?") > emu.received.index("OUTP OFF")     # confirmed on opening
    g.set_drive(200.0, 0.5)
    assert g.output_confirmed_off is False and g.drive_status().amplitude_v == 0.5
    g.set_drive(200.0, 0.0)
    assert emu.received[-3:] == ["OUTP OFF", "OUTP?", "SYST:ERR?"]          # off, confirmed, errors drained
    assert g.output_confirmed_off is True and g.drive_status().amplitude_v == 0.0
    g.set_drive(200.0, 0.3)
    g.halt()                                                               # a live instrument: confirmed at once
    assert g.output_confirmed_off is True and emu.state.output is False and g.drive_status().amplitude_v == 0.0
    g.stop()
    assert g.output_confirmed_off is True


def test_instrument_killed_mid_ramp(emu):
    """The emulator is closed (sockets shut, listener gone) in the middle of a ramp, then halt."""
    g = ScpiGenerator(make_rig(emu, timeout="0.5 s", **SLOW))
    worker, errors = ramp_in_background(g, emu)
    emu.close()
    g.halt()
    worker.join(timeout=5.0)
    assert not worker.is_alive() and errors and "connection was lost" in str(errors[0])
    assert_not_confirmed_at(g, emu)
    assert stop_quietly(g) is not None                # stop cannot reach it either, and says so
    assert_not_confirmed_at(g, emu)


def test_instrument_dies_as_the_off_command_arrives(emu):
    """The reproduction: OUTP OFF was written but never carried out; drive_status() used to say 0 V."""
    g = ScpiGenerator(make_rig(emu, timeout="0.5 s", **SLOW))
    worker, _ = ramp_in_background(g, emu)
    emu.drop_on = "OUTP OFF"                          # closes the connection instead of switching off
    g.halt()
    worker.join(timeout=5.0)
    assert not worker.is_alive() and emu.commands("OUTP OFF")
    assert_not_confirmed_at(g, emu)
    emu.close()
    assert stop_quietly(g) is not None
    assert_not_confirmed_at(g, emu)


def test_instrument_freezes_mid_ramp(emu):
    """A hung instrument: writes are accepted, nothing is carried out or answered."""
    g = ScpiGenerator(make_rig(emu, timeout="0.4 s", **SLOW))
    worker, errors = ramp_in_background(g, emu)
    emu.freeze()
    g.halt()
    worker.join(timeout=5.0)
    assert not worker.is_alive() and errors and "no answer to 'OUTP?'" in str(errors[0])
    assert_not_confirmed_at(g, emu)
    assert stop_quietly(g) is not None
    assert_not_confirmed_at(g, emu)


def test_halt_on_a_frozen_instrument_returns_quickly_and_does_not_claim_zero(emu):
    g = ScpiGenerator(make_rig(emu, timeout="3 s"))
    g.set_drive(200.0, 0.4)
    emu.freeze()
    t0 = time.monotonic()
    g.halt()                                          # waits a bounded moment for OUTP?, never the 3 s timeout
    assert time.monotonic() - t0 < 1.0
    assert_not_confirmed_at(g, emu)
    assert g.drive_status().amplitude_v == 0.4
    with pytest.raises(DriverError, match="halted"):
        g.set_drive(200.0, 0.1)
    emu.close()
    assert stop_quietly(g) is not None
    assert_not_confirmed_at(g, emu)


def test_halt_from_a_signal_handler_while_another_thread_ramps(emu):
    """halt() in a real signal handler on the main thread never waits for the ramping thread."""
    g = ScpiGenerator(make_rig(emu, **SLOW))
    worker, errors = ramp_in_background(g, emu, steps=3)
    took: list[float] = []

    def handler(signum, frame) -> None:
        t0 = time.monotonic()
        g.halt()
        took.append(time.monotonic() - t0)

    previous = signal.signal(signal.SIGUSR1, handler)
    try:
        signal.raise_signal(signal.SIGUSR1)
    finally:
        signal.signal(signal.SIGUSR1, previous)
    worker.join(timeout=5.0)
    assert took and took[0] < 0.2 and not errors          # not a ramp step (3 s), not a timeout (2 s)
    assert g.output_confirmed_off is True and emu.state.output is False and g.drive_status().amplitude_v == 0.0
    g.stop()


def test_composite_passes_the_question_on(emu):
    g = ScpiGenerator(make_rig(emu))
    dev = Composite(g, acquirer=object())
    assert dev.output_confirmed_off is True
    g.set_drive(200.0, 0.2)
    assert dev.output_confirmed_off is False
    g.stop()
    assert dev.output_confirmed_off is True


def test_halt_on_a_session_closed_underneath_never_raises(emu, caplog):
    """At exit the VISA session may already be closed (pyvisa raises InvalidSession, not a
    VISA I/O error): halt() logs it and the output counts as unconfirmed (from memory)."""
    g = ScpiGenerator(make_rig(emu))
    g.set_drive(200.0, 0.3)
    g._inst.close()                                   # the session goes away behind the back-end's back
    g.halt()
    assert_not_confirmed_at(g, emu)
    assert any("output off on halt failed" in r.getMessage() for r in caplog.records)
    assert stop_quietly(g) is None                    # stop reconnects and switches off
    assert g.output_confirmed_off is True and emu.state.output is False
