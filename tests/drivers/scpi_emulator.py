"""A small SCPI function generator served on 127.0.0.1 over TCP, for testing the real protocol path.

:class:`ScpiEmulator` listens on an ephemeral loopback port in a thread (one more thread per
connection), reads newline-terminated messages and answers queries with a newline, like a
raw-socket instrument (``TCPIP0::127.0.0.1::PORT::SOCKET``). It understands the IEEE 488.2
common commands and the standard SCPI sine-generator subset, long and short mnemonics,
case-insensitive, with the optional ``SOURce`` root:

``*IDN?  *RST  *CLS  *OPC?  SYST:ERR?  SOUR:FUNC SIN|?  SOUR:FREQ x|?  SOUR:VOLT x|?
SOUR:VOLT:UNIT VPP|VRMS|DBM|?  SOUR:VOLT:OFFS x|?  OUTP ON|OFF|1|0|?  OUTP:LOAD ohms|INF|?``

Errors go to a queue read by ``SYST:ERR?`` (IEEE 488.2 / SCPI-1999 codes: -113 "Undefined
header", -104 "Data type error", -221 "Settings conflict", -222 "Data out of range";
``0,"No error"`` when empty). Amplitudes are held as peak volts and shown in the selected unit
(VPP = 2 Vp; VRMS = Vp/√2 for a sine; dBm = 10 log10(Vrms² / load / 1 mW), the usual
definitions into the output load setting).

Output load setting (``OUTP:LOAD``): the load the instrument *assumes* is connected; its
amplitude numbers are the voltage across that load. The default after power-on and ``*RST``
is 50 Ω (``default_load_ohm``), as on most bench generators (from memory). High impedance is
``INF`` (or any value ≥ 9.9E37, SCPI's infinity) and is answered as ``inf_answer``
(``+9.9E+37`` by default; ``"INF"`` for instruments that answer in words). dBm is refused in
high impedance (-221), as real instruments do (from memory). ``connected_load_ohm`` is what is
really wired to the output (default: infinite, an amplifier input) and
:attr:`ScpiEmulator.delivered_peak_v` the peak volts it really gets, through the usual 50 Ω
source impedance (common practice): twice ``peak_v`` when a 50 Ω setting drives a high-Z
input. ``load_supported=False`` makes an instrument that knows no ``OUTP:LOAD`` at all: both
forms queue -113 and the query is not answered.

Faults for tests: ``reply_delay_s`` (every answer late) and :meth:`delay_next_reply` (one
late answer, the stale-answer trap), :meth:`drop_connections` (peer closes the socket),
``drop_on`` (close the connection when a message starting with this text arrives, without
carrying it out), :meth:`freeze` (the instrument stops carrying out and answering anything but
keeps its connections and its output as they are: a hung instrument, or one whose network
path died without closing the connection), and ``resolution_vpp`` (the amplitude is set to the
nearest multiple, as a coarse instrument would).

Imports: standard library only.
"""

from __future__ import annotations

import math
import re
import socket
import threading
import time
from collections import deque
from dataclasses import dataclass

IDN = "flamebode,SCPI test generator,EMU-0001,1.0"
LOAD_OHM = 50.0            # default output load setting after *RST
SOURCE_OHM = 50.0          # the output's source impedance
SCPI_INF = 9.9e37          # SCPI-1999: the number that stands for infinity

# long form -> short form (the short form is the upper-case part of the mnemonic)
MNEMONICS = {"SOURCE": "SOUR", "FUNCTION": "FUNC", "FREQUENCY": "FREQ", "VOLTAGE": "VOLT", "UNIT": "UNIT",
             "OFFSET": "OFFS", "OUTPUT": "OUTP", "STATE": "STAT", "SYSTEM": "SYST", "ERROR": "ERR",
             "SHAPE": "SHAP", "AMPLITUDE": "AMPL", "IMMEDIATE": "IMM", "NEXT": "NEXT", "LOAD": "LOAD"}
SHORTS = set(MNEMONICS.values())


