"""SIGINT, SIGTERM and SIGHUP: outputs to zero at once, then the window is told on its own thread.

Python runs a signal handler only between bytecodes of the main thread. In the window the
main thread sits in Qt's event loop (C++), so a plain handler would run late, inside
whatever slot happens to run next: Ctrl-C surfaced as a KeyboardInterrupt in a drawing slot
while the sweep went on. And the GUI thread itself may be a few hundred milliseconds behind
(redraws, queued events in a fast rehearsal), too slow for a halt.

So the C-level handler writes the signal number to one end of a socket pair
(``signal.set_wakeup_fd``). A small watcher thread blocks on the other end; for each signal
it calls ``act(signum)`` at once, on its own thread (the window's halt: thread-safe, never
waits long), then queues ``received(signum)`` to the GUI thread, where the window closes
and the application quits. The Python-level handler only notes the number: it must not
raise, take a lock or call Qt (it may run in the middle of any slot).

A signal that was ignored when the window started (``nohup`` ignores SIGHUP; a shell's
background job ignores SIGINT) stays ignored. ``uninstall`` puts everything back and ends
the watcher.

Imports: PySide6 and the standard library only.
"""

from __future__ import annotations

import logging
import signal
import socket
import threading
from types import FrameType
from typing import Any, Callable

from PySide6.QtCore import QObject, Qt, Signal, Slot

log = logging.getLogger(__name__)

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


class StopSignals(QObject):
    """Routes stop signals: ``act(signum)`` on the watcher thread at once, then ``received``
    on the thread this object lives in (the GUI thread). Install and uninstall on the main thread."""

    received = Signal(int)
    _relay = Signal(int)

    def __init__(self, act: Callable[[int], Any] | None = None, signals: tuple[int, ...] = STOP_SIGNALS,
                 parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.act = act
        self.signals = tuple(signals)
        self.noted: list[int] = []          # appended by the Python-level handler (atomic under the GIL)
        self.acted: list[tuple[int, str]] = []   # (signum, thread name) for each act() call
        self._previous: dict[int, Any] = {}
        self._previous_fd: int | None = None
        self._read: socket.socket | None = None
        self._write: socket.socket | None = None
        self._thread: threading.Thread | None = None
        self._relay.connect(self._deliver, Qt.ConnectionType.QueuedConnection)

    @property
    def installed(self) -> bool:
        return self._thread is not None

    def install(self) -> None:
        if threading.current_thread() is not threading.main_thread():
            raise RuntimeError("StopSignals.install() must be called from the main thread")
        if self.installed:
            return
        self._read, self._write = socket.socketpair()
        self._write.setblocking(False)      # set_wakeup_fd needs it; the watcher's end blocks
        self._thread = threading.Thread(target=self._watch, args=(self._read,), name="ui-stop-signals",
                                        daemon=True)
        self._thread.start()
        self._previous_fd = signal.set_wakeup_fd(self._write.fileno(), warn_on_full_buffer=False)
        for signum in self.signals:
            current = signal.getsignal(signum)
            if current == signal.SIG_IGN:
                continue
            self._previous[signum] = current
            signal.signal(signum, self._note)

    def uninstall(self) -> None:
        if threading.current_thread() is not threading.main_thread():
            raise RuntimeError("StopSignals.uninstall() must be called from the main thread")
        if not self.installed:
            return
        for signum, previous in self._previous.items():
            signal.signal(signum, previous if previous is not None else signal.SIG_DFL)
        self._previous.clear()
        signal.set_wakeup_fd(self._previous_fd if self._previous_fd is not None else -1)
        assert self._write is not None and self._read is not None and self._thread is not None
        self._write.close()                 # the watcher reads end-of-file and returns
        self._thread.join(5.0)
        self._read.close()
        self._read = self._write = self._thread = None

    def _note(self, signum: int, frame: FrameType | None) -> None:
        self.noted.append(signum)

    def _watch(self, sock: socket.socket) -> None:
        """Watcher thread: each signal number written by the C handler, in order of arrival."""
        while True:
            try:
                data = sock.recv(64)
            except InterruptedError:
                continue
            except OSError:
                return
            if not data:
                return
            for signum in data:
                if signum not in self.signals:
                    continue
                self.acted.append((signum, threading.current_thread().name))
                if self.act is not None:
                    try:
                        self.act(signum)
                    except Exception:   # never let the watcher die: the GUI thread still acts
                        log.exception("stop signal %d: acting on it failed", signum)
                self._relay.emit(int(signum))

    @Slot(int)
    def _deliver(self, signum: int) -> None:
        self.received.emit(signum)
