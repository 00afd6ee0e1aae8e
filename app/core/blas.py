"""One BLAS thread for the products over a record: steady timing on a busy acquisition PC.

The harmonic fit and the frequency refinement project every sample of a record onto a dozen
columns. A threaded BLAS gains at most about 2× on such thin products, and when the other cores
are busy (the window, the acquisition, another program) its threads wait for each other: one
point was seen to take ten times longer. ``one_blas_thread()`` holds the calling thread's BLAS
products to one thread for the duration of a block, through OpenBLAS's thread-local setting
(``openblas_set_num_threads_local``, found in the libraries threadpoolctl lists), so other
threads keep their own setting. Where no such BLAS is loaded it does nothing.

(OpenBLAS's process-wide ``openblas_set_num_threads`` is not used: once one thread has set it,
calls from other threads are ignored.)

Imports numpy and threadpoolctl only: must not import Qt, drivers, the engine or storage.
"""

from __future__ import annotations

import contextlib
import ctypes
import functools
from typing import Any, Iterator

import numpy  # noqa: F401  (loads the BLAS before it is looked for)


@functools.lru_cache(maxsize=1)
def _thread_local_setters() -> tuple[Any, ...]:
    """``openblas_set_num_threads_local`` of every loaded OpenBLAS that has it."""
    try:
        from threadpoolctl import ThreadpoolController
        controllers = ThreadpoolController().select(internal_api="openblas").lib_controllers
    except Exception:       # no threadpoolctl: leave the threading alone
        return ()
    setters = []
    for lib in controllers:
        setter = getattr(lib.dynlib, "openblas_set_num_threads_local", None)
        if setter is not None:
            setter.argtypes, setter.restype = [ctypes.c_int], ctypes.c_int
            setters.append(setter)
    return tuple(setters)


def limited() -> bool:
    """True when ``one_blas_thread`` can limit a BLAS of this process."""
    return bool(_thread_local_setters())


@contextlib.contextmanager
def one_blas_thread() -> Iterator[None]:
    """Context in which the calling thread's BLAS products use one thread (nestable)."""
    setters = _thread_local_setters()
    previous = [setter(1) for setter in setters]
    try:
        yield
    finally:
        for setter, n in zip(setters, previous):
            setter(n)