def peak_to_unit(peak_v: float, unit: str, load_ohm: float = LOAD_OHM) -> float:
    if unit == "VPP":
        return 2.0 * peak_v
    if unit == "VRMS":
        return peak_v / math.sqrt(2.0)
    return 10.0 * math.log10((peak_v / math.sqrt(2.0)) ** 2 / load_ohm / 1e-3)


def unit_to_peak(value: float, unit: str, load_ohm: float = LOAD_OHM) -> float:
    if unit == "VPP":
        return value / 2.0
    if unit == "VRMS":
        return value * math.sqrt(2.0)
    return math.sqrt(1e-3 * 10.0 ** (value / 10.0) * load_ohm) * math.sqrt(2.0)


def delivered_v(set_v: float, load_setting_ohm: float, connected_ohm: float) -> float:
    """Volts across ``connected_ohm`` when the instrument shows ``set_v`` across ``load_setting_ohm``.

    Divider with the source impedance: EMF = V_set (R_set + R_s) / R_set, V = EMF R / (R + R_s)
    (common practice; R = inf is an open circuit)."""
    emf = set_v if math.isinf(load_setting_ohm) else set_v * (load_setting_ohm + SOURCE_OHM) / load_setting_ohm
    return emf if math.isinf(connected_ohm) else emf * connected_ohm / (connected_ohm + SOURCE_OHM)


@dataclass
class GeneratorState:
    function: str = "SIN"
    freq_hz: float = 1000.0
    peak_v: float = 0.05
    unit: str = "VPP"
    offset_v: float = 0.0
    output: bool = False
    load_ohm: float = LOAD_OHM     # the output load setting (math.inf: high impedance)


class _ScpiError(Exception):
    def __init__(self, code: int, text: str):
        super().__init__(f'{code},"{text}"')


def _canonical(header: str) -> str:
    """'source:voltage:unit' -> 'SOUR:VOLT:UNIT'; raises -113 for an unknown mnemonic."""
    nodes = []
    for token in header.strip().lstrip(":").upper().split(":"):
        token = re.sub(r"(?<=[A-Z])1$", "", token)          # SOUR1 / OUTP1: channel 1
        node = MNEMONICS.get(token, token)
        if node not in SHORTS:
            raise _ScpiError(-113, "Undefined header")
        nodes.append(node)
    path = ":".join(nodes)
    if path.split(":")[0] in ("FUNC", "FREQ", "VOLT"):      # [SOURce:] is the default root
        path = "SOUR:" + path
    return {"SOUR:VOLT:AMPL": "SOUR:VOLT", "SOUR:VOLT:IMM": "SOUR:VOLT", "SOUR:VOLT:IMM:AMPL": "SOUR:VOLT",
            "OUTP:STAT": "OUTP", "SOUR:FUNC:SHAP": "SOUR:FUNC", "SYST:ERR:NEXT": "SYST:ERR"}.get(path, path)


def _number(arg: str) -> float:
    try:
        value = float(arg)
    except ValueError:
        raise _ScpiError(-104, "Data type error") from None
    if not math.isfinite(value):
        raise _ScpiError(-104, "Data type error")
    return value


