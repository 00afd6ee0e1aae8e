"""Linear stability of a simulated rig: the complex eigenfrequencies of its acoustic network.

Time convention x(t) = Re{x̂ e^{+iωt}} (the project's). A mode is a zero of the network's
characteristic function D(ω) (``BurnerNetwork.characteristic``: the speaker at rest is a
rigid wall, the chamber exit keeps its reflection coefficient, the flame acts through its
linear FTF continued analytically to complex ω). Writing ω = ω_r + iω_i,
e^{iωt} = e^{iω_r t} e^{-ω_i t}, so a mode GROWS when Im ω < 0; its growth rate is
σ = -Im ω (1/s) and it oscillates at Re ω / 2π (Hz). (Derived; papers written with
e^{-iωt} have the opposite sign: growth there is Im ω > 0.)

Modes are searched in a rectangle of the complex frequency plane f = ω/2π: the real part
over the band the rig can measure (``measurable_band_hz``) and the imaginary part over
± ``growth_span_hz``. Candidates are the local minima of |D| on a grid, refined by Newton's
method; the argument principle on the rectangle's edge counts the zeros inside and the
search is refined until the two agree (``Stability.complete`` says whether they did).

A linearly unstable rig does not have a steady forced response: a real rig is
self-excited, its oscillation grows until the flame saturates (a limit cycle) or reverses
the flow at the reference plane and blows the flame off. ``limit_cycle`` finds that
amplitude by harmonic balance with the clip's describing function (the amplitude at which
the saturated flame F·N makes the growing mode neutral).

Imports: numpy, app.rig and this package (model, acoustics, flame, faults, scenario). Never the
core's estimators (multimic, harmonic, response, quality).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from app.rig import Rig

from .faults import FLOW_REVERSAL
from .flame import clip_describing_function
from .model import BurnerModel, DriftState
from .scenario import Scenario

TWO_PI = 2.0 * np.pi
LOW_EDGE_HZ = 10.0  # below this the flow is quasi-steady and no plan sweeps; 1-D model's D has a branch point at 0
BESSEL_J1_PRIME_ZERO = 1.8412  # first zero of J1': cut-on of the (1,1) duct mode, k r = 1.8412 (from memory)
START_RATIO = 1e-3  # |û_ref|/ū_ref of a growing mode at lighting, seeded by flow noise (an assumption)

Characteristic = Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class Mode:
    """One eigenfrequency. ``complex_freq_hz`` is ω/2π; growth σ = -Im ω (e^{+iωt})."""

    complex_freq_hz: complex

    @property
    def freq_hz(self) -> float:
        return float(self.complex_freq_hz.real)

    @property
    def growth_rate_per_s(self) -> float:
        """σ = -Im ω: > 0 grows as e^{σt}, < 0 decays."""
        return float(-TWO_PI * self.complex_freq_hz.imag)

    @property
    def unstable(self) -> bool:
        return self.growth_rate_per_s > 0.0

    def describe(self) -> str:
        sigma = self.growth_rate_per_s
        if sigma > 0.0:
            return f"{self.freq_hz:.1f} Hz grows at {sigma:.1f} 1/s (amplitude ×e every {1e3 / sigma:.1f} ms)"
        return f"{self.freq_hz:.1f} Hz decays at {-sigma:.1f} 1/s"


@dataclass(frozen=True)
class LimitCycle:
    """Harmonic balance of a growing mode with the saturating flame (peak amplitude ratio)."""

    freq_hz: float
    amplitude_ratio: float  # peak |û_ref|/ū_ref of the self-excited oscillation; inf: no saturation
    flame_factor: float  # N: the describing-function factor at that amplitude

    @property
    def flow_reversal(self) -> bool:
        return not self.amplitude_ratio < FLOW_REVERSAL

    def time_to_reversal_s(self, growth_rate_per_s: float, start_ratio: float = START_RATIO) -> float:
        """When the growing oscillation reaches flow reversal (Stuart–Landau, see selfexcited); inf: never."""
        if not self.flow_reversal or growth_rate_per_s <= 0.0:
            return math.inf
        inv_lim = 0.0 if math.isinf(self.amplitude_ratio) else 1.0 / self.amplitude_ratio**2
        ratio = (1.0 / FLOW_REVERSAL**2 - inv_lim) / (1.0 / start_ratio**2 - inv_lim)
        return -math.log(ratio) / (2.0 * growth_rate_per_s)


@dataclass(frozen=True)
class Stability:
    """Modes of a rig with its linear flame, over ``band_hz``."""

    modes: tuple[Mode, ...]  # sorted by frequency
    band_hz: tuple[float, float]
    growth_span_hz: float  # searched |Im f| (growth rates up to 2π × this)
    complete: bool  # the argument principle agrees with the modes found
    limit_cycle: LimitCycle | None = None  # of the most unstable mode, if any
    where: str = "<scenario>"

    @property
    def unstable_modes(self) -> tuple[Mode, ...]:
        return tuple(m for m in self.modes if m.unstable)

    @property
    def stable(self) -> bool:
        return not self.unstable_modes

    @property
    def warnings(self) -> tuple[str, ...]:
        """Plain-language warnings for a dry run or the window (empty when all is well)."""
        out = []
        lo, hi = self.band_hz
        if self.unstable_modes:
            modes = "; ".join(m.describe() for m in self.unstable_modes)
            text = (f"{self.where}: the simulated rig is linearly unstable (self-excited) with its flame lit, "
                    f"in {lo:.0f}-{hi:.0f} Hz: {modes}.")
            lc = self.limit_cycle
            if lc is not None and lc.flow_reversal:
                worst = max(self.unstable_modes, key=lambda m: m.growth_rate_per_s)
                t_ms = 1e3 * lc.time_to_reversal_s(worst.growth_rate_per_s)
                text += (f" Its oscillation at {lc.freq_hz:.0f} Hz would reach flow reversal at the reference "
                         f"plane: the simulated flame blows off about {t_ms:.0f} ms after it is lit.")
            elif lc is not None:
                text += (f" It settles into a limit cycle at {lc.freq_hz:.0f} Hz with peak |u'|/u_mean = "
                         f"{lc.amplitude_ratio:.2f}, which the simulator adds to the signals.")
            out.append(text)
        if not self.complete:
            out.append(f"{self.where}: the mode search in {lo:.0f}-{hi:.0f} Hz did not account for every "
                       "zero; the stability verdict may be incomplete.")
        return tuple(out)


# ---------------------------------------------------------------------- zeros of an analytic function
def winding_number(func: Characteristic, re_lo: float, re_hi: float, im_lo: float, im_hi: float,
                   n_per_edge: int = 2000, max_doublings: int = 5) -> int | None:
    """Zeros of ``func`` inside the rectangle, by the argument principle (None: not resolved).

    The edge is sampled until no phase step exceeds π/4 (the change of arg D between
    neighbouring samples must be well below π to be unwrapped without ambiguity).
    """
    for _ in range(max_doublings + 1):
        t = np.linspace(0.0, 1.0, n_per_edge, endpoint=False)
        edges = np.concatenate([re_lo + (re_hi - re_lo) * t + 1j * im_lo,
                                re_hi + 1j * (im_lo + (im_hi - im_lo) * t),
                                re_hi - (re_hi - re_lo) * t + 1j * im_hi,
                                re_lo + 1j * (im_hi - (im_hi - im_lo) * t)])
        with np.errstate(all="ignore"):  # a flame model may have poles off the real axis
            d = func(edges)
        if np.any(~np.isfinite(d)) or np.any(d == 0.0):
            return None
        step = np.angle(np.roll(d, -1) / d)
        if np.max(np.abs(step)) < np.pi / 4:
            return int(round(np.sum(step) / TWO_PI))
        n_per_edge *= 2
    return None


def _newton(func: Characteristic, z: np.ndarray, step_hz: float, iterations: int = 40) -> tuple[np.ndarray, np.ndarray]:
    """Vectorised Newton on an analytic function with a central-difference derivative.

    Steps are limited to 2 × ``step_hz`` so a start stays near its grid cell; converged
    means the last step was below 1e-9 of the frequency (or 1e-9 Hz).
    """
    h = 1e-4 * step_hz
    z = np.asarray(z, dtype=complex).copy()
    ok = np.zeros(z.shape, dtype=bool)
    with np.errstate(all="ignore"):
        for _ in range(iterations):
            d0 = func(z)
            deriv = (func(z + h) - func(z - h)) / (2.0 * h)
            dz = np.where(np.isfinite(deriv) & (deriv != 0.0), d0 / deriv, 0.0)
            big = np.abs(dz) > 2.0 * step_hz
            dz = np.where(big, 2.0 * step_hz * dz / np.where(big, np.abs(dz), 1.0), dz)
            z = z - dz
            ok = np.isfinite(z) & (np.abs(dz) < 1e-9 * np.maximum(np.abs(z), 1.0))
            if ok.all():
                break
    return z, ok


def find_zeros(func: Characteristic, re_lo: float, re_hi: float, im_lo: float, im_hi: float,
               step_hz: float = 10.0, max_refinements: int = 3) -> tuple[list[complex], bool]:
    """All zeros of an analytic ``func`` (of complex frequency in Hz) inside the rectangle.

    Returns the zeros sorted by real part and whether their number matches the argument
    principle. The grid is refined (step halved) until it does, at most ``max_refinements``.
    """
    expected = winding_number(func, re_lo, re_hi, im_lo, im_hi)
    zeros: list[complex] = []
    for _ in range(max_refinements + 1):
        re = np.arange(max(re_lo - step_hz, 0.5 * re_lo), re_hi + 1.5 * step_hz, step_hz)
        im = np.arange(im_lo - step_hz, im_hi + 1.5 * step_hz, step_hz)
        grid = re[None, :] + 1j * im[:, None]
        with np.errstate(all="ignore"):
            mag = np.abs(func(grid))
        mag = np.where(np.isfinite(mag), mag, np.inf)
        pad = np.pad(mag, 1, constant_values=np.inf)
        centre = pad[1:-1, 1:-1]
        is_min = np.ones(mag.shape, dtype=bool)
        for di in (-1, 0, 1):
            for dj in (-1, 0, 1):
                if di or dj:
                    is_min &= centre <= pad[1 + di:pad.shape[0] - 1 + di, 1 + dj:pad.shape[1] - 1 + dj]
        roots, ok = _newton(func, grid[is_min], step_hz)
        inside = ok & (roots.real >= re_lo) & (roots.real <= re_hi) & (roots.imag >= im_lo) & (roots.imag <= im_hi)
        for r in sorted(roots[inside], key=lambda v: (v.real, v.imag)):
            if all(abs(r - q) > 1e-6 * max(abs(r), 1.0) for q in zeros):
                zeros.append(complex(r))
        zeros.sort(key=lambda v: v.real)
        if expected is not None and len(zeros) == expected:
            return zeros, True
        step_hz *= 0.5
    return zeros, False


# ---------------------------------------------------------------------- the simulated rig
def measurable_band_hz(model: BurnerModel, state: DriftState | None = None) -> tuple[float, float]:
    """Band the rig can measure with plane waves: LOW_EDGE_HZ up to the sensor duct's first
    transverse cut-on f = 1.8412 c / (2π r) (from memory), and below 0.45 × the sample rate."""
    state = model.nominal_state() if state is None else state
    c = model.flow_state(state, flame=False).cold.speed_of_sound_m_s
    cut_on = BESSEL_J1_PRIME_ZERO * c / (TWO_PI * model.geometry.duct_radius_m)
    return LOW_EDGE_HZ, float(min(cut_on, 0.45 * model.rig.acquisition.sample_rate))


def characteristic_of(model: BurnerModel, state: DriftState, flame_factor: float = 1.0) -> Characteristic:
    """D(f) of the lit rig with flame response ``flame_factor`` × its linear FTF (f complex, Hz)."""
    from .acoustics import BurnerNetwork  # local: the network per call, at complex frequencies

    flow = model.flow_state(state, flame=True)

    def d(freq_hz: np.ndarray) -> np.ndarray:
        f = np.asarray(freq_hz, dtype=complex)
        net = BurnerNetwork(model.geometry, flow, f, np.empty(0))  # no sensors: only D is needed
        return net.characteristic(flame_factor * model.flame.linear(f))

    return d


def modes_of(model: BurnerModel, state: DriftState | None = None, band_hz: tuple[float, float] | None = None,
             growth_span_hz: float | None = None, flame_factor: float = 1.0) -> tuple[list[Mode], bool, float]:
    """Modes of the lit rig in the band; (modes, complete, searched |Im f|)."""
    state = model.nominal_state() if state is None else state
    lo, hi = measurable_band_hz(model, state) if band_hz is None else band_hz
    span = max(50.0, 0.1 * hi) if growth_span_hz is None else growth_span_hz
    zeros, complete = find_zeros(characteristic_of(model, state, flame_factor), lo, hi, -span, span)
    return [Mode(z) for z in zeros], complete, span


def harmonic_balance(characteristic_for: Callable[[float], Characteristic], flame_gain_at: Callable[[float], float],
                     saturation: float | None, start: complex, steps: int = 25) -> LimitCycle:
    """Limit cycle of the mode at ``start`` when the flame's response is clipped at ±a_s.

    ``characteristic_for(N)`` is D(f) with the flame response N × F_lin. The neutral factor
    N* is found by continuation of the mode from N = 1 down towards 0 and bisection on the
    sign of its growth rate: the oscillation grows from small, so N falls from 1 and the
    first neutral point is where it stops. The amplitude follows from N* = N_clip(γ),
    γ = a_s / (|F_lin| a) (describing function of the clip, flame.py). No neutral point
    (or no saturation) gives an infinite amplitude: nothing stops the growth before the
    flow reverses.
    """
    factors = np.linspace(1.0, 0.0, steps + 1)
    path, z = [], complex(start)
    for s in factors:  # continuation: each root starts Newton for the next factor
        roots, ok = _newton(characteristic_for(float(s)), np.array([z]), 1.0)
        if not ok[0]:
            break
        z = complex(roots[0])
        path.append(z)
    growth = [-p.imag for p in path]
    crossing = next((i for i in range(1, len(path)) if growth[i] <= 0.0 < growth[i - 1]), None)
    if crossing is None or saturation is None:
        return LimitCycle(float(start.real), math.inf, 0.0)
    hi_n, lo_n, z = float(factors[crossing - 1]), float(factors[crossing]), path[crossing - 1]
    for _ in range(40):  # bisection on N: the mode grows above the neutral factor
        mid = 0.5 * (hi_n + lo_n)
        roots, ok = _newton(characteristic_for(mid), np.array([z]), 1.0)
        if not ok[0]:
            break
        if -roots[0].imag > 0.0:
            hi_n, z = mid, complex(roots[0])
        else:
            lo_n = mid
    n_lc, f_lc = 0.5 * (hi_n + lo_n), float(z.real)
    gain = float(flame_gain_at(f_lc))
    g_lo, g_hi = 0.0, 1.0  # N_clip(γ) rises monotonically from 0 to 1 on [0, 1]
    for _ in range(60):
        g = 0.5 * (g_lo + g_hi)
        g_lo, g_hi = (g, g_hi) if clip_describing_function(g) < n_lc else (g_lo, g)
    gamma = 0.5 * (g_lo + g_hi)
    amplitude = saturation / (gain * gamma) if gamma > 0.0 and gain > 0.0 else math.inf
    return LimitCycle(f_lc, amplitude, n_lc)


def limit_cycle(model: BurnerModel, mode: Mode, state: DriftState | None = None) -> LimitCycle:
    """Harmonic balance of one growing mode of the simulated rig (see :func:`harmonic_balance`)."""
    state = model.nominal_state() if state is None else state
    return harmonic_balance(lambda n: characteristic_of(model, state, n),
                            lambda f: abs(complex(model.flame.linear(f))), model.flame.saturation,
                            mode.complex_freq_hz)


_CACHE: dict[tuple, Stability] = {}


def stability(scenario: Scenario, rig: Rig | None = None, band_hz: tuple[float, float] | None = None) -> Stability:
    """Linear stability of the simulated rig (scenario + rig) with its flame lit, at the nominal state."""
    rig = scenario.load_rig() if rig is None else rig
    physics = scenario.model_dump_json(include={"plenum", "chamber", "burner", "flame", "drift"})
    key = (physics, rig.model_dump_json(), band_hz, scenario.source_path)
    hit = _CACHE.get(key)
    if hit is not None:
        return hit
    model = BurnerModel(rig, scenario, scenario.seed)
    modes, complete, span = modes_of(model, band_hz=band_hz)
    unstable = [m for m in modes if m.unstable]
    lc = limit_cycle(model, max(unstable, key=lambda m: m.growth_rate_per_s)) if unstable else None
    band = measurable_band_hz(model) if band_hz is None else band_hz
    result = Stability(tuple(modes), band, span, complete, lc, scenario.source_path or "<scenario>")
    if len(_CACHE) > 32:
        _CACHE.clear()
    _CACHE[key] = result
    return result
