"""A rational flame model with a pure delay, F(s) = e^{-sτ} (Σ_k r_k/(s - a_k) + d), s = iω,
fitted by vector fitting (Gustavsen & Semlyen 1999, IEEE Trans. Power Delivery 14:1052), and
its state-space form (A, B, C, D, τ) for time-domain network models.

The delay τ is taken from the phase slope (or given) and removed first; the remaining
response is fitted with ``n_poles`` poles: starting from complex pairs spread over the band,
each iteration solves the linear least-squares problem σ(s) f(s) ≈ p(s) with σ(s) = 1 +
Σ c̃_k/(s - a_k), and the zeros of σ become the next poles (eigenvalues of A - b c̃ᵀ); unstable
poles are reflected into the left half-plane. The residues are then fitted with the poles fixed.
Complex pairs use the real basis 1/(s-a) + 1/(s-ā) and i/(s-a) - i/(s-ā), so the model is real
in the time domain. Each point is weighted by 1/σ_F with σ_F² = σ_g² + g²σ_φ² (its 95 %
intervals over the coverage factor).

Time convention e^{+iωt} (s = iω). Imports: numpy and ``app.core.fits`` (errors) only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .fits import Z95, FitError, _delay_guess

TWO_PI = 2.0 * np.pi


@dataclass(frozen=True)
class RationalFit:
    poles: np.ndarray          # complex, one of each conjugate pair (Im > 0) and the real ones
    residues: np.ndarray       # complex residue at each pole in ``poles``
    d: float
    tau_s: float
    rms_normalised: float      # rms of the weighted residual (about 1 when the model fits within the intervals)
    n_points: int

    model = "rational"

    @property
    def names(self) -> tuple[str, ...]:
        out = ["tau_s", "d"]
        for k, a in enumerate(self.poles):
            out += [f"pole{k + 1}_re", f"pole{k + 1}_im", f"residue{k + 1}_re", f"residue{k + 1}_im"]
        return tuple(out)

    @property
    def values(self) -> np.ndarray:
        v = [self.tau_s, self.d]
        for a, r in zip(self.poles, self.residues):
            v += [a.real, a.imag, r.real, r.imag]
        return np.array(v, dtype=float)

    @property
    def covariance(self) -> np.ndarray:
        """Not estimated for the rational model (NaN): judge it by its residual."""
        return np.full((self.values.size, self.values.size), np.nan)

    @property
    def reduced_chi2(self) -> float:
        return self.rms_normalised ** 2

    @property
    def aic(self) -> float:
        return 2.0 * self.n_points * self.reduced_chi2 + 2.0 * (2 * len(self.poles) + 2)

    def describe(self) -> list[str]:
        lines = [f"delay {self.tau_s * 1e3:.4g} ms, direct term {self.d:.4g}"]
        for a, r in zip(self.poles, self.residues):
            kind = f"pair at {abs(a.imag) / TWO_PI:.4g} Hz" if abs(a.imag) > 0 else "real pole"
            lines.append(f"{kind}: pole {a.real:.4g}{a.imag:+.4g}i 1/s, residue {r.real:.4g}{r.imag:+.4g}i")
        n = self.state_space()[0].shape[0]
        lines.append(f"state-space form: {n} states; rms of the residual over the intervals {self.rms_normalised:.3g} "
                     f"over {self.n_points} points")
        return lines

    def evaluate(self, freq_hz: np.ndarray | float) -> np.ndarray:
        s = 1j * TWO_PI * np.asarray(freq_hz, dtype=float)
        total = np.full(s.shape, self.d, dtype=complex)
        for a, r in zip(self.poles, self.residues):
            total = total + r / (s - a)
            if abs(a.imag) > 0:
                total = total + np.conj(r) / (s - np.conj(a))
        return total * np.exp(-s * self.tau_s)

    def state_space(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, float]:
        """(A, B, C, D, τ), real: ẋ = A x + B u(t - τ), y = C x + D u(t - τ)."""
        blocks, bs, cs = [], [], []
        for a, r in zip(self.poles, self.residues):
            if abs(a.imag) > 0:
                blocks.append(np.array([[a.real, a.imag], [-a.imag, a.real]]))
                bs.append([2.0, 0.0])
                cs.append([r.real, r.imag])
            else:
                blocks.append(np.array([[a.real]]))
                bs.append([1.0])
                cs.append([r.real])
        n = sum(b.shape[0] for b in blocks)
        A = np.zeros((n, n))
        i = 0
        for b in blocks:
            k = b.shape[0]
            A[i:i + k, i:i + k] = b
            i += k
        B = np.concatenate(bs).reshape(n, 1)
        C = np.concatenate(cs).reshape(1, n)
        return A, B, C, np.array([[self.d]]), self.tau_s


def _basis(s: np.ndarray, poles: np.ndarray) -> np.ndarray:
    cols = []
    for a in poles:
        if abs(a.imag) > 0:
            cols.append(1 / (s - a) + 1 / (s - np.conj(a)))
            cols.append(1j / (s - a) - 1j / (s - np.conj(a)))
        else:
            cols.append(1 / (s - a))
    return np.column_stack(cols)


def _pole_matrix(poles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    n = sum(2 if abs(a.imag) > 0 else 1 for a in poles)
    A, b = np.zeros((n, n)), np.zeros(n)
    i = 0
    for a in poles:
        if abs(a.imag) > 0:
            A[i:i + 2, i:i + 2] = [[a.real, a.imag], [-a.imag, a.real]]
            b[i:i + 2] = [2.0, 0.0]
            i += 2
        else:
            A[i, i], b[i] = a.real, 1.0
            i += 1
    return A, b


def _real_ls(M: np.ndarray, rhs: np.ndarray, w: np.ndarray) -> np.ndarray:
    Mr = np.vstack([(M * w[:, None]).real, (M * w[:, None]).imag])
    rr = np.concatenate([(rhs * w).real, (rhs * w).imag])
    scale = np.linalg.norm(Mr, axis=0)
    scale[scale == 0] = 1.0
    x, *_ = np.linalg.lstsq(Mr / scale, rr, rcond=None)
    return x / scale


def _sorted_poles(eig: np.ndarray) -> np.ndarray:
    eig = np.where(eig.real > 0, -np.conj(eig), eig)          # unstable poles reflected
    out = [e for e in eig if e.imag > 1e-9 * max(1.0, abs(e))]
    out += [complex(e.real, 0.0) for e in eig if abs(e.imag) <= 1e-9 * max(1.0, abs(e))]
    return np.array(out, dtype=complex)


def vector_fit(freq_hz, ftf, gain_ci95, phase_ci95_rad, n_poles: int = 4, tau_s: float | None = None,
               iterations: int = 12, coverage: float = Z95) -> RationalFit:
    """Fit the rational model with ``n_poles`` poles (even: conjugate pairs) and a pure delay."""
    f = np.asarray(freq_hz, dtype=float)
    F = np.asarray(ftf, dtype=complex)
    sg = np.asarray(gain_ci95, dtype=float) / coverage
    sp = np.asarray(phase_ci95_rad, dtype=float) / coverage
    ok = np.isfinite(f) & np.isfinite(F) & np.isfinite(sg) & np.isfinite(sp) & (sg > 0) & (sp > 0) & (f > 0)
    f, F, sg, sp = f[ok], F[ok], sg[ok], sp[ok]
    if n_poles < 1 or n_poles > 20:
        raise FitError(f"a rational model needs 1 to 20 poles, got {n_poles}")
    n_par = n_poles + 1 + n_poles           # residues, d, and the pole positions
    if 2 * f.size < n_par + 2:
        raise FitError(f"a rational model with {n_poles} poles needs at least {(n_par + 3) // 2} points with a value "
                       f"and an interval; {f.size} given")
    tau = _delay_guess(f, F) if tau_s is None else float(tau_s)
    s = 1j * TWO_PI * f
    h = F * np.exp(s * tau)                 # the delay removed
    w = 1.0 / np.sqrt(sg ** 2 + (np.abs(F) * sp) ** 2)
    wmin, wmax = TWO_PI * f.min(), TWO_PI * f.max()
    betas = np.linspace(wmin, wmax, max(1, n_poles // 2))
    poles = np.array([complex(-b / 100.0, b) for b in betas][: n_poles // 2] +
                     ([complex(-0.5 * (wmin + wmax), 0.0)] if n_poles % 2 else []), dtype=complex)
    for _ in range(iterations):
        phi = _basis(s, poles)
        M = np.hstack([phi, np.ones((s.size, 1)), -h[:, None] * phi])
        x = _real_ls(M, h, w)
        c_sigma = x[phi.shape[1] + 1:]
        A, b = _pole_matrix(poles)
        poles = _sorted_poles(np.linalg.eigvals(A - np.outer(b, c_sigma)))
    phi = _basis(s, poles)
    M = np.hstack([phi, np.ones((s.size, 1))])
    x = _real_ls(M, h, w)
    residues, j = [], 0
    for a in poles:
        if abs(a.imag) > 0:
            residues.append(complex(x[j], x[j + 1]))
            j += 2
        else:
            residues.append(complex(x[j], 0.0))
            j += 1
    fit = RationalFit(poles, np.array(residues), float(x[-1]), tau, 0.0, int(f.size))
    r = (fit.evaluate(f) - F) * w
    rms = float(np.sqrt(np.mean(np.abs(r) ** 2) / 2.0))
    return RationalFit(poles, np.array(residues), float(x[-1]), tau, rms, int(f.size))
