"""The self-excited oscillation of a linearly unstable simulated rig, as signals.

A rig whose network is unstable with the linear flame (``stability``) has no steady forced
response: from the moment the flame is lit its most unstable mode grows out of the flow
noise until the flame saturates (a limit cycle) or the flow at the reference plane
reverses and the flame blows off. The simulator shows that instead of a forced response
that no real rig would show:

* Amplitude: the Stuart–Landau equation da/dt = σ a (1 - a²/a_∞²) (common practice for a
  single mode near a Hopf point, from memory), solved exactly:
  a(t) = 1 / √(1/a_∞² + (1/a₀² - 1/a_∞²) e^{-2σt}) (derived), with the linear growth rate
  σ of the mode, the limit-cycle amplitude a_∞ from harmonic balance (``limit_cycle``;
  infinite for a flame without saturation) and a₀ = ``START_RATIO`` at lighting.
* Shape and frequency: the neutral mode of the harmonic balance (rigid speaker end), so
  û_ref = a(t) ū e^{i(ω t + φ₀)} (e^{+iωt}) and the sensors see the mode's pressures.
* The flame: Q′/Q̄ is clipped on the sum of the forced and self-excited parts. A small
  forcing line then meets a flame that the oscillation keeps saturated; its effective
  gain is the mean slope of the clip over the oscillation's cycle,
  N_inc = (2/π) asin(a_s/(|F| a)) (derived: the fraction of the cycle spent inside the
  clip), which the forced response uses as a cap on the flame factor.

Not modelled: the change of shape and frequency between the linear mode and the limit
cycle, competition between several unstable modes (the most unstable one is taken),
lock-in or quenching of the oscillation by a strong forcing, and the oscillation's
harmonics. The flow-reversal blow-off (``faults``) acts on the total |û_ref|/ū_ref.

Imports: numpy and this package (stability, model, flame). Never the core's estimators.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .model import BurnerModel
from .stability import START_RATIO, Stability
TWO_PI = 2.0 * np.pi


@dataclass(frozen=True)
class SelfExcitation:
    freq_hz: float
    growth_rate_per_s: float  # σ of the linear mode (> 0)
    limit_ratio: float  # a_∞, peak |û_ref|/ū_ref of the limit cycle (inf without saturation)
    pressure_per_ratio: np.ndarray  # complex Pa at each sensor per unit û_ref/ū_ref
    flame_linear: complex  # linear FTF at freq_hz
    incremental_factor: float  # N_inc: flame gain left for a small forcing line, 0..1
    phase_rad: float
    start_ratio: float = START_RATIO

    def envelope(self, time_s: np.ndarray) -> np.ndarray:
        """Peak |û_ref|/ū_ref of the oscillation at ``time_s`` after lighting (Stuart–Landau)."""
        inv_lim = 0.0 if math.isinf(self.limit_ratio) else 1.0 / self.limit_ratio**2
        decay = np.exp(-2.0 * self.growth_rate_per_s * np.maximum(np.asarray(time_s, dtype=float), 0.0))
        return 1.0 / np.sqrt(inv_lim + (1.0 / self.start_ratio**2 - inv_lim) * decay)

    def velocity_ratio(self, time_s: np.ndarray) -> np.ndarray:
        """Analytic û_ref/ū_ref of the oscillation (e^{+iωt})."""
        t = np.asarray(time_s, dtype=float)
        return self.envelope(t) * np.exp(1j * (TWO_PI * self.freq_hz * t + self.phase_rad))


def incremental_factor(saturation: float | None, flame_gain: float, amplitude_ratio: float) -> float:
    """N_inc = (2/π) asin(a_s / (|F| a)) for a clip driven by a large sine (1 below the clip)."""
    if saturation is None:
        return 1.0  # no clip: the flame stays linear (and the oscillation grows until blow-off)
    level = flame_gain * amplitude_ratio
    if math.isinf(level):
        return 0.0
    if level <= saturation:
        return 1.0
    return (2.0 / math.pi) * math.asin(saturation / level)


def self_excitation(model: BurnerModel, result: Stability, phase_rad: float = 0.0) -> SelfExcitation | None:
    """The oscillation of the most unstable mode of ``result``, or None for a stable rig."""
    if result.stable or result.limit_cycle is None:
        return None
    lc = result.limit_cycle
    mode = max(result.unstable_modes, key=lambda m: m.growth_rate_per_s)
    f = lc.freq_hz if not math.isinf(lc.amplitude_ratio) else mode.freq_hz
    state = model.nominal_state()
    from .acoustics import BurnerNetwork  # the network at the oscillation's frequency

    net = BurnerNetwork(model.geometry, model.flow_state(state, flame=True), f, model.sensor_positions_m)
    rigid = np.array([1.0 + 0j, 0.0 + 0j])  # [p̂, û] at the speaker at rest
    u_ref = complex(net.reference_velocity(rigid))
    p = net.sensor_pressures(rigid)
    u_bar = net.flow.velocity_reference_m_s
    f_lin = complex(model.flame.linear(f))
    return SelfExcitation(freq_hz=float(f), growth_rate_per_s=mode.growth_rate_per_s,
                          limit_ratio=float(lc.amplitude_ratio), pressure_per_ratio=p * u_bar / u_ref,
                          flame_linear=f_lin,
                          incremental_factor=incremental_factor(model.flame.saturation, abs(f_lin),
                                                                lc.amplitude_ratio),
                          phase_rad=float(phase_rad))
