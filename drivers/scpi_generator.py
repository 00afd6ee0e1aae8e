"""SCPI function generators through pyvisa: a sine drive set by standard commands only.

:class:`ScpiGenerator` implements SineDrive, Identified, Stoppable and EmergencyHalt with the
IEEE 488.2 common commands and the standard SCPI source subsystem, no vendor dialect:

* on opening: ``*RST``, ``*CLS``, ``*IDN?`` (kept), ``SOUR:FUNC SIN``, ``SOUR:VOLT:UNIT``
  (VPP, VRMS or DBM, converted from our peak volts: Vpp = 2 Vp, Vrms = Vp/√2, dBm into the
  configured load), ``SOUR:VOLT:OFFS 0``, ``OUTP OFF``; then ``SYST:ERR?`` is drained until
  it answers ``0,...`` and ``*OPC?`` is asked with a generous timeout;
* before any ``OUTP ON``: the output load setting is read back (``OUTP:LOAD?``: ohms, or
  ``INF``/9.9E37 for high impedance) and compared with the rig's ``load``; a mismatch (a 50 Ω
  setting into a high-Z amplifier input doubles the voltage) is refused with
  :class:`OutputLoadMismatch`; an instrument that does not know the query is logged and
  recorded in :meth:`ScpiGenerator.identity` as not confirmed; ``set_load = true`` sends
  ``OUTP:LOAD`` first (the setting is never changed otherwise);
* a drive request goes through :class:`drivers.guard.CeilingGuard` and is carried out as a
  ramp of discrete ``SOUR:VOLT`` steps from ``CeilingGuard.amplitude_schedule``; amplitudes
  at zero (or below ``min_amplitude``) switch the output off, a frequency change happens at
  zero; the error queue is drained after every batch and an entry becomes
  :class:`InstrumentError` carrying the instrument's own text;
* timeouts become :class:`drivers.errors.BackendTimeout`; after one the session is reopened,
  so a late answer can never be read as the answer to the next query (the stale-answer
  trap); a closed connection becomes :class:`InstrumentConnectionLost`;
* raw-socket sessions get explicit termination and ``TCP_NODELAY`` on the pyvisa-py
  session's socket (pyvisa-py leaves Nagle's algorithm on);
* output off on ``stop()`` (ramped first), ``halt()`` (at once, waiting at most
  ``HALT_WAIT_S`` for ``OUTP?`` and never reconnecting) and at exit
  (:func:`drivers.safety.register`);
* the output counts as off only once ``OUTP?`` has answered off after ``OUTP OFF``
  (:attr:`ScpiGenerator.output_confirmed_off`); until then ``drive_status()`` reports the last
  amplitude that may be on the output, also after a halt or a lost connection, so nothing
  above can announce "ramped to zero" for an instrument that never confirmed it.

:meth:`ScpiGenerator.actual_settings` reads back what the instrument really outputs
(``SOUR:FREQ?``, ``SOUR:VOLT?``, ``OUTP?``). A generator only drives; pair it with a recorder
(``drivers.scpi_recorder``) to run a sweep. Configuration: the rig file's ``[hardware.scpi]``
table (docs/hardware.md).

Imports: standard library, numpy (through the guard), ``app.rig``/``app.units``/
``app.errors``, ``drivers.errors``/``guard``/``protocols``/``safety``, and pyvisa (lazily).
"""

from __future__ import annotations

import logging
import math
import os
import select
import socket
import threading
from dataclasses import dataclass
from importlib import metadata
from typing import Any

from app.errors import ConfigError
from app.rig import Rig
from app.units import parse_quantity
from drivers import safety
from drivers.errors import BackendTimeout, DriveHalted, DriverError
from drivers.guard import CeilingGuard
from drivers.protocols import Availability, DriveStatus

log = logging.getLogger(__name__)

UNITS = ("VPP", "VRMS", "DBM")
SOURCE_OHM = 50.0          # a bench generator's usual source impedance (common practice)
SCPI_INF = 9.9e37          # SCPI-1999 stands for infinity with this number
LOAD_QUERY_WAIT_S = 1.0    # an idle instrument that knows OUTP:LOAD? answers within milliseconds
HALT_WAIT_S = 0.2          # halt() waits at most this long for OUTP? to confirm the output off
# The guard's notional clock for an instrument set by commands: only its Nyquist limit and
# the quantisation of ramp steps depend on it, neither matters at 1 MHz.
GUARD_RATE_HZ = 1e6
_rm_lock = threading.Lock()
_resource_managers: dict[str, Any] = {}