class ScpiEmulator:
    """The instrument; use as a context manager. ``resource`` is the VISA address to open."""

    def __init__(self, idn: str = IDN, reply_delay_s: float = 0.0, max_peak_v: float = 5.0,
                 resolution_vpp: float = 0.0, default_load_ohm: float = LOAD_OHM, load_supported: bool = True,
                 inf_answer: str = "+9.9E+37", connected_load_ohm: float = math.inf, port: int = 0) -> None:
        self.idn = idn
        self.reply_delay_s = reply_delay_s
        self.max_peak_v = max_peak_v
        self.resolution_vpp = resolution_vpp      # amplitude setting resolution (0: exact)
        self.default_load_ohm = default_load_ohm  # the load setting after power-on and *RST
        self.load_supported = load_supported      # False: OUTP:LOAD and OUTP:LOAD? are unknown (-113)
        self.inf_answer = inf_answer              # how OUTP:LOAD? answers high impedance
        self.connected_load_ohm = connected_load_ohm
        self.frozen = False
        self.state = GeneratorState(load_ohm=default_load_ohm)
        self.errors: deque[str] = deque(maxlen=20)
        self.received: list[str] = []
        self.drop_on: str | None = None
        self._next_delay_s: float | None = None
        self._lock = threading.Lock()
        self._conns: list[socket.socket] = []
        self._server = socket.create_server(("127.0.0.1", port))   # SO_REUSEADDR: a restart may take the port back
        self.port = self._server.getsockname()[1]
        self._closing = False
        self._thread = threading.Thread(target=self._accept_loop, name="scpi-emulator", daemon=True)

    @property
    def resource(self) -> str:
        return f"TCPIP0::127.0.0.1::{self.port}::SOCKET"

    def __enter__(self) -> "ScpiEmulator":
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        self._closing = True
        self._server.close()
        self.drop_connections()
        self._thread.join(timeout=5.0)

    # ---------------------------------------------------------------- faults
    def delay_next_reply(self, seconds: float) -> None:
        with self._lock:
            self._next_delay_s = seconds

    def freeze(self) -> None:
        """From now on carry out and answer nothing; connections stay open, the output stays as it is."""
        with self._lock:
            self.frozen = True

    @property
    def delivered_peak_v(self) -> float:
        """Peak volts the connected load really gets (0 with the output off)."""
        with self._lock:
            s = self.state
            return delivered_v(s.peak_v, s.load_ohm, self.connected_load_ohm) if s.output else 0.0

    def drop_connections(self) -> None:
        """The instrument closes every open connection (it keeps listening for new ones)."""
        with self._lock:
            conns, self._conns = self._conns, []
        for conn in conns:
            try:
                conn.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass
            conn.close()

    def commands(self, prefix: str = "") -> list[str]:
        """Messages received so far (upper-cased) that start with ``prefix``."""
        with self._lock:
            return [m for m in self.received if m.upper().startswith(prefix.upper())]

    # ---------------------------------------------------------------- serving
    def _accept_loop(self) -> None:
        self._server.settimeout(0.05)          # so close() is noticed promptly
        while not self._closing:
            try:
                conn, _ = self._server.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            conn.settimeout(None)
            with self._lock:
                self._conns.append(conn)
            threading.Thread(target=self._serve, args=(conn,), name="scpi-emulator-conn", daemon=True).start()

    def _serve(self, conn: socket.socket) -> None:
        buffer = b""
        try:
            while True:
                chunk = conn.recv(4096)
                if not chunk:
                    return
                buffer += chunk
                while b"\n" in buffer:
                    line, buffer = buffer.split(b"\n", 1)
                    if not self._handle(conn, line.decode("ascii", "replace").strip()):
                        return
        except OSError:
            return
        finally:
            conn.close()

    def _handle(self, conn: socket.socket, message: str) -> bool:
        if not message:
            return True
        with self._lock:
            if self.frozen:
                return True
            self.received.append(message)
            if self.drop_on and message.upper().startswith(self.drop_on.upper()):
                self._conns = [c for c in self._conns if c is not conn]
                conn.shutdown(socket.SHUT_RDWR)
                return False
            replies = [r for part in message.split(";") if (r := self._execute(part.strip())) is not None]
            delay = self._next_delay_s if (replies and self._next_delay_s is not None) else self.reply_delay_s
            if replies and self._next_delay_s is not None:
                self._next_delay_s = None
        if replies:
            if delay > 0:
                time.sleep(delay)
            conn.sendall((";".join(replies) + "\n").encode("ascii"))
        return True

    # ---------------------------------------------------------------- the instrument
    def _execute(self, command: str) -> str | None:
        """Run one command (lock held); the reply for a query, None otherwise."""
        if not command:
            return None
        header, _, arg = command.partition(" ")
        arg = arg.strip()
        query = header.endswith("?")
        try:
            if header.startswith("*"):
                return self._common(header.upper(), query)
            return self._subsystem(_canonical(header.rstrip("?")), arg, query)
        except _ScpiError as err:
            self.errors.append(str(err))
            return None

    def _common(self, header: str, query: bool) -> str | None:
        if header == "*IDN?":
            return self.idn
        if header == "*OPC?":
            return "1"
        if header == "*RST":
            self.state = GeneratorState(load_ohm=self.default_load_ohm)
            return None
        if header == "*CLS":
            self.errors.clear()
            return None
        raise _ScpiError(-113, "Undefined header")

    def _subsystem(self, path: str, arg: str, query: bool) -> str | None:
        s = self.state
        if path == "SYST:ERR" and query:
            return self.errors.popleft() if self.errors else '0,"No error"'
        if path == "SOUR:FUNC":
            if query:
                return s.function
            if arg.upper() not in ("SIN", "SINUSOID"):
                raise _ScpiError(-224, "Illegal parameter value")
            s.function = "SIN"
        elif path == "SOUR:FREQ":
            if query:
                return f"{s.freq_hz:+.9E}"
            value = _number(arg)
            if not 1e-6 <= value <= 20e6:
                raise _ScpiError(-222, "Data out of range")
            s.freq_hz = value
        elif path == "SOUR:VOLT":
            if query:
                return f"{peak_to_unit(s.peak_v, s.unit, s.load_ohm):+.9E}"
            peak = unit_to_peak(_number(arg), s.unit, s.load_ohm)
            if not 0.0 < peak <= self.max_peak_v:
                raise _ScpiError(-222, "Data out of range")
            if self.resolution_vpp > 0:
                peak = round(2.0 * peak / self.resolution_vpp) * self.resolution_vpp / 2.0
            s.peak_v = peak
        elif path == "SOUR:VOLT:UNIT":
            if query:
                return s.unit
            if arg.upper() not in ("VPP", "VRMS", "DBM"):
                raise _ScpiError(-224, "Illegal parameter value")
            if arg.upper() == "DBM" and math.isinf(s.load_ohm):
                raise _ScpiError(-221, "Settings conflict")
            s.unit = arg.upper()
        elif path == "SOUR:VOLT:OFFS":
            if query:
                return f"{s.offset_v:+.9E}"
            s.offset_v = _number(arg)
        elif path == "OUTP":
            if query:
                return "1" if s.output else "0"
            if arg.upper() not in ("ON", "OFF", "1", "0"):
                raise _ScpiError(-224, "Illegal parameter value")
            s.output = arg.upper() in ("ON", "1")
        elif path == "OUTP:LOAD" and self.load_supported:
            return self._load(arg, query)
        else:
            raise _ScpiError(-113, "Undefined header")
        return None

    def _load(self, arg: str, query: bool) -> str | None:
        s = self.state
        if query:
            return self.inf_answer if math.isinf(s.load_ohm) else f"{s.load_ohm:+.9E}"
        word = arg.upper()
        value = math.inf if word in ("INF", "INFINITY") else _number(arg)
        if value >= SCPI_INF:
            value = math.inf
        if not (math.isinf(value) or 1.0 <= value <= 10e3):
            raise _ScpiError(-222, "Data out of range")
        if math.isinf(value) and s.unit == "DBM":
            raise _ScpiError(-221, "Settings conflict")
        s.load_ohm = value
        return None


def _serve_forever(argv: list[str] | None = None) -> int:
    """``python tests/drivers/scpi_emulator.py --port P --status FILE``: the instrument as a process
    of its own (a test kills it mid-sweep); its output state goes to FILE (JSON lines, 20 a second)."""
    import argparse
    import json
    import signal

    p = argparse.ArgumentParser()
    p.add_argument("--port", type=int, default=0)
    p.add_argument("--status", required=True)
    args = p.parse_args(argv)
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    with ScpiEmulator(port=args.port) as emu, open(args.status, "a", encoding="utf-8") as fh:
        print(f"scpi emulator on port {emu.port}", flush=True)
        while not stop.is_set():
            st = emu.state
            fh.write(json.dumps({"time": time.time(), "output": st.output, "freq_hz": st.freq_hz,
                                 "peak_v": st.peak_v, "commands": len(emu.received)}) + "\n")
            fh.flush()
            stop.wait(0.05)
    return 0


if __name__ == "__main__":
    raise SystemExit(_serve_forever())
