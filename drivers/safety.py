"""Bring every live output to zero on stop, on any exception, at exit and on SIGINT/SIGTERM.

A process-wide registry holds the live outputs (objects with ``halt()`` and/or ``stop()``):

* :func:`register` / :func:`unregister` add and remove an output (strong references: an
  output dropped without being stopped is still zeroed at exit);
* an :mod:`atexit` hook halts then stops every registered output, including after an
  uncaught exception and after ``sys.exit``;
* :func:`install_signal_handlers` (main thread only) makes SIGINT halt every output and then
  hand over to the previous handler, so Ctrl-C still raises ``KeyboardInterrupt``; SIGTERM
  halts every output and exits (``SystemExit(143)``), so ``finally`` blocks and the atexit
  hook then stop the hardware properly;
* :func:`guarded` is a context manager that halts and stops its output on any exception.

Inside a signal handler only ``halt()`` is called: it must not wait for a lock the
interrupted main thread may hold (:class:`drivers.guard.CeilingGuard.halt` takes none).
Python runs signal handlers only when the main thread is back in the interpreter, so a
main thread blocked inside a C call delays them; the hardware's own timeouts bound that.

Imports: standard library only.
"""

from __future__ import annotations

import atexit
import contextlib
import logging
import signal
import threading
from collections.abc import Iterator
from types import FrameType
from typing import Any, TypeVar

log = logging.getLogger(__name__)

T = TypeVar("T")

_lock = threading.RLock()
_outputs: list[Any] = []
_previous_handlers: dict[int, Any] = {}
HANDLED_SIGNALS = (signal.SIGINT, signal.SIGTERM)


# --------------------------------------------------------------------------- registry
def register(obj: T) -> T:
    """Add a live output (has ``halt()`` and/or ``stop()``); returns it. Registering twice is harmless."""
    if not (callable(getattr(obj, "halt", None)) or callable(getattr(obj, "stop", None))):
        raise TypeError(f"safety.register: {obj!r} has neither halt() nor stop()")
    with _lock:
        if not any(o is obj for o in _outputs):
            _outputs.append(obj)
    return obj


def unregister(obj: Any) -> None:
    """Remove an output (after it has been stopped). Unknown objects are ignored."""
    with _lock:
        _outputs[:] = [o for o in _outputs if o is not obj]


def registered() -> tuple[Any, ...]:
    """The outputs currently registered, oldest first."""
    with _lock:
        return tuple(_outputs)


def _call_each(objs: tuple[Any, ...], method: str) -> list[BaseException]:
    """Call ``method`` on every object that has it; one failure never skips the others."""
    errors: list[BaseException] = []
    for obj in objs:
        fn = getattr(obj, method, None)
        if not callable(fn):
            continue
        try:
            fn()
        except Exception as exc:  # keep zeroing the others; report below
            errors.append(exc)
            log.error("safety: %s.%s() failed: %r", type(obj).__name__, method, exc)
    return errors


def halt_all() -> list[BaseException]:
    """Immediate zero on every registered output that has ``halt()`` (objects with only ``stop()`` are stopped)."""
    objs = _snapshot()
    errors = _call_each(objs, "halt")
    errors += _call_each(tuple(o for o in objs if not callable(getattr(o, "halt", None))), "stop")
    return errors


def stop_all() -> list[BaseException]:
    """Halt, then stop (release) every registered output."""
    objs = _snapshot()
    return _call_each(objs, "halt") + _call_each(objs, "stop")


def _snapshot() -> tuple[Any, ...]:
    # Non-blocking: a signal handler must never wait on a lock the main thread holds.
    if _lock.acquire(blocking=False):
        try:
            return tuple(_outputs)
        finally:
            _lock.release()
    return tuple(_outputs)  # list reads are atomic under the GIL


@atexit.register
def _at_exit() -> None:
    stop_all()


# --------------------------------------------------------------------------- context manager
@contextlib.contextmanager
def guarded(obj: T) -> Iterator[T]:
    """Register ``obj`` for the block; on any exception (Ctrl-C included) halt and stop it.

    On a normal exit the output is left running and stays registered: leaving the block is
    not a stop. Errors while zeroing are logged and attached to the original exception.
    """
    register(obj)
    try:
        yield obj
    except BaseException as exc:
        for err in _call_each((obj,), "halt") + _call_each((obj,), "stop"):
            exc.add_note(f"while zeroing {type(obj).__name__} after this error: {err!r}")
        unregister(obj)
        raise


# --------------------------------------------------------------------------- signals
def _handler(signum: int, frame: FrameType | None) -> None:
    halt_all()
    previous = _previous_handlers.get(signum)
    if signum == signal.SIGTERM:
        if callable(previous):
            previous(signum, frame)
        raise SystemExit(128 + signum)
    if callable(previous):
        previous(signum, frame)  # default SIGINT handler: raises KeyboardInterrupt
        return
    raise KeyboardInterrupt


def install_signal_handlers(signals: tuple[int, ...] = HANDLED_SIGNALS) -> None:
    """Zero all outputs on ``signals`` (default SIGINT and SIGTERM). Main thread only; idempotent.

    The previous handler is kept and called after zeroing. A signal that was being ignored
    (SIG_IGN, e.g. under ``nohup``) stays ignored. A command that turns Ctrl-C into a ramped
    abort of its own installs SIGTERM only.
    """
    if threading.current_thread() is not threading.main_thread():
        raise RuntimeError("safety.install_signal_handlers() must be called from the main thread")
    with _lock:
        for signum in signals:
            current = signal.getsignal(signum)
            if current is _handler or current == signal.SIG_IGN:
                continue
            _previous_handlers[signum] = current
            signal.signal(signum, _handler)


def uninstall_signal_handlers() -> None:
    """Put back the handlers that were there before :func:`install_signal_handlers` (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        raise RuntimeError("safety.uninstall_signal_handlers() must be called from the main thread")
    with _lock:
        for signum, previous in list(_previous_handlers.items()):
            if signal.getsignal(signum) is _handler:
                signal.signal(signum, previous if previous is not None else signal.SIG_DFL)
            del _previous_handlers[signum]


def signal_handlers_installed() -> bool:
    return any(signal.getsignal(s) is _handler for s in HANDLED_SIGNALS)