class InstrumentError(DriverError):
    """The instrument's error queue held an entry; the message carries its own text."""


class InstrumentConnectionLost(DriverError):
    """The connection to the instrument was closed or could not be made again."""


class OutputLoadMismatch(DriverError):
    """The instrument's output load setting (``OUTP:LOAD?``) is not the load the rig file says it drives."""


# =========================================================================== units
def peak_to_unit(peak_v: float, unit: str, load_ohm: float = 50.0) -> float:
    """A sine's peak volts in the instrument's amplitude unit (VPP, VRMS or DBM into ``load_ohm``)."""
    if unit == "VPP":
        return 2.0 * peak_v
    if unit == "VRMS":
        return peak_v / math.sqrt(2.0)
    if unit == "DBM":
        if peak_v <= 0.0:
            raise DriverError("SCPI generator: 0 V cannot be expressed in dBm (the output is switched off instead)")
        return 10.0 * math.log10(peak_v * peak_v / 2.0 / load_ohm / 1e-3)
    raise DriverError(f"SCPI generator: unknown amplitude unit {unit!r}; use one of {', '.join(UNITS)}")


def unit_to_peak(value: float, unit: str, load_ohm: float = 50.0) -> float:
    """Inverse of :func:`peak_to_unit`."""
    if unit == "VPP":
        return value / 2.0
    if unit == "VRMS":
        return value * math.sqrt(2.0)
    if unit == "DBM":
        return math.sqrt(2.0 * load_ohm * 1e-3 * 10.0 ** (value / 10.0))
    raise DriverError(f"SCPI generator: unknown amplitude unit {unit!r}; use one of {', '.join(UNITS)}")


# =========================================================================== output load
def load_from_answer(answer: str) -> float | None:
    """An ``OUTP:LOAD?`` answer in ohms (``math.inf`` for INF or SCPI's 9.9E37); None if unreadable."""
    try:
        ohm = float(answer.strip().split(",")[0])
    except ValueError:
        return None
    if math.isnan(ohm) or ohm <= 0.0:
        return None
    return math.inf if ohm >= SCPI_INF * (1.0 - 1e-6) else ohm


def describe_load(ohm: float) -> str:
    return "high impedance" if math.isinf(ohm) else f"{ohm:g} ohm"


def load_argument(ohm: float) -> str:
    """The ``OUTP:LOAD`` argument for a load (``INF`` for high impedance)."""
    return "INF" if math.isinf(ohm) else f"{ohm:g}"


def voltage_factor(setting_ohm: float, real_ohm: float, source_ohm: float = SOURCE_OHM) -> float:
    """Volts the real load gets per volt the instrument shows for its load setting.

    The instrument scales its open-circuit voltage so that ``setting_ohm`` would see the
    commanded value through ``source_ohm`` (a voltage divider; common practice): 2.0 for a
    50 Ω setting into a high-impedance input, 0.5 the other way round."""
    emf = 1.0 if math.isinf(setting_ohm) else (setting_ohm + source_ohm) / setting_ohm
    return emf if math.isinf(real_ohm) else emf * real_ohm / (real_ohm + source_ohm)


def same_load(a_ohm: float, b_ohm: float) -> bool:
    """Equal within 1 % (instruments round the setting), high impedance only equal to itself."""
    if math.isinf(a_ohm) or math.isinf(b_ohm):
        return math.isinf(a_ohm) and math.isinf(b_ohm)
    return math.isclose(a_ohm, b_ohm, rel_tol=0.01)


