"""Back-end registry: back-ends are found by entry point and imported only when asked for.

Each back-end is declared in ``pyproject.toml`` under the entry-point group
``flamebode.backends`` as ``name = "module:Class"``. The class has a cheap classmethod
``probe() -> Availability`` (library import, vendor runtime, device presence) and a
constructor ``(rig, **options)``. :func:`list_backends` never raises: a back-end whose
module cannot be imported, or whose probe fails, is listed as unavailable with the reason
in plain words. :func:`open_backend` opens one and registers it with :mod:`drivers.safety`
so it is zeroed at exit and on SIGINT/SIGTERM.

Imports: standard library, ``drivers.protocols``, ``drivers.errors`` and ``drivers.safety``
only. Never a hardware library (each back-end imports its own, lazily).
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib.metadata import EntryPoint, entry_points
from typing import Any

from . import safety
from .errors import BackendUnavailable, DriverError
from .protocols import Availability

GROUP = "flamebode.backends"


@dataclass(frozen=True)
class BackendInfo:
    """One declared back-end: its entry-point name, a human title, availability, and target."""

    name: str
    title: str
    availability: Availability
    target: str


def _entry_points() -> dict[str, EntryPoint]:
    found: dict[str, EntryPoint] = {}
    for ep in entry_points(group=GROUP):
        found.setdefault(ep.name, ep)   # first declaration wins if two distributions clash
    return dict(sorted(found.items()))


def _import_reason(ep: EntryPoint, exc: BaseException) -> str:
    if isinstance(exc, ModuleNotFoundError):
        return f"cannot import {ep.module}: {exc}"
    if isinstance(exc, (AttributeError, ImportError)):
        return f"cannot load {ep.value}: {exc}"
    return f"importing {ep.value} failed: {type(exc).__name__}: {exc}"


def _load(ep: EntryPoint) -> tuple[type | None, str]:
    """The back-end class, or None and the reason it cannot be loaded."""
    try:
        cls = ep.load()
    except Exception as exc:  # any import-time failure makes it unavailable, never a crash
        return None, _import_reason(ep, exc)
    if not callable(getattr(cls, "probe", None)):
        return None, f"{ep.value} has no probe() classmethod"
    return cls, ""


def _probe(name: str, cls: type) -> Availability:
    try:
        result = cls.probe()
    except Exception as exc:
        return Availability(False, f"probe of back-end {name!r} failed: {type(exc).__name__}: {exc}")
    if not isinstance(result, Availability):
        return Availability(False, f"probe of back-end {name!r} returned {type(result).__name__}, not Availability")
    return result


def _title(name: str, cls: type | None) -> str:
    title = getattr(cls, "title", None)
    if isinstance(title, str) and title.strip():
        return title.strip()
    doc = (getattr(cls, "__doc__", None) or "").strip()
    return doc.splitlines()[0].split(". ")[0].rstrip(".") if doc else name


def _info(name: str, ep: EntryPoint) -> BackendInfo:
    cls, reason = _load(ep)
    availability = Availability(False, reason) if cls is None else _probe(name, cls)
    return BackendInfo(name=name, title=_title(name, cls), availability=availability, target=ep.value)


def list_backends() -> list[BackendInfo]:
    """Every declared back-end, sorted by name, with whether it can be used here. Never raises."""
    return [_info(name, ep) for name, ep in _entry_points().items()]


def backend_names() -> list[str]:
    """Names of the declared back-ends (no import, no probe)."""
    return list(_entry_points())


def open_backend(name: str, rig: Any, **options: Any) -> Any:
    """Construct back-end ``name`` for ``rig``; registered with :mod:`drivers.safety`.

    Raises :class:`DriverError` for an unknown name (listing the known ones) and
    :class:`BackendUnavailable` with the reason when it cannot be used here.
    """
    eps = _entry_points()
    if name not in eps:
        known = ", ".join(eps) or "none (is flamebode installed with `pip install -e .`?)"
        raise DriverError(f"unknown back-end {name!r}; known back-ends: {known}")
    cls, reason = _load(eps[name])
    if cls is None:
        raise BackendUnavailable(f"back-end {name!r} is unavailable: {reason}")
    availability = _probe(name, cls)
    if not availability.available:
        raise BackendUnavailable(f"back-end {name!r} is unavailable: {availability.reason or 'no reason given'}")
    backend = cls(rig, **options)
    if callable(getattr(backend, "halt", None)) or callable(getattr(backend, "stop", None)):
        safety.register(backend)
    return backend


def check_settings(name: str, rig: Any) -> str | None:
    """Ask back-end ``name`` whether the device can take what ``rig`` would ask of it (sample
    rate, channels), without opening it: the class's optional ``check_settings(rig)``. Returns
    what it checked in plain words, None when the back-end has no such check; raises
    :class:`BackendUnavailable` naming what the device refuses."""
    eps = _entry_points()
    if name not in eps:
        return None
    cls, _reason = _load(eps[name])
    check = getattr(cls, "check_settings", None) if cls is not None else None
    return check(rig) if callable(check) else None


def close_backend(backend: Any) -> None:
    """Stop a back-end opened by :func:`open_backend` and drop it from the safety registry."""
    try:
        stop = getattr(backend, "stop", None)
        if callable(stop):
            stop()
    finally:
        safety.unregister(backend)


__all__ = ["BackendInfo", "GROUP", "backend_names", "close_backend", "list_backends", "open_backend"]
