"""Harmonic estimation at a known frequency: complex amplitudes by least squares.

Turns the raw samples of every channel into its complex amplitude at the drive
frequency (plus offset and, on request, harmonics 2f, 3f, ...), with an uncertainty
taken from the noise actually present near that frequency. It runs on every tuning
window and every settled record, so it is built to be fast: 8 channels of 512 000
samples take a few milliseconds.

Convention (e^{+iωt}, PEAK amplitudes, t = n/fs from the first sample):

    x(t) ≈ offset + Re{a e^{+iωt}} + Σ_{k≥2} Re{h_k e^{+ikωt}}

The fit
    Ordinary least squares on the regressors [1, cos kωt, sin kωt] (k = 1..K), exact
    for any (non-integer) number of periods; over an integer number of periods it
    reduces to a = (2/N) Σ x[n] e^{-iωnΔt}. The record is cut into equal segments, and
    those into halves; one matrix product per channel projects every half onto the first
    half of a small local template (the regressors with time restarted at the segment
    start) and of the Hann-tapered fit below, the second halves' projections following by
    a fixed rotation (see ``_segment_projections``); the segment projections are rotated
    to the common time origin and summed, and the Gram matrix is assembled the same way.
    The products run on one BLAS thread (``app.core.blas``). A (2K+1)×(2K+1) solve then serves all
    channels. Harmonics at or within one resolution bin (1/T) of fs/2 cannot be told
    apart from their aliases: they are left out of the fit and reported as NaN.

The noise estimate (not assumed white)
    The same product also gives Hann-weighted least-squares fits of [1, cos ωt, sin ωt]
    on segments of length L overlapping by half (up to S = 32 segments of at least 4
    periods each). From each, the part explained by the full-record model is removed
    exactly (through the known cross-Gram matrix, so offset and harmonics never leak
    in), leaving c_s, the segment's amplitude at f of the residual. For locally white
    noise of two-sided density P (units² per sample) E|c_s|² = P (κ_seg − κ_cross,s)
    exactly, where the κ follow from the least-squares matrices (κ_full = E|δâ|²/P of
    the full-record estimate, ≈ 4/N). Hence

        noise_psd     G = (2/fs) · Σ_s|c_s|² / Σ_s(κ_seg − κ_cross,s)   [units²/Hz, one-sided]
        var_amplitude   = (fs/2) · G · κ_full                            (≈ 2G/T)

    This is unbiased for white noise and, for coloured noise, uses the spectrum
    averaged over the Hann main lobe of a segment, f ± 2S/T — local to f, not the mean
    over all frequencies; the taper keeps strong noise far from f (low-frequency
    rumble) out of the estimate. The reported σ scatters by about 6–7 % from record
    to record with 32 segments; short records (few periods) get fewer segments, a wider
    band and a rougher estimate (one segment below 8 periods).

Derived figures
    sigma_abs = sqrt(var/2) and sigma_phase_rad = sqrt(var/2)/|â| (small-noise limit);
    snr_db = 10 log10( (|â|²/2) / (G/T) ): the sine's power over the noise power in
    the estimator's resolution bandwidth 1/T; distortion = sqrt(Σ|h_k|²)/|â|;
    rms_residual = sqrt(|x − model|²/N), computed as |x|² − bᵀβ without forming the
    residual, so it is exact only to about 1e-8 of the signal's rms.

Pure numpy/scipy: must not import Qt, pyqtgraph, matplotlib, h5py, drivers, the
engine or storage.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
import scipy.fft
from scipy import optimize

from .blas import one_blas_thread

MIN_SAMPLES = 16
MIN_PERIODS = 2.0
MAX_SEGMENTS = 32
MIN_PERIODS_PER_SEGMENT = 4.0
MIN_SAMPLES_PER_SEGMENT = 32


@dataclass(frozen=True)
class HarmonicFit:
    """Complex amplitudes of every channel at one frequency, with their uncertainty."""

    freq_hz: float
    sample_rate_hz: float
    n_samples: int
    amplitude: np.ndarray        # complex (n_ch,), peak, e^{+iωt}, t = 0 at the first sample
    offset: np.ndarray           # (n_ch,)
    harmonics: np.ndarray        # complex (n_ch, n_harmonics-1): 2f, 3f, ...; NaN where not fitted
    noise_psd: np.ndarray        # one-sided PSD of the residual near f, units²/Hz
    var_amplitude: np.ndarray    # E|â − a|² (complex variance), units²
    sigma_abs: np.ndarray        # standard uncertainty of |â|
    sigma_phase_rad: np.ndarray  # standard uncertainty of arg â
    snr_db: np.ndarray           # (|â|²/2) / (noise_psd / T), in dB
    distortion: np.ndarray       # sqrt(Σ|h_k|²)/|â| over fitted harmonics; NaN if none
    rms_residual: np.ndarray     # rms of x − model over the record
    halves: tuple["HarmonicFit", "HarmonicFit"] | None = None  # same model fitted to each half (drift figure)
    cov_amplitude: np.ndarray | None = None  # complex (n_ch, n_ch): E[δâ δâᴴ]; its diagonal is var_amplitude
    noise_csd: np.ndarray | None = None      # complex (n_ch, n_ch) one-sided noise cross-spectral density near f,
                                             # [i, j] = E[X_i X̄_j] (scipy.signal.csd(x[j], x[i])), units²/Hz
    noise_dof: float = float("inf")          # effective degrees of freedom of the noise estimate (Satterthwaite)

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate_hz


@dataclass(frozen=True)
class _Segments:
    length: int   # L, even
    hop: int      # L/2
    count: int    # overlapping segments that fit in the record
    n_full: int   # non-overlapping segments (the even-numbered overlapping ones)


def fit_harmonics(x: np.ndarray, sample_rate_hz: float, freq_hz: float, n_harmonics: int = 1) -> HarmonicFit:
    """Least-squares complex amplitude at ``freq_hz`` (and harmonics) of each channel.

    ``x`` is (n_ch, n) or (n,). Raises ValueError with a plain message for non-finite
    samples, a record shorter than 16 samples or 2 periods, or f not below fs/2.
    """
    with one_blas_thread():
        return _fit_harmonics(x, sample_rate_hz, freq_hz, n_harmonics)


def _fit_harmonics(x: np.ndarray, sample_rate_hz: float, freq_hz: float, n_harmonics: int) -> HarmonicFit:
    data = _as_channels(x)
    n_ch, n = data.shape
    fs, f = float(sample_rate_hz), float(freq_hz)
    _check_frequency(f, fs, n)
    n_harm = _check_n_harmonics(n_harmonics)
    orders = _fitted_orders(f, fs, n, n_harm)
    cycles = f / fs
    seg = _segmentation(n, cycles)
    template = _template(0, seg.length, cycles, orders)
    hann = 0.5 - 0.5 * np.cos(2.0 * np.pi * (np.arange(seg.length) + 0.5) / seg.length)
    n_par = template.shape[1]

    with np.errstate(over="ignore", invalid="ignore"):               # judged by _check_finite
        sum_sq = np.array([np.dot(row, row) for row in data])
    _check_finite(data, sum_sq)
    tapered = template[:, :3] * hann[:, None]                      # Hann fit: offset, cos, sin
    even, hann_proj = _segment_projections(data, seg, template, tapered, cycles, orders)

    rot = _rotations(np.arange(seg.count) * seg.hop, cycles, orders)   # (count, P, P)
    rot_full = rot[0::2]
    tail = _template(seg.n_full * seg.length, n, cycles, orders)
    b = np.einsum("scp,spq->cq", even[:, :, :n_par], rot_full) + data[:, seg.n_full * seg.length:] @ tail
    gram = np.einsum("spq,pr,srt->qt", rot_full, template.T @ template, rot_full) + tail.T @ tail
    gram_inv = np.linalg.inv(gram)
    beta = b @ gram_inv                                                # (n_ch, P)

    var_amp, psd, cov_amp, csd, dof = _noise(hann_proj, rot, beta, template, hann, gram_inv, fs, seg.hop)
    rss = np.maximum(sum_sq - np.einsum("cp,cp->c", b, beta), 0.0)
    halves = None
    split = seg.n_full // 2
    if split >= 1:
        # The first `split` non-overlapping segments against the rest: two more fits of the same
        # model from the projections already made (no second pass over the samples).
        b1 = np.einsum("scp,spq->cq", even[:split, :, :n_par], rot_full[:split])
        g1 = np.einsum("spq,pr,srt->qt", rot_full[:split], template.T @ template, rot_full[:split])
        n1 = split * seg.length
        parts = []
        for b_h, g_h, n_h in ((b1, g1, n1), (b - b1, gram - g1, n - n1)):
            g_h_inv = np.linalg.inv(g_h)
            beta_h = b_h @ g_h_inv
            # Noise density as in the full record; the variance scales with the part's own Gram matrix.
            scale = (g_h_inv[1, 1] + g_h_inv[2, 2]) / (gram_inv[1, 1] + gram_inv[2, 2])
            parts.append(_assemble(beta_h, orders, n_harm, var_amp * scale, psd, np.full(beta.shape[0], np.nan),
                                   f, fs, n_h, cov=(cov_amp * scale, csd, dof)))
        halves = (parts[0], parts[1])
    return _assemble(beta, orders, n_harm, var_amp, psd, rss, f, fs, n, halves, cov=(cov_amp, csd, dof))


def _noise(hann_proj: np.ndarray, rot: np.ndarray, beta: np.ndarray, template: np.ndarray,
           hann: np.ndarray, gram_inv: np.ndarray, fs: float, hop: int
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, float]:
    """(var_amplitude, PSD, amplitude covariance, CSD, degrees of freedom) from Hann-segment fits.

    Segment s fits [1, cos ωt, sin ωt] with Hann weights to the residual x − Dβ; its
    projection of the full-record model is subtracted exactly through the cross-Gram
    matrix, so offset and harmonics never leak in. For white noise of density P the
    fundamental's scatter has E|c_s|² = P (κ_seg − κ_cross,s) exactly (see module notes),
    and for noise of cross-density P_ij, E[c_s,i c̄_s,j] = P_ij (κ_seg − κ_cross,s): the outer
    products of the residual phasors give the whole cross-spectral matrix (Bendat & Piersol,
    Random Data, ch. 9: a cross-spectrum averaged over segments).
    """
    local = template[:, :3]
    gram_h_inv = np.linalg.inv(local.T @ (local * hann[:, None]))
    cross = gram_h_inv @ (local * hann[:, None]).T @ template          # (3, P): A_s D_s = cross R_s
    seen = cross @ rot                                                  # (count, 3, P)
    model = np.matmul(seen[:, None, 1:3, :], beta[None, :, :, None])[..., 0]   # full fit seen by each segment
    scatter = (hann_proj @ gram_h_inv[:, 1:3]) - model                 # (count, n_ch, 2): cos, sin
    sum_sq = np.sum(scatter**2, axis=(0, 2))                           # (n_ch,)
    cov_seg = gram_h_inv @ (local.T @ (local * (hann**2)[:, None])) @ gram_h_inv
    cov_cross = seen @ gram_inv @ seen.transpose(0, 2, 1)
    kappa_seg = cov_seg[1, 1] + cov_seg[2, 2]
    kappa_cross = cov_cross[:, 1, 1] + cov_cross[:, 2, 2]
    norm = np.sum(kappa_seg - kappa_cross)
    density = sum_sq / norm                                            # two-sided, per sample
    phasors = scatter[..., 0] - 1j * scatter[..., 1]                   # (count, n_ch) residual phasors
    cross_density = phasors.T @ phasors.conj() / norm                  # [i, j] = Σ_s c_i c̄_j / Σκ
    kappa_full = gram_inv[1, 1] + gram_inv[2, 2]
    dof = _satterthwaite_dof(cov_seg, seen, gram_inv, gram_h_inv, local * hann[:, None], hop)
    return density * kappa_full, 2.0 * density / fs, cross_density * kappa_full, 2.0 * cross_density / fs, dof


def _satterthwaite_dof(cov_seg: np.ndarray, seen: np.ndarray, gram_inv: np.ndarray,
                       gram_h_inv: np.ndarray, weighted: np.ndarray, hop: int) -> float:
    """Effective degrees of freedom ν = (tr C)²/tr C² of the noise estimate Σ_s|c_s|² for white noise.

    C is the exact covariance of the stacked real (cos, sin) residual coefficients of all segments:
    per segment the Hann fit's own covariance, between half-overlapping neighbours their shared
    samples, minus the part of the full-record model each pair sees. A quadratic form rᵀr with
    r ~ N(0, C) is matched to a scaled χ²_ν by its first two moments (Satterthwaite 1946; the
    Welch–Satterthwaite form of JCGM 100:2008 Annex G).
    """
    count = seen.shape[0]
    stacked = seen[:, 1:3].reshape(2 * count, -1)                    # row 2s + j: coefficient j of segment s
    c = -(stacked @ gram_inv @ stacked.T)
    own = cov_seg[1:3, 1:3]
    overlap = (gram_h_inv @ weighted[hop:].T @ weighted[:hop] @ gram_h_inv)[1:3, 1:3]
    blocks = c.reshape(count, 2, count, 2)                              # a view: [s, j, t, k]
    idx = np.arange(count)
    blocks[idx, :, idx, :] += own
    blocks[idx[:-1], :, idx[1:], :] += overlap
    blocks[idx[1:], :, idx[:-1], :] += overlap.T
    return float(np.trace(c) ** 2 / np.sum(c * c))


def _assemble(beta: np.ndarray, orders: np.ndarray, n_harm: int, var_amp: np.ndarray, psd: np.ndarray,
              rss: np.ndarray, f: float, fs: float, n: int,
              halves: tuple[HarmonicFit, HarmonicFit] | None = None,
              cov: tuple[np.ndarray, np.ndarray, float] | None = None) -> HarmonicFit:
    phasors = beta[:, 1::2] - 1j * beta[:, 2::2]                    # (n_ch, fitted orders)
    amp = phasors[:, 0]
    n_ch = beta.shape[0]
    harmonics = np.full((n_ch, n_harm - 1), np.nan + 1j * np.nan)
    harmonics[:, orders[1:] - 2] = phasors[:, 1:]
    duration = n / fs
    with np.errstate(divide="ignore", invalid="ignore"):
        mag = np.abs(amp)
        sigma_abs = np.sqrt(var_amp / 2.0)
        snr_db = 10.0 * np.log10((mag**2 / 2.0) / (psd / duration))
        if orders.size > 1:
            distortion = np.sqrt(np.sum(np.abs(phasors[:, 1:]) ** 2, axis=1)) / mag
        else:
            distortion = np.full(n_ch, np.nan)
        sigma_phase = sigma_abs / mag
    return HarmonicFit(freq_hz=f, sample_rate_hz=fs, n_samples=n, amplitude=amp, offset=beta[:, 0].copy(),
                       harmonics=harmonics, noise_psd=psd, var_amplitude=var_amp, sigma_abs=sigma_abs,
                       sigma_phase_rad=sigma_phase, snr_db=snr_db, distortion=distortion,
                       rms_residual=np.sqrt(rss / n), halves=halves,
                       cov_amplitude=None if cov is None else cov[0], noise_csd=None if cov is None else cov[1],
                       noise_dof=float("inf") if cov is None else cov[2])


def _segment_projections(data: np.ndarray, seg: _Segments, template: np.ndarray, tapered: np.ndarray,
                         cycles: float, orders: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(even, hann_proj): every non-overlapping segment on the template, (n_full, n_ch, P), and
    every half-overlapping segment on the Hann-tapered local fit, (count, n_ch, 3).

    One pass over the samples, in half-segments of ``hop`` samples, each projected onto the
    first half of the template and of the tapered fit only (time restarts at each segment, so
    these columns do not depend on where a half lies). The second halves follow exactly:
    template[hop + r] = template[r] R_hop (the rotation by the phase at hop), and the Hann
    window's second half is one minus its first, hann[hop + r] = 1 − hann[r], so
    tapered[hop + r] = (template₃[r] − tapered[r]) R₃. Half 2s and 2s + 1 make non-overlapping
    segment s; halves j and j + 1 make Hann segment j. A last Hann segment reaching into the
    tail is projected on its own.
    """
    hop, n_par, n_ch = seg.hop, template.shape[1], data.shape[0]
    halves_n = 2 * seg.n_full
    blocks = data[:, :halves_n * hop].reshape(n_ch, halves_n, hop)
    columns = np.concatenate([template[:hop], tapered[:hop]], axis=1)
    # columnsᵀ @ blocksᵀ: the same product, laid out as OpenBLAS runs fastest for these thin shapes
    half = np.matmul(columns.T, blocks.transpose(0, 2, 1)).transpose(2, 0, 1)   # (halves, n_ch, P + 3)
    on_template, on_taper = half[:, :, :n_par], half[:, :, n_par:]       # (halves, n_ch, P) and (…, 3)
    rot = _rotations(np.array([hop]), cycles, orders)[0]
    even = on_template[0::2] + on_template[1::2] @ rot
    second = (on_template[:, :, :3] - on_taper) @ rot[:3, :3]            # each half as a second half
    hann_proj = np.empty((seg.count, n_ch, 3))
    inside = min(seg.count, halves_n - 1)                                 # segments within the halves
    hann_proj[:inside] = on_taper[:inside] + second[1:inside + 1]
    if seg.count > inside:
        start = inside * hop
        tail = data[:, start:start + (seg.count - inside) * seg.length].reshape(n_ch, seg.count - inside, -1)
        hann_proj[inside:] = np.matmul(tapered.T, tail.transpose(0, 2, 1)).transpose(2, 0, 1)
    return even, hann_proj