# =========================================================================== configuration
@dataclass(frozen=True)
class ScpiConfig:
    """The ``[hardware.scpi]`` table. SI units; ``min_amplitude_v`` is peak volts."""

    resource: str
    visa_library: str = "@py"
    timeout_s: float = 5.0
    opc_timeout_s: float = 30.0
    read_termination: str = "\n"
    write_termination: str = "\n"
    amplitude_unit: str = "VPP"
    load_ohm: float = 50.0             # what the output really drives; math.inf: high impedance
    load_given: bool = False           # False: the rig file did not say (50 Ω assumed)
    set_load: bool = False             # True: send OUTP:LOAD on opening instead of refusing a mismatch
    step_s: float = 0.05
    min_amplitude_v: float = 0.0
    reset: bool = True

    KEYS = ("resource", "visa_library", "timeout", "opc_timeout", "read_termination", "write_termination",
            "amplitude_unit", "load", "set_load", "ramp_step", "min_amplitude", "reset")

    @classmethod
    def from_rig(cls, rig: Rig, **overrides: Any) -> "ScpiConfig":
        table = {**rig.hardware.get("scpi", {}), **overrides}
        problems = [f"hardware.scpi.{k}: unknown key (known: {', '.join(cls.KEYS)})" for k in table
                    if k not in cls.KEYS]
        resource = table.get("resource")
        if not isinstance(resource, str) or not resource.strip():
            problems.append("hardware.scpi.resource: the instrument's VISA address is missing "
                            "(e.g. \"TCPIP0::192.168.0.20::5025::SOCKET\")")
        unit = str(table.get("amplitude_unit", "VPP")).upper()
        if unit not in UNITS:
            problems.append(f"hardware.scpi.amplitude_unit: {unit!r} is not one of {', '.join(UNITS)}")
        load_ohm = parse_load(table.get("load", 50.0))
        if load_ohm is None:
            problems.append(f"hardware.scpi.load: expected a resistance in ohms > 0 or \"high-z\" (also \"inf\"), "
                            f"got {table.get('load')!r}")
            load_ohm = 50.0
        if unit == "DBM" and math.isinf(load_ohm):
            problems.append("hardware.scpi.amplitude_unit: DBM needs a finite load; with load = \"high-z\" use "
                            "VPP or VRMS")
        for key in ("set_load", "reset"):
            if key in table and not isinstance(table[key], bool):
                problems.append(f"hardware.scpi.{key}: expected true or false, got {table[key]!r}")
        q = {name: _quantity(table, key, kind, default, problems) for name, key, kind, default in (
            ("timeout_s", "timeout", "time", 5.0), ("opc_timeout_s", "opc_timeout", "time", 30.0),
            ("step_s", "ramp_step", "time", 0.05), ("min_amplitude_v", "min_amplitude", "voltage", 0.0))}
        if q["step_s"] <= 0 or q["timeout_s"] <= 0:
            problems.append("hardware.scpi.timeout and ramp_step must be > 0")
        if problems:
            raise ConfigError(rig.source_path or "<rig>", problems)
        return cls(resource=str(resource).strip(), visa_library=str(table.get("visa_library", "@py")),
                   read_termination=str(table.get("read_termination", "\n")),
                   write_termination=str(table.get("write_termination", "\n")),
                   amplitude_unit=unit, load_ohm=load_ohm, load_given="load" in table,
                   set_load=table.get("set_load", False) is True, reset=table.get("reset", True) is not False, **q)


def parse_load(value: Any) -> float | None:
    """A rig-file load: ohms (``50``, ``"600 ohm"``, ``"50 Ω"``) or high impedance (``"high-z"``,
    ``"highz"``, ``"inf"``) as ``math.inf``; None when it is neither."""
    if isinstance(value, bool):
        return None
    if isinstance(value, str):
        text = value.strip().lower()
        if text in ("high-z", "highz", "high z", "hi-z", "inf", "infinity", "infinite"):
            return math.inf
        value = text.removesuffix("ohms").removesuffix("ohm").removesuffix("ω").strip()   # "Ω".lower()
    try:
        ohm = float(value)
    except (TypeError, ValueError):
        return None
    return ohm if ohm > 0 and not math.isnan(ohm) else None


def _quantity(table: dict, key: str, kind: str, default: float, problems: list[str]) -> float:
    try:
        return float(parse_quantity(table[key], kind)) if key in table else float(default)
    except ValueError as exc:
        problems.append(f"hardware.scpi.{key}: {exc}")
        return float(default)


def resource_manager(visa_library: str = "@py") -> Any:
    """One pyvisa ResourceManager per VISA library per process."""
    import pyvisa

    with _rm_lock:
        if visa_library not in _resource_managers:
            _resource_managers[visa_library] = pyvisa.ResourceManager(visa_library)
        return _resource_managers[visa_library]


@dataclass(frozen=True)
class GeneratorSettings:
    """What the instrument reports it outputs (read back, converted to peak volts)."""

    freq_hz: float
    amplitude_v: float
    output_on: bool
    unit: str


