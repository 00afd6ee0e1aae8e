"""Linear stability of the simulated rig: eigenfrequencies against independent checks.

Convention x(t) = Re{x̂ e^{+iωt}}: with ω = ω_r + iω_i, e^{iωt} = e^{iω_r t} e^{-ω_i t}, so a
mode grows when Im ω < 0 and its growth rate is σ = -Im ω = -2π Im f (derived).

Independent checks: the textbook quarter-wave resonator, a dispersion relation derived by
hand for a closed–open duct with a compact n–τ flame, a brute-force time-domain
(travelling-wave, delay-line) simulation of the same duct, and the half-power bandwidth
of the forced response around a lightly damped mode.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize

from app.rig import load_rig, read_toml
from drivers.simulated import acoustics as ac
from drivers.simulated import flame as fl
from drivers.simulated import stability as st
from drivers.simulated.model import BurnerModel
from drivers.simulated.scenario import load_scenario, scenario_from_dict

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
FS = 51200.0  # time step of the delay-line simulations: every delay is a whole number of steps
RHO1, C1 = 1.2, 340.0


class Duct:
    """Closed (x = 0) – flame (x = L1) – end (x = L1 + L2) duct, no mean flow, no wall losses.

    Both the network (drivers.simulated.acoustics) and the delay-line simulation below
    describe it; the delays are whole numbers of steps so the delay line is exact.
    """

    def __init__(self, theta: float, n: float, reflection: float, steps_1: int, steps_2: int, steps_tau: int,
                 corner_hz: float | None = None) -> None:
        self.theta, self.n, self.reflection = theta, n, reflection
        self.steps = (steps_1, steps_2, steps_tau)
        self.rho2, self.c2 = RHO1 / theta, C1 * math.sqrt(theta)  # same γ and p: ρ ∝ 1/T, c ∝ √T
        self.l1, self.l2, self.tau = C1 * steps_1 / FS, self.c2 * steps_2 / FS, steps_tau / FS
        # Optional one-pole low-pass on the velocity the flame sees, u_f[k] = α u_f[k-1] + (1-α) u[k],
        # so that high-frequency modes are damped; its exact response is part of F below.
        self.alpha = math.exp(-2 * math.pi * corner_hz / FS) if corner_hz else 0.0
        r = 0.02
        tiny = 1e-30  # kinematic viscosity ~ 0: Kirchhoff's factor K = 1 (no wall losses)
        cold = ac.Medium(RHO1, C1, 1.4, tiny, 0.71)
        hot = ac.Medium(self.rho2, self.c2, 1.4, tiny, 0.71)
        self.geometry = ac.BurnerGeometry(0.0, r, 0.0, r, 0.0, self.l1, math.pi * r * r, self.l2, r,
                                          complex(reflection), 0.0)
        self.flow = ac.FlowState(cold, hot, 0.0, 0.0, 0.0, 1.0, theta)

    def flame(self, freq_hz):
        f = np.asarray(freq_hz, dtype=complex)
        lowpass = (1 - self.alpha) / (1 - self.alpha * np.exp(-2j * np.pi * f / FS))
        return fl.n_tau(f, self.n, self.tau) * lowpass

    def characteristic(self, factor: float = 1.0):
        def d(freq_hz):
            f = np.asarray(freq_hz, dtype=complex)
            return ac.BurnerNetwork(self.geometry, self.flow, f, np.empty(0)).characteristic(factor * self.flame(f))
        return d

    def simulate(self, n_steps: int, saturation: float | None = None) -> np.ndarray:
        """Velocity just upstream of the flame (ū = 1 m/s) from a tiny random start.

        Derived: p = f(t - x/c) + g(t + x/c), ρc u = f - g in each segment; rigid end f = g;
        end R: g = R f; at the flame p continuous and u_d = u_u + (θ-1) ū Q'/Q̄ with
        Q'/Q̄ = clip(n u_f(t-τ)/ū, ±a_s) (Dowling 1995's jump, in the time domain).
        """
        s1, s2, st_ = self.steps
        z1, z2 = RHO1 * C1, self.rho2 * self.c2
        b, c, u, uf = np.zeros(n_steps), np.zeros(n_steps), np.zeros(n_steps), np.zeros(n_steps)
        b[:s1] = 1e-6 * np.random.default_rng(0).standard_normal(s1)
        lp = 0.0
        for t in range(s1, n_steps):  # a reference model in a test, not a hot path
            a_in = b[t - 2 * s1] if t >= 2 * s1 else 0.0  # reflected at the rigid end, back at the flame
            d_in = self.reflection * c[t - 2 * s2] if t >= 2 * s2 else 0.0
            q = self.n * (uf[t - st_] if self.alpha else u[t - st_])
            if saturation is not None:
                q = min(max(q, -saturation), saturation)
            src = (self.theta - 1.0) * q
            b[t] = (a_in * (1 / z1 - 1 / z2) + 2 * d_in / z2 + src) / (1 / z1 + 1 / z2)
            c[t] = a_in + b[t] - d_in
            u[t] = (a_in - b[t]) / z1
            lp = self.alpha * lp + (1 - self.alpha) * u[t]
            uf[t] = lp
        return u


def growth_and_frequency(x: np.ndarray, freq_guess_hz: float) -> tuple[float, float]:
    """Exponential growth rate (1/s) of a record's envelope and its dominant frequency."""
    w = int(4 * FS / freq_guess_hz)
    peaks = np.array([np.abs(x[i:i + w]).max() for i in range(0, x.size - w, w)])
    sigma = np.polyfit((np.arange(peaks.size) * w + w / 2) / FS, np.log(peaks), 1)[0]
    t = np.arange(x.size) / FS
    spec = np.abs(np.fft.rfft(x * np.exp(-sigma * t) * np.hanning(x.size)))
    return float(sigma), float(np.fft.rfftfreq(x.size, 1 / FS)[np.argmax(spec)])