def _template(start: int, stop: int, cycles: float, orders: np.ndarray) -> np.ndarray:
    """Regressors [1, cos kωn, sin kωn ...] at sample indices n = start..stop-1.

    e^{iωn} is built as e^{iω(start + jm)}·e^{iωr} for n = start + jm + r (0 ≤ r < m ≈ √count),
    two short exponentials (phases reduced mod 1) and one outer product, and the harmonics as
    its powers: accurate to a few ulp, a fraction of the cost of cos and sin of every phase.
    """
    count = max(stop - start, 0)
    out = np.empty((count, 1 + 2 * orders.size))
    out[:, 0] = 1.0
    if count == 0:
        return out
    m = max(int(np.sqrt(count)), 1)
    rows = -(-count // m)
    coarse = np.exp(2j * np.pi * np.mod((start + m * np.arange(rows)) * cycles, 1.0))
    fine = np.exp(2j * np.pi * np.mod(np.arange(m) * cycles, 1.0))
    first = np.multiply.outer(coarse, fine).reshape(-1)[:count]
    power, k = first, 1
    for i, order in enumerate(orders):
        while k < order:
            power, k = power * first, k + 1
        out[:, 1 + 2 * i] = power.real
        out[:, 2 + 2 * i] = power.imag
    return out


def _rotations(starts: np.ndarray, cycles: float, orders: np.ndarray) -> np.ndarray:
    """R_s with global regressors on segment s = local template @ R_s (block 2×2 per order)."""
    n_par = 1 + 2 * orders.size
    phase = 2.0 * np.pi * np.mod(np.outer(starts, orders * cycles), 1.0)
    c, s = np.cos(phase), np.sin(phase)
    rot = np.zeros((starts.size, n_par, n_par))
    rot[:, 0, 0] = 1.0
    i = np.arange(orders.size)
    rot[:, 1 + 2 * i, 1 + 2 * i] = c
    rot[:, 1 + 2 * i, 2 + 2 * i] = s
    rot[:, 2 + 2 * i, 1 + 2 * i] = -s
    rot[:, 2 + 2 * i, 2 + 2 * i] = c
    return rot


def _segmentation(n: int, cycles: float) -> _Segments:
    periods = n * cycles
    count_target = int(min(MAX_SEGMENTS, periods // MIN_PERIODS_PER_SEGMENT, n // MIN_SAMPLES_PER_SEGMENT))
    count_target = max(count_target, 1)
    length = 2 * (n // (2 * count_target))
    hop = length // 2
    count = (n - length) // hop + 1
    return _Segments(length=length, hop=hop, count=count, n_full=n // length)


def _fitted_orders(f: float, fs: float, n: int, n_harm: int) -> np.ndarray:
    """Harmonic orders (1 first) at least one resolution bin below fs/2."""
    k = np.arange(1, n_harm + 1)
    return k[(fs / 2.0 - k * f) * (n / fs) >= 1.0]


def _as_channels(x: np.ndarray) -> np.ndarray:
    arr = np.asarray(x)
    if np.iscomplexobj(arr):
        raise ValueError("samples must be real, got a complex array")
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2:
        raise ValueError(f"samples must be (n_channels, n_samples) or (n_samples,), got shape {arr.shape}")
    if arr.shape[0] == 0:
        raise ValueError("no channels in the record")
    if arr.shape[1] < MIN_SAMPLES:
        raise ValueError(f"record too short: {arr.shape[1]} samples, need at least {MIN_SAMPLES}")
    return np.ascontiguousarray(arr, dtype=np.float64)


def _check_rate(fs: float) -> None:
    if not np.isfinite(fs) or fs <= 0.0:
        raise ValueError(f"sample rate must be a positive number, got {fs!r} Hz")


def _check_frequency(f: float, fs: float, n: int) -> None:
    _check_rate(fs)
    if not np.isfinite(f) or f <= 0.0:
        raise ValueError(f"frequency must be a positive number, got {f!r} Hz")
    if f >= fs / 2.0:
        raise ValueError(f"frequency {f:g} Hz is not below half the sample rate ({fs / 2.0:g} Hz)")
    duration = n / fs
    if f * duration < MIN_PERIODS:
        raise ValueError(f"record too short: {f * duration:.3g} periods of {f:g} Hz in {duration:.4g} s, "
                         f"need at least {MIN_PERIODS:g}")
    if (fs / 2.0 - f) * duration < 1.0:
        raise ValueError(f"frequency {f:g} Hz is within one resolution bin ({1.0 / duration:.3g} Hz) "
                         f"of half the sample rate ({fs / 2.0:g} Hz)")


def _check_n_harmonics(n_harmonics: int) -> int:
    if isinstance(n_harmonics, bool) or int(n_harmonics) != n_harmonics or n_harmonics < 1:
        raise ValueError(f"n_harmonics must be a whole number >= 1, got {n_harmonics!r}")
    return int(n_harmonics)


def _check_finite(data: np.ndarray, sum_sq: np.ndarray) -> None:
    """Cheap check on the sums; the full scan only runs when something is wrong."""
    if np.all(np.isfinite(sum_sq)):
        return
    for ch in np.flatnonzero(~np.isfinite(sum_sq)):
        bad = np.flatnonzero(~np.isfinite(data[ch]))
        if bad.size:
            raise ValueError(f"channel {ch}: {bad.size} non-finite sample(s), first at index {bad[0]}")
    raise ValueError(f"channel {int(np.flatnonzero(~np.isfinite(sum_sq))[0])}: values too large "
                     "(sum of squares overflows)")


COARSE_SAMPLES = 1 << 15      # samples of the coarse FFT search (the start of the record)
BLOCK_MIN_PERIODS = 8.0       # each refinement block holds at least this many periods
MAX_BLOCKS = 64


def estimate_frequency(x: np.ndarray, sample_rate_hz: float, f_min_hz: float = 1.0,
                       f_max_hz: float | None = None) -> float:
    """Frequency of the strongest sine in one channel, refined to a small fraction of a bin.

    For reprocessing a record whose forcing frequency was not stored: Hann-windowed FFT
    peak in [f_min_hz, f_max_hz] over the first COARSE_SAMPLES samples, interpolated from the
    two largest bins (exact for a pure tone under a Hann window); then refined over the whole
    record from the phase progression of Hann-weighted block phasors at that frequency
    (weighted least squares on the unwrapped phases, near the Cramér–Rao bound when each
    block's tone stands well above the noise; Kay 1989, IEEE Trans. ASSP 37, from memory).
    When the blocks are too noisy for their phases to be followed, the maximum of the power
    explained by a least-squares sine fit is searched instead (the maximum-likelihood estimator
    in white noise; Rife & Boorstyn 1974). Pass the drive or reference channel, as a 1-D array.
    """
    sig = _one_channel(x, check_finite=False)   # checked below: a finite refinement saw every sample
    n = sig.size
    fs = float(sample_rate_hz)
    _check_rate(fs)
    f_max = fs / 2.0 if f_max_hz is None else float(f_max_hz)
    if not (0.0 <= f_min_hz < f_max <= fs / 2.0):
        raise ValueError(f"search band {f_min_hz:g}..{f_max:g} Hz must lie within 0..{fs / 2.0:g} Hz")
    with np.errstate(invalid="ignore", over="ignore"):   # a non-finite sample: found by _require_finite
        head = sig[:min(n, COARSE_SAMPLES)]
        bin_hz = fs / head.size
        spectrum = np.abs(scipy.fft.rfft((head - head.mean()) * _hann_window(head.size)))
        lo = max(int(np.ceil(f_min_hz / bin_hz)), 1)
        hi = min(int(np.floor(f_max / bin_hz)), spectrum.size - 2)
        if hi < lo:
            raise ValueError(f"search band {f_min_hz:g}..{f_max:g} Hz holds no frequency bin of a {head.size}-sample record")
        k = lo + int(np.argmax(spectrum[lo:hi + 1]))
        coarse = (k + _hann_offset(spectrum, k)) * bin_hz
        with one_blas_thread():
            refined = _block_phase_refine(sig, fs, coarse)
        if refined is not None and np.isfinite(refined) and abs(refined - coarse) <= bin_hz:
            return refined
    _require_finite(sig)
    full_bin = fs / n
    left = max(coarse - 0.5 * bin_hz, 1e-3 * full_bin)
    right = min(coarse + 0.5 * bin_hz, fs / 2.0 - 1e-3 * full_bin)
    centred = sig - sig.mean()
    res = optimize.minimize_scalar(lambda fr: -_explained_power(centred, fr / fs), bounds=(left, right),
                                   method="bounded", options={"xatol": 1e-5 * full_bin})
    return float(res.x)


def _block_phase_refine(sig: np.ndarray, fs: float, coarse_hz: float) -> float | None:
    """Frequency from the phase slope of Hann-weighted block phasors at ``coarse_hz``; None when
    the record is too short for 4 blocks or the block phases cannot be followed (noise)."""
    n = sig.size
    periods = n * coarse_hz / fs
    count = int(min(MAX_BLOCKS, periods // BLOCK_MIN_PERIODS))
    if count < 4:
        return None
    length = n // count
    weights = _template(0, length, coarse_hz / fs, np.array([1])).T    # 1, cos ωn, sin ωn
    weights[1:] *= _hann_window(length)
    weights[2] *= -1.0                                                  # 1, Hann-weighted e^{-iωn}
    blocks = sig[:count * length].reshape(count, length)
    if not np.isfinite(np.add.reduce(sig[count * length:])):
        return None                                                     # the caller finds the bad sample
    sums = weights @ blocks.T                                           # one pass (one BLAS thread: caller)
    means = sums[0] / length                                            # each block's offset removed
    w_cos, w_sin = weights[1].sum(), weights[2].sum()
    phasors = (sums[1] - means * w_cos) + 1j * (sums[2] - means * w_sin)
    # Remove the coarse frequency's rotation between block starts, then follow the phase.
    phasors *= np.exp(-2j * np.pi * np.mod(coarse_hz / fs * length * np.arange(count), 1.0))
    power = np.abs(phasors) ** 2
    if not np.all(power > 0):
        return None
    steps = np.angle(phasors[1:] * phasors[:-1].conj())
    phase = np.concatenate([[np.angle(phasors[0])], np.angle(phasors[0]) + np.cumsum(steps)])
    t = np.arange(count) * length / fs
    w = power / power.sum()
    t_mean, p_mean = w @ t, w @ phase
    slope = (w @ ((t - t_mean) * (phase - p_mean))) / (w @ (t - t_mean) ** 2)
    scatter = np.sqrt(w @ (phase - p_mean - slope * (t - t_mean)) ** 2)
    if scatter > 0.3 or np.max(np.abs(steps)) > 1.0:
        return None
    return float(coarse_hz + slope / (2.0 * np.pi))


@functools.lru_cache(maxsize=8)
def _hann_window(size: int) -> np.ndarray:
    """np.hanning(size), computed once per size (read-only)."""
    window = np.hanning(size)
    window.flags.writeable = False
    return window


def _hann_offset(spectrum: np.ndarray, k: int) -> float:
    """Bin offset of a tone from peak bin k under a Hann window (two-bin interpolation)."""
    left, right = spectrum[k - 1], spectrum[k + 1]
    if spectrum[k] <= 0.0:
        return 0.0
    alpha = max(left, right) / spectrum[k]
    delta = (2.0 * alpha - 1.0) / (alpha + 1.0)
    return float(np.clip(delta if right >= left else -delta, -0.5, 0.5))


def _explained_power(sig: np.ndarray, cycles: float) -> float:
    """bᵀG⁻¹b of a cos/sin/offset least-squares fit at ``cycles`` per sample."""
    design = _template(0, sig.size, cycles, np.array([1]))
    b = sig @ design
    return float(b @ np.linalg.solve(design.T @ design, b))


def _one_channel(x: np.ndarray, check_finite: bool = True) -> np.ndarray:
    arr = np.asarray(x)
    if arr.ndim == 2 and arr.shape[0] != 1:
        raise ValueError(f"pass one channel (a 1-D array) to estimate its frequency, got shape {arr.shape}")
    sig = _as_channels(arr)[0]
    if check_finite:
        _require_finite(sig)
    return sig


def _require_finite(sig: np.ndarray) -> None:
    if np.isfinite(np.add.reduce(sig)):   # cheap; the full scan only runs when something may be wrong
        return
    bad = np.flatnonzero(~np.isfinite(sig))
    if bad.size:
        raise ValueError(f"{bad.size} non-finite sample(s), first at index {bad[0]}")
