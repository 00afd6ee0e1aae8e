"""The rational model with a pure delay (vector fitting) and its state-space form.

References: vector fitting (Gustavsen & Semlyen 1999, IEEE Trans. Power Delivery 14:1052);
python-control's state-space frequency response as the independent check of (A, B, C, D);
the Gaussian distributed-delay flame of the project's domain notes as a non-rational target.
"""

from __future__ import annotations

import numpy as np
import pytest

from app.core.fits import FitError
from app.core.rational import vector_fit

TWO_PI = 2 * np.pi


def _rational(f):
    s = 1j * TWO_PI * f
    p1, p2 = -150 + TWO_PI * 300j, -300 + TWO_PI * 700j
    r1, r2 = 200 + 100j, -150 + 80j
    h = r1 / (s - p1) + np.conj(r1) / (s - np.conj(p1)) + r2 / (s - p2) + np.conj(r2) / (s - np.conj(p2)) + 0.3
    return h * np.exp(-s * 1.5e-3), (p1, p2)


def test_a_rational_system_is_recovered_and_its_state_space_agrees_with_python_control():
    import control as ct

    f = np.linspace(20, 1000, 60)
    H, true_poles = _rational(f)
    fit = vector_fit(f, H, np.full(60, 1e-3), np.full(60, 1e-3), n_poles=4, tau_s=1.5e-3)
    assert np.max(np.abs(fit.evaluate(f) - H)) < 1e-9
    assert sorted(fit.poles, key=lambda a: a.imag) == pytest.approx(sorted(true_poles, key=lambda a: a.imag), rel=1e-8)
    A, B, C, D, tau = fit.state_space()
    assert np.all(np.isreal(A)) and np.all(np.linalg.eigvals(A).real < 0)     # real and stable
    resp = ct.frequency_response(ct.ss(A, B, C, D), TWO_PI * f)
    assert np.max(np.abs(np.squeeze(resp.complex) * np.exp(-1j * TWO_PI * f * tau) - fit.evaluate(f))) < 1e-9


def test_a_distributed_delay_flame_is_approximated_better_with_more_poles():
    f = np.linspace(20, 1000, 60)
    s = 1j * TWO_PI * f
    G = 1.25 * np.exp(-s * 1.6e-3 + 0.5 * (s * 0.22e-3) ** 2) - 0.25 * np.exp(-s * 2.6e-3 + 0.5 * (s * 0.45e-3) ** 2)
    errors = [np.max(np.abs(vector_fit(f, G, np.full(60, 0.01), np.full(60, 0.01), n).evaluate(f) - G))
              for n in (2, 4, 8)]
    assert errors[0] > errors[1] > errors[2] and errors[2] < 0.06


def test_too_few_points_are_refused():
    with pytest.raises(FitError, match="needs at least"):
        vector_fit([100.0, 200.0, 300.0], [1, 1, 1], [0.1] * 3, [0.1] * 3, n_poles=6)