def line_amplitude(x: np.ndarray, freq_hz: float) -> float:
    t = np.arange(x.size) / FS
    basis = np.column_stack([np.cos(2 * np.pi * freq_hz * t), np.sin(2 * np.pi * freq_hz * t)])
    return float(np.hypot(*np.linalg.lstsq(basis, x, rcond=None)[0]))


def test_closed_open_duct_modes_are_odd_quarter_waves_and_neutral():
    # Quarter-wave resonator (Kinsler et al., Fundamentals of Acoustics): rigid end, open end
    # (R = -1), one gas (θ = 1), no flame response, no losses: f_k = (2k - 1) c / 4L, Im f = 0.
    duct = Duct(theta=1.0, n=0.0, reflection=-1.0, steps_1=200, steps_2=100, steps_tau=1)
    length = duct.l1 + duct.l2
    zeros, complete = st.find_zeros(duct.characteristic(), 10.0, 1500.0, -50.0, 50.0)
    assert complete
    expected = (2 * np.arange(1, 20) - 1) * C1 / (4 * length)
    expected = expected[expected <= 1500.0]
    assert np.array([z.real for z in zeros]) == pytest.approx(expected, rel=1e-9)
    assert max(abs(z.imag) for z in zeros) < 1e-6


def test_modes_solve_the_hand_derived_dispersion_relation():
    # Derived (e^{+iωt}): upstream p = A cos k₁x, ρ₁c₁u = -iA sin k₁x; downstream, with an open
    # end, p = B sin k₂(L - x), ρ₂c₂u = -iB cos k₂(L - x); at the flame p continuous and
    # u_d = (1 + (θ-1) n e^{-iωτ}) u_u, so
    #   (ρ₁c₁/ρ₂c₂) cos k₁L₁ cos k₂L₂ - (1 + (θ-1) n e^{-iωτ}) sin k₁L₁ sin k₂L₂ = 0.
    duct = Duct(theta=4.0, n=0.5, reflection=-1.0, steps_1=257, steps_2=131, steps_tau=67)

    def relation(f):
        k1, k2 = 2 * np.pi * f / C1, 2 * np.pi * f / duct.c2
        m = 1 + (duct.theta - 1) * duct.n * np.exp(-2j * np.pi * f * duct.tau)
        xi = (RHO1 * C1) / (duct.rho2 * duct.c2)
        return xi * np.cos(k1 * duct.l1) * np.cos(k2 * duct.l2) - m * np.sin(k1 * duct.l1) * np.sin(k2 * duct.l2)

    box = (10.0, 1500.0, -60.0, 60.0)
    zeros, complete = st.find_zeros(duct.characteristic(), *box)
    assert complete and zeros
    assert any(z.imag < 0 for z in zeros) and any(z.imag > 0 for z in zeros)  # growing and decaying modes
    for z in zeros:
        assert abs(relation(z)) < 1e-9
    # The relation's own roots, by scipy from a dense set of starts, are the same set.
    found: list[complex] = []
    for re in np.arange(box[0], box[1], 7.0):
        for im in (-40.0, 0.0, 40.0):
            sol = optimize.root(lambda v: [relation(v[0] + 1j * v[1]).real, relation(v[0] + 1j * v[1]).imag],
                                [re, im], tol=1e-12)
            z = sol.x[0] + 1j * sol.x[1]
            inside = box[0] <= z.real <= box[1] and box[2] <= z.imag <= box[3]
            if sol.success and inside and abs(relation(z)) < 1e-9 and all(abs(z - q) > 1e-6 for q in found):
                found.append(z)
    assert len(found) == len(zeros)
    for z in found:
        assert min(abs(z - q) for q in zeros) < 1e-6


