"""The one-BLAS-thread block: products inside it use one thread, in any thread; it is undone after."""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest

from app.core import blas
from app.core.harmonic import fit_harmonics


def _cpu_per_wall(tag: list[float]) -> None:
    x = np.random.default_rng(0).standard_normal((1500, 1500))
    c0, w0 = time.thread_time(), time.perf_counter()
    for _ in range(4):
        x @ x
    tag.append((time.thread_time() - c0) / (time.perf_counter() - w0))


def _run_in_thread(fn) -> None:
    worker = threading.Thread(target=fn)
    worker.start()
    worker.join(60)


@pytest.mark.skipif(not blas.limited(), reason="no OpenBLAS with a thread-local setting loaded")
def test_inside_the_block_the_product_runs_on_the_calling_thread_only_in_any_thread():
    # time.thread_time counts the calling thread's CPU only: with one BLAS thread the product
    # runs on the caller, so its CPU time is (nearly) the wall time. Checked from the main
    # thread after it used the block, and from a worker thread, as the engine calls it. Without
    # the block a two-thread BLAS gives about 0.5 here.
    seen: list[float] = []

    def limited() -> None:
        tries: list[float] = []
        with blas.one_blas_thread():
            for _ in range(3):              # the best of three: another process may take the core a while
                _cpu_per_wall(tries)
        seen.append(max(tries))

    limited()
    _run_in_thread(limited)
    limited()
    assert all(r > 0.8 for r in seen), seen


def test_the_block_nests_and_the_fit_is_the_same_whatever_the_threading():
    rng = np.random.default_rng(3)
    n, fs, f = 40_000, 8_000.0, 123.4
    t = np.arange(n) / fs
    x = np.vstack([np.cos(2 * np.pi * f * t + k) + 0.1 * rng.standard_normal(n) for k in range(4)])
    outside = fit_harmonics(x, fs, f, n_harmonics=3)
    with blas.one_blas_thread():
        with blas.one_blas_thread():
            inside = fit_harmonics(x, fs, f, n_harmonics=3)
    np.testing.assert_allclose(inside.amplitude, outside.amplitude, rtol=1e-12)
    np.testing.assert_allclose(inside.var_amplitude, outside.var_amplitude, rtol=1e-12)