# =========================================================================== the back-end
class ScpiGenerator:
    """SCPI function generator (pyvisa). Standard SCPI sine drive; the output never exceeds the ceiling."""

    title = "SCPI function generator (pyvisa)"

    def __init__(self, rig: Rig, **options: Any) -> None:
        self.rig = rig
        self.config = ScpiConfig.from_rig(rig, **options)
        self.guard = CeilingGuard(rig.drive.ceiling, GUARD_RATE_HZ, rig.drive.ramp_time)
        self._io = threading.Lock()            # one owner of the session at a time
        self._halt_event = threading.Event()
        self._inst: Any = None
        self._idn = ""
        self._nodelay = "not applicable"
        self._load_answer = ""                 # the instrument's OUTP:LOAD? answer, verbatim
        self._load_check = "not checked"
        self._sent_freq_hz = 0.0
        self._sent_amp_v = 0.0
        self._output_on = False
        self._off_confirmed = False            # True only while OUTP? has answered off since the last OUTP ON
        self._last_on_v = 0.0                  # the last amplitude that may be on the output
        self._ramping = False
        self._closed = False
        with self._io:
            self._open()
            try:
                self._initialise()
            except BaseException:
                self._close_session()
                raise
        safety.register(self)

    # ------------------------------------------------------------------ availability
    @classmethod
    def probe(cls) -> Availability:
        """pyvisa and a VISA library (pyvisa-py) importable; the address comes from the rig file."""
        try:
            import pyvisa  # noqa: F401
        except ImportError as exc:
            return Availability(False, f"pyvisa not installed ({exc}); pip install pyvisa pyvisa-py")
        try:
            import pyvisa_py  # noqa: F401
            backend = f"pyvisa-py {metadata.version('pyvisa-py')}"
        except ImportError:
            backend = "no pyvisa-py; needs a vendor VISA library"
        return Availability(True, f"pyvisa {metadata.version('pyvisa')} ({backend}); instrument address "
                            f"from [hardware.scpi].resource", {"pyvisa": metadata.version("pyvisa")})

    # ------------------------------------------------------------------ session
    def _open(self) -> None:
        import pyvisa

        cfg = self.config
        try:
            self._inst = resource_manager(cfg.visa_library).open_resource(
                cfg.resource, read_termination=cfg.read_termination, write_termination=cfg.write_termination,
                timeout=round(cfg.timeout_s * 1000), open_timeout=round(cfg.timeout_s * 1000))
        except pyvisa.errors.VisaIOError as exc:
            raise InstrumentConnectionLost(f"SCPI generator {cfg.resource}: cannot open: {exc.description}") from None
        except Exception as exc:   # pyvisa-py raises a plain Exception when the TCP connect fails
            raise InstrumentConnectionLost(f"SCPI generator {cfg.resource}: cannot open: {exc}") from None
        self._check_connected()
        self._nodelay = self._set_nodelay()

    def _check_connected(self) -> None:
        """pyvisa-py reports success for a refused TCP connect; ask the socket itself."""
        sock = self._socket()
        if sock is None:
            return
        code = sock.getsockopt(socket.SOL_SOCKET, socket.SO_ERROR)
        try:
            sock.getpeername()
        except OSError as exc:
            code = code or exc.errno or 0
        if code:
            self._close_session()
            raise InstrumentConnectionLost(f"SCPI generator {self.config.resource}: cannot open: "
                                           f"{os.strerror(code)} (is the instrument on and the address right?)")

    def _socket(self) -> socket.socket | None:
        """The pyvisa-py session's socket, or None for other VISA libraries and interfaces."""
        try:
            sock = self._inst.visalib.sessions[self._inst.session].interface
        except Exception:   # noqa: BLE001 - any other library layout: no socket to tune
            return None
        return sock if isinstance(sock, socket.socket) else None

    def _set_nodelay(self) -> str:
        sock = self._socket()
        if sock is None:
            return "not applicable"
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        return "on" if sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) else "off"

    def _peer_closed(self) -> bool:
        sock = self._socket()
        if sock is None:
            return False
        try:
            readable, _, _ = select.select([sock], [], [], 0)
            return bool(readable) and sock.recv(1, socket.MSG_PEEK) == b""
        except OSError:
            return True

    def _close_session(self) -> None:
        inst, self._inst = self._inst, None
        if inst is not None:
            try:
                inst.close()
            except Exception as exc:   # noqa: BLE001 - closing a broken session must not mask the fault
                log.debug("closing the SCPI session failed: %r", exc)

    def _reopen(self) -> None:
        self._close_session()
        self._open()

    def _lost(self, doing: str) -> InstrumentConnectionLost:
        return InstrumentConnectionLost(f"SCPI generator {self.config.resource}: the connection was lost while "
                                        f"{doing}; check the cable/network and the instrument")

    # ------------------------------------------------------------------ I/O (caller holds self._io)
    def _write(self, command: str) -> None:
        import pyvisa

        if self._inst is None:
            self._reopen()
        if self._peer_closed():
            raise self._lost(f"sending {command!r}")
        try:
            self._inst.write(command)
        except (OSError, pyvisa.errors.VisaIOError, pyvisa.errors.InvalidSession):
            raise self._lost(f"sending {command!r}") from None

    def _query(self, command: str, timeout_s: float | None = None, reopen: bool = True) -> str:
        """One query. After a timeout the session is reopened (``reopen=False``: only closed,
        for :meth:`halt`, which must not wait for a connection), so a late answer is never read."""
        import pyvisa

        if self._inst is None:
            self._reopen()
        if self._peer_closed():
            raise self._lost(f"asking {command!r}")
        wait_s = timeout_s or self.config.timeout_s
        try:
            self._inst.timeout = round(wait_s * 1000)
            return str(self._inst.query(command)).strip()
        except pyvisa.errors.VisaIOError as exc:
            if exc.error_code != pyvisa.constants.StatusCode.error_timeout:
                raise DriverError(f"SCPI generator {self.config.resource}: {command!r} failed: "
                                  f"{exc.description}") from None
            lost = self._peer_closed()
            if reopen:
                self._reopen()   # a late answer must never be read as the next one: new session
            else:
                self._close_session()
            if lost:
                raise self._lost(f"waiting for the answer to {command!r}") from None
            raise BackendTimeout(f"SCPI generator {self.config.resource}: no answer to {command!r} within "
                                 f"{wait_s:g} s (session {'reopened' if reopen else 'closed'} so a late answer "
                                 f"cannot be misread)") from None
        except (OSError, pyvisa.errors.InvalidSession):    # a session closed under us (e.g. at exit)
            raise self._lost(f"asking {command!r}") from None
        finally:
            if self._inst is not None:
                try:
                    self._inst.timeout = round(self.config.timeout_s * 1000)
                except pyvisa.errors.InvalidSession:
                    pass                                  # already reported above

    def _drain_errors(self, after: str) -> None:
        """Read ``SYST:ERR?`` until it reports no error; raise with every entry found."""
        found = self._read_errors()
        if found:
            raise InstrumentError(f"SCPI generator {self.config.resource} reported {'; '.join(found)} after: {after}")

    def _read_errors(self) -> list[str]:
        """Every entry of the error queue, read with ``SYST:ERR?`` until it answers ``0,...``."""
        found = []
        for _ in range(64):
            answer = self._query("SYST:ERR?")
            code = answer.split(",", 1)[0].strip()
            try:
                if int(float(code)) == 0:
                    break
            except ValueError:
                raise DriverError(f"SCPI generator {self.config.resource}: unreadable SYST:ERR? answer "
                                  f"{answer!r}") from None
            found.append(answer)
        else:
            found.append("(error queue did not empty after 64 reads)")
        return found

    def _batch(self, commands: list[str], opc: bool = False) -> None:
        for command in commands:
            self._write(command)
        self._drain_errors("; ".join(commands))
        if opc:
            answer = self._query("*OPC?", timeout_s=self.config.opc_timeout_s)
            if answer.strip() not in ("1", "+1"):
                raise DriverError(f"SCPI generator {self.config.resource}: *OPC? answered {answer!r}, not 1")

    def _initialise(self) -> None:
        cfg = self.config
        if cfg.reset:
            self._write("*RST")
        self._write("*CLS")
        self._idn = self._query("*IDN?")
        if cfg.set_load:      # before the unit: an instrument in high impedance may refuse DBM
            self._set_load()
        self._batch(["SOUR:FUNC SIN", f"SOUR:VOLT:UNIT {cfg.amplitude_unit}", "SOUR:VOLT:OFFS 0", "OUTP OFF"],
                    opc=True)
        self._output_on = False
        self._check_load()
        self._confirm_off()
        self._sent_freq_hz = self.actual_frequency_hz()

    # ------------------------------------------------------------------ output load (caller holds self._io)
    def _set_load(self) -> None:
        command = f"OUTP:LOAD {load_argument(self.config.load_ohm)}"
        self._batch(["OUTP OFF", command])
        log.info("SCPI generator %s: output load set with %r (hardware.scpi.set_load = true)",
                 self.config.resource, command)

    def _check_load(self) -> None:
        """Read the output load setting back and compare it with the rig's, before any ``OUTP ON``.

        A mismatch is refused (:class:`OutputLoadMismatch`). An instrument that does not know
        ``OUTP:LOAD?`` (no answer, an error queued, or an unreadable answer) is logged and
        recorded in :meth:`identity` as not confirmed, and opening carries on, unless the rig
        asked for the load to be set (``set_load``): then it is refused."""
        cfg = self.config
        answer: str | None = None
        try:
            answer = self._query("OUTP:LOAD?", timeout_s=min(cfg.timeout_s, LOAD_QUERY_WAIT_S))
        except BackendTimeout:
            pass                       # the session was reopened: no late answer can be misread
        errors = self._read_errors()
        ohm = load_from_answer(answer) if answer is not None and not errors else None
        self._load_answer = "" if answer is None else answer
        if ohm is None:
            reason = (f"OUTP:LOAD? answered {answer!r}" if answer is not None
                      else f"no answer to OUTP:LOAD? within {min(cfg.timeout_s, LOAD_QUERY_WAIT_S):g} s")
            if errors:
                reason += f", error queue: {'; '.join(errors)}"
            self._load_check = f"not confirmed ({reason})"
            if cfg.set_load:
                raise DriverError(f"SCPI generator {cfg.resource}: the output load was set to "
                                  f"{describe_load(cfg.load_ohm)} (hardware.scpi.set_load = true) but could not be "
                                  f"read back: {reason}")
            log.warning("SCPI generator %s: the output load setting could not be confirmed (%s); the rig says "
                        "the output drives %s: check the instrument's load setting by hand", cfg.resource, reason,
                        describe_load(cfg.load_ohm))
            return
        if not same_load(ohm, cfg.load_ohm):
            raise OutputLoadMismatch(self._mismatch_message(answer or "", ohm))
        self._load_check = "set and confirmed" if cfg.set_load else "confirmed"
        if not cfg.load_given:
            log.warning("SCPI generator %s: hardware.scpi.load is not set in the rig file, so 50 ohm is assumed and "
                        "the instrument agrees; most amplifier inputs are high impedance: if yours is, set "
                        "load = \"high-z\" there", cfg.resource)

    def _mismatch_message(self, answer: str, instrument_ohm: float) -> str:
        cfg = self.config
        factor = voltage_factor(instrument_ohm, cfg.load_ohm)
        rig_value = '"high-z"' if math.isinf(instrument_ohm) else f"{instrument_ohm:g}"
        where = self.rig.source_path or "the rig file"
        reset = (" (the opening *RST restores the instrument's default load setting, so set_load = true is the "
                 "lasting fix)" if cfg.reset else "")
        return (f"SCPI generator {cfg.resource}: output load setting mismatch, nothing was switched on: the "
                f"instrument answered OUTP:LOAD? with {answer!r} ({describe_load(instrument_ohm)}), the rig says the "
                f"output drives {describe_load(cfg.load_ohm)} (hardware.scpi.load"
                f"{'' if cfg.load_given else ', not set: 50 ohm assumed'}). The amplifier would get {factor:.3g}x "
                f"the commanded voltage (through a {SOURCE_OHM:g} ohm source). Fix: send "
                f"\"OUTP:LOAD {load_argument(cfg.load_ohm)}\" to the instrument (or set it on its front panel)"
                f"{reset}; or set hardware.scpi.set_load = true in {where} to have it sent on opening; or, if the "
                f"output really drives {describe_load(instrument_ohm)}, set hardware.scpi.load = {rig_value}")

    # ------------------------------------------------------------------ identity and read-back
    def identity(self) -> dict[str, str]:
        fields = [f.strip() for f in self._idn.split(",")] + ["", "", "", ""]
        return {"maker": fields[0], "model": fields[1], "serial": fields[2], "firmware": fields[3],
                "idn": self._idn, "resource": self.config.resource, "amplitude_unit": self.config.amplitude_unit,
                "load_rig": describe_load(self.config.load_ohm) + ("" if self.config.load_given else " (assumed)"),
                "load_instrument": self._load_answer, "load_check": self._load_check,
                "tcp_nodelay": self._nodelay, "pyvisa": metadata.version("pyvisa")}

    def actual_frequency_hz(self) -> float:
        return _float(self._query("SOUR:FREQ?"), "SOUR:FREQ?")

    def actual_settings(self) -> GeneratorSettings:
        """Frequency, peak amplitude and output state as the instrument reports them."""
        with self._io:
            freq = self.actual_frequency_hz()
            unit = self._query("SOUR:VOLT:UNIT?").upper()
            value = _float(self._query("SOUR:VOLT?"), "SOUR:VOLT?")
            on = self._query("OUTP?").strip() in ("1", "ON", "+1")
        return GeneratorSettings(freq_hz=freq, amplitude_v=unit_to_peak(value, unit, self.config.load_ohm),
                                 output_on=on, unit=unit)

    # ------------------------------------------------------------------ drive
    def set_drive(self, freq_hz: float, amplitude_v: float) -> None:
        """Ramp to ``amplitude_v`` peak volts at ``freq_hz`` in discrete steps; returns when done."""
        with self._io:
            if self._closed or self._halt_event.is_set():
                raise DriverError("SCPI generator: halted or stopped; open the back-end again to drive")
            self.guard.request(freq_hz, amplitude_v)      # refuses above the ceiling, changes nothing
            self._ramping = True
            try:
                self._play(float(freq_hz))
            except InstrumentError as exc:   # the output is no longer what the guard thinks: off
                self.guard.halt()
                self._output_off_now()
                raise InstrumentError(f"{exc}; the output was switched off") from None
            finally:
                self._ramping = False

    def _play(self, freq_hz: float) -> None:
        sent: list[str] = []
        if freq_hz != self._sent_freq_hz and self._sent_amp_v == 0.0:
            sent += self._send_frequency(freq_hz)
        schedule = self._schedule()
        for i, amp_v in enumerate(schedule):
            if self._halt_event.is_set():
                self._output_off_now()
                return
            sent += self._send_amplitude(float(amp_v))
            if amp_v == 0.0 and freq_hz != self._sent_freq_hz:
                sent += self._send_frequency(freq_hz)     # the guard switches frequency at an exact zero
            if i < len(schedule) - 1 and self._halt_event.wait(self.config.step_s):
                self._output_off_now()
                return
        self._drain_errors("; ".join(sent) or "drive request")

    def _schedule(self) -> list[float]:
        """Every amplitude step until the guard has settled (a ramp through zero for a frequency
        change can need one step more than its duration suggests, as each leg is whole steps)."""
        steps: list[float] = []
        for _ in range(100):
            duration_s = self.guard.time_to_settle_s()
            if self.guard.settled() or duration_s <= 0.0:
                return steps
            steps += [float(a) for a in self.guard.amplitude_schedule(max(duration_s, self.config.step_s),
                                                                       self.config.step_s)]
        raise DriverError("SCPI generator: the ramp did not settle (a bug in the step schedule)")

    def _send_frequency(self, freq_hz: float) -> list[str]:
        command = f"SOUR:FREQ {freq_hz:.10g}"
        self._write(command)
        self._sent_freq_hz = freq_hz
        return [command]

    def _send_amplitude(self, amp_v: float) -> list[str]:
        cfg, sent = self.config, []
        if amp_v <= cfg.min_amplitude_v or amp_v == 0.0:
            if self._output_on or not self._off_confirmed:
                self._output_off_now()
                sent += ["OUTP OFF", "OUTP?"]
            self._sent_amp_v = 0.0
            return sent
        value = peak_to_unit(amp_v, cfg.amplitude_unit, cfg.load_ohm)
        command = f"SOUR:VOLT {value:.10g}"
        if not self._off_confirmed:            # the output may show either amplitude while this goes out
            self._last_on_v = max(self._last_on_v, amp_v)
        self._write(command)                    # amplitude first, so the output never shows an old one
        sent.append(command)
        if not self._output_on:
            self._off_confirmed = False         # from here on only OUTP? answering off makes it zero again
            self._last_on_v = amp_v
            self._write("OUTP ON")
            sent.append("OUTP ON")
            self._output_on = True
        self._last_on_v = amp_v
        self._sent_amp_v = amp_v
        return sent

    def _output_off_now(self, wait_s: float | None = None, reopen: bool = True) -> None:
        """``OUTP OFF``, confirmed by ``OUTP?`` (so it has been carried out when this returns).

        Until the answer says off, the output counts as possibly on at the last amplitude."""
        self._output_on = False                 # OUTP ON is sent again before the output is counted on
        self._sent_amp_v = 0.0
        self._write("OUTP OFF")
        self._confirm_off(wait_s, reopen)

    def _confirm_off(self, wait_s: float | None = None, reopen: bool = True) -> None:
        answer = self._query("OUTP?", timeout_s=wait_s, reopen=reopen)
        if answer.upper() not in ("0", "OFF", "+0"):
            raise DriverError(f"SCPI generator {self.config.resource}: output still on after OUTP OFF "
                              f"(OUTP? answered {answer!r})")
        self._off_confirmed = True
        self._last_on_v = 0.0

    @property
    def output_confirmed_off(self) -> bool:
        """True only when ``OUTP?`` has answered off since the output was last switched on.

        False after a lost or unanswered instrument even though the drive was halted or ramped
        down: the output may still be on at :meth:`drive_status`'s amplitude, so switch the
        amplifier off by hand. Lock-free: any thread may ask, at any time."""
        return self._off_confirmed

    def arm(self, ceiling_v: float) -> None:
        """New sweep: this sweep's ceiling. After a halt the output is off: open the back-end again."""
        if self._closed or self._halt_event.is_set():
            raise DriveHalted("SCPI generator: halted or stopped; open the back-end again for a new sweep")
        self.guard.arm(ceiling_v)

    def drive_status(self) -> DriveStatus:
        """Amplitude 0 only when the output is confirmed off (:attr:`output_confirmed_off`); otherwise
        the last amplitude that may be on the output (within one ramp step), even after a halt."""
        g = self.guard.status()
        amplitude_v = 0.0 if self._off_confirmed else self._last_on_v
        return DriveStatus(freq_hz=self._sent_freq_hz, amplitude_v=amplitude_v,
                           target_amplitude_v=g.target_amplitude_v, ceiling_v=g.ceiling_v,
                           ramping=self._ramping or g.ramping)

    # ------------------------------------------------------------------ stopping
    def halt(self) -> None:
        """Output off at once. Never waits for another thread: if one is talking to the instrument,
        it switches the output off at its next step (within one ramp step or one timeout).
        Otherwise ``OUTP OFF`` is sent here and ``OUTP?`` awaited for at most ``HALT_WAIT_S``; no
        connection is made (a lost session is left to :meth:`stop`). Safe in a signal handler.
        Whether the output really went off: :attr:`output_confirmed_off`."""
        self.guard.halt()
        self._halt_event.set()
        if self._io.acquire(blocking=False):
            try:
                if self._inst is not None:
                    self._output_off_now(wait_s=min(self.config.timeout_s, HALT_WAIT_S), reopen=False)
            except DriverError as exc:
                log.error("SCPI generator: output off on halt failed: %s", exc)
            finally:
                self._io.release()

    def stop(self) -> None:
        """Ramp to zero, output off, close the session. Idempotent; errors are logged, then raised."""
        if self._closed:
            return
        error: DriverError | None = None
        try:
            if not self._halt_event.is_set() and self._sent_amp_v > 0.0:
                self.set_drive(self._sent_freq_hz, 0.0)
        except DriverError as exc:
            error = exc
        with self._io:
            self._closed = True
            try:
                self._output_off_after(error)
            except DriverError as exc:
                error = error or exc
                log.error("SCPI generator: could not switch the output off: %s", exc)
            finally:
                self._close_session()
        safety.unregister(self)
        if error is not None:
            raise error

    def _output_off_after(self, error: DriverError | None) -> None:
        """Output off, confirmed; one fresh connection if the session is (or turns out to be) lost."""
        if not (isinstance(error, (InstrumentConnectionLost, BackendTimeout)) or self._inst is None):
            try:
                self._output_off_now()
                return
            except InstrumentConnectionLost as exc:   # e.g. lost during a halt: nobody reconnected yet
                log.info("SCPI generator: %s; reconnecting once to switch the output off", exc)
        self._reopen()
        self._output_off_now()


def _float(answer: str, what: str) -> float:
    try:
        return float(answer.split(",")[0])
    except ValueError:
        raise DriverError(f"SCPI generator: unreadable answer {answer!r} to {what}") from None


__all__ = ["GeneratorSettings", "InstrumentConnectionLost", "InstrumentError", "OutputLoadMismatch", "ScpiConfig",
           "ScpiGenerator", "describe_load", "load_from_answer", "parse_load", "peak_to_unit", "resource_manager",
           "unit_to_peak", "voltage_factor"]