def test_most_unstable_mode_matches_a_time_domain_simulation():
    # Brute force (derived delay-line model of the same duct): from a tiny start the most
    # unstable mode takes over; its envelope grows as e^{σt} with σ = -Im ω (e^{+iωt}).
    duct = Duct(theta=4.0, n=0.6, reflection=-0.8, steps_1=257, steps_2=131, steps_tau=67, corner_hz=200.0)
    zeros, complete = st.find_zeros(duct.characteristic(), 10.0, 5000.0, -300.0, 300.0)
    assert complete
    modes = sorted((st.Mode(z) for z in zeros), key=lambda m: -m.growth_rate_per_s)
    best, second = modes[0], modes[1]
    assert best.unstable and best.complex_freq_hz.imag < 0  # growth ⇔ Im f < 0
    assert best.growth_rate_per_s > 1.5 * second.growth_rate_per_s  # one mode dominates
    u = duct.simulate(80000)
    sigma, freq = growth_and_frequency(u[40000:], best.freq_hz)
    assert sigma == pytest.approx(best.growth_rate_per_s, rel=0.02)
    assert freq == pytest.approx(best.freq_hz, abs=2.0)  # FFT bin 1.28 Hz


def test_limit_cycle_amplitude_matches_a_time_domain_simulation_with_a_clip():
    # Harmonic balance with the clip's describing function (Gelb & Vander Velde 1968) against
    # the delay-line model with Q'/Q̄ = clip(n u_f(t-τ)/ū, ±a_s) run to its limit cycle.
    duct = Duct(theta=4.0, n=0.6, reflection=-0.8, steps_1=257, steps_2=131, steps_tau=67, corner_hz=200.0)
    zeros, _ = st.find_zeros(duct.characteristic(), 10.0, 5000.0, -300.0, 300.0)
    best = max(zeros, key=lambda z: -z.imag)
    saturation = 0.05
    lc = st.harmonic_balance(duct.characteristic, lambda f: abs(duct.flame(f)), saturation, best)
    assert 0.0 < lc.flame_factor < 1.0 and not lc.flow_reversal
    u = duct.simulate(200000, saturation)
    tail = u[-int(FS):]
    assert line_amplitude(tail, lc.freq_hz) == pytest.approx(lc.amplitude_ratio, rel=0.03)
    # and the oscillation really sits at the harmonic-balance frequency (1 s record)
    assert line_amplitude(tail, lc.freq_hz) > 5 * line_amplitude(tail, lc.freq_hz + 3.0)


def test_forced_response_peaks_at_the_mode_with_its_half_power_bandwidth():
    # Common practice (single-mode resonance): near an isolated mode f_r + i f_i the response
    # |H|² ∝ 1/((f - f_r)² + f_i²) peaks at f_r with a half-power bandwidth of 2 f_i = σ/π
    # (decaying mode: f_i > 0 for e^{+iωt}). Dense scan of the demo's source pressure per unit
    # source volume velocity, linear flame.
    sc = load_scenario(CONFIGS / "demo-scenario.toml")
    model = BurnerModel(sc.load_rig(), sc, sc.seed)
    result = st.stability(sc)
    freqs = np.array([m.freq_hz for m in result.modes])

    def isolated(m):
        others = np.delete(freqs, np.flatnonzero(freqs == m.freq_hz))
        return np.min(np.abs(others - m.freq_hz)) > 10 * m.complex_freq_hz.imag

    mode = max((m for m in result.modes if isolated(m) and 100.0 < m.freq_hz < 2500.0),
               key=lambda m: m.growth_rate_per_s)  # the least damped isolated mode
    fi = mode.complex_freq_hz.imag
    assert fi > 0
    f = np.linspace(mode.freq_hz - 6 * fi, mode.freq_hz + 6 * fi, 6001)
    net = ac.BurnerNetwork(model.geometry, model.flow_state(model.nominal_state(), True), f,
                           model.sensor_positions_m)
    p0 = np.abs(net.source_state(model.flame.linear(f), 1.0)[..., 0])
    k = int(np.argmax(p0))
    band = f[p0 >= p0[k] / math.sqrt(2.0)]
    assert f[k] == pytest.approx(mode.freq_hz, abs=0.05 * fi)
    assert band.max() - band.min() == pytest.approx(-mode.growth_rate_per_s / np.pi, rel=0.03)


@pytest.mark.parametrize("name", ["demo-scenario.toml", "resonant-scenario.toml"])
def test_shipped_scenarios_are_linearly_stable(name):
    sc = load_scenario(CONFIGS / name)
    result = st.stability(sc)
    assert result.complete
    assert result.stable, result.warnings
    assert sc.warnings() == ()
    lo, hi = result.band_hz
    assert lo <= 100.0 and hi >= 2000.0  # every plan's band is covered


def test_unstable_rig_is_reported_with_its_frequencies():
    # The demo without its burner loss: linearly unstable (reproduces the runaway's cause).
    data = read_toml(CONFIGS / "demo-scenario.toml")
    data["burner"] = {"loss_coefficient": 0.0}
    sc = scenario_from_dict(data, str(CONFIGS / "demo-scenario.toml"))
    result = st.stability(sc, load_rig(CONFIGS / "demo-rig.toml"))
    assert result.complete and not result.stable
    text = " ".join(sc.warnings())
    assert "linearly unstable" in text and "demo-scenario.toml" in text
    for m in result.unstable_modes:
        assert f"{m.freq_hz:.1f} Hz grows at {m.growth_rate_per_s:.1f} 1/s" in text
    # each reported mode is a zero of the network's characteristic function
    model = BurnerModel(sc.load_rig(), sc, sc.seed)
    d = st.characteristic_of(model, model.nominal_state())
    scale = np.median(np.abs(d(np.array([m.freq_hz for m in result.modes]) + 30j)))
    for m in result.unstable_modes:
        assert abs(d(np.array([m.complex_freq_hz]))[0]) < 1e-8 * scale
    assert result.limit_cycle is not None and result.limit_cycle.flow_reversal
