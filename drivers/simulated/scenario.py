"""Scenario files of the simulated burner: the TRUE physics behind a rig description.

A scenario TOML names a rig file (path relative to the scenario) and states what the
simulated rig really is: plenum, combustion chamber, flame model, loudspeaker, noise,
the true sensor deviations from the rig's nominal values, the light chain, the ADC,
slow drifts, the random seed and switchable faults. Values with units are strings such
as "300 mm" or "1.2 ms" (app.units); every section and key has a default, so
``Scenario.default_for(rig)`` gives a plausible rig. Unknown keys are errors; problems
are reported as app.errors.ConfigError naming the file and the key. Every number is finite
and within the bounds stated key by key in docs/scenario-file.md (``app.bounds``); in the
file a bare number where a unit is ambiguous (lengths, durations, angles, temperatures) is
refused, and so is a file that looks cut short (no final line break, an empty table), so
a truncated file never falls back to defaults unnoticed.

Imports: standard library, pydantic, app.units, app.bounds, app.configfile, app.errors,
app.rig. Not app.core analysis.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, StrictBool, model_validator

from app.bounds import number, quantity
from app.configfile import load_model, model_from_dict
from app.errors import ConfigError
from app.rig import Rig, load_rig

# Bounds (SI; docs/scenario-file.md states them key by key)
# Lengths and delays are bounded also so that the linear-stability search at start-up stays
# within seconds (a 20 m plenum or a 1 s flame delay holds hundreds of modes in the band), and
# noise corners so that the noise filters stay small (a corner at 1e-9 Hz asked for 4 PB).
Length = quantity("length", 0.0, 3.0, unit="m")
PosLength = quantity("length", 0.0, 3.0, lo_open=True, unit="m")
Diameter = quantity("length", 0.0, 2.0, lo_open=True, unit="m")
Temperature = quantity("temperature", 150.0, 3500.0, lo_open=True, hi_open=True, unit="K")
Frequency = quantity("frequency", 1.0, 1e6, unit="Hz")
Delay = quantity("time", 0.0, 0.02, unit="ms")
Spread = quantity("time", 0.0, 0.005, unit="ms")
FaultTime = quantity("time", 0.0, 1e7, unit="s")
Period = quantity("time", 0.0, 1e7, lo_open=True, unit="s")
Angle = quantity("angle", -2 * math.pi, 2 * math.pi, unit="deg")
Level = quantity("voltage", -100.0, 100.0, unit="V")
PosVoltage = quantity("voltage", 0.0, 100.0, lo_open=True, unit="V")
Fraction = number(0.0, 1.0)
Gain = number(-100.0, 100.0)


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


class Plenum(_Strict):
    """Either a duct (length + diameter) or a lumped volume (volume, m³)."""

    length: Length = 0.30
    diameter: Diameter = 0.20
    volume: number(0.0, 100.0) = 0.0  # m³; > 0 selects the lumped model


class Chamber(_Strict):
    length: PosLength = 0.40
    diameter: Diameter = 0.08
    end_reflection_magnitude: Fraction = 0.9
    end_reflection_phase: Angle = math.pi  # "180 deg": an open end

    @property
    def end_reflection(self) -> complex:
        return self.end_reflection_magnitude * complex(math.cos(self.end_reflection_phase),
                                                       math.sin(self.end_reflection_phase))


class BurnerSpec(_Strict):
    """The burner between the sensor duct and the flame (nozzle, flame holder)."""

    loss_coefficient: number(0.0, 1e4) = 20.0  # ζ: mean pressure drop / (½ρū_ref²)


class DelayTerm(_Strict):
    n: Gain
    tau: Delay
    sigma: Spread = 0.0


class FlameSpec(_Strict):
    model: Literal["n_tau", "gaussian", "conical"] = "gaussian"
    n: Gain = 1.0                        # n_tau
    tau: Delay = 1.5e-3                  # n_tau
    terms: tuple[DelayTerm, ...] = Field(default=(DelayTerm(n=1.0, tau=1.5e-3, sigma=0.4e-3),),
                                         max_length=20)  # gaussian
    radius: quantity("length", 0.0, 1.0, lo_open=True, unit="mm") | None = None  # conical: the nozzle radius
    flame_speed: number(0.0, 100.0, lo_open=True) = 0.4  # conical: S_L in m/s
    half_angle: quantity("angle", 0.0, math.pi / 2, lo_open=True, hi_open=True, unit="deg") = math.radians(20.0)
    temperature: Temperature = 1800.0    # burnt gas temperature
    burnt_gamma: number(1.0, 1.7, lo_open=True, hi_open=True) | None = None  # None: from the gas model
    saturation: number(0.0, 100.0, lo_open=True) | None = 0.35  # peak Q'/Q̄ the flame can reach


class LoudspeakerSpec(_Strict):
    resonance: Frequency = 120.0
    q: number(0.05, 1000.0, lo_open=True) = 1.5
    amplifier_gain: number(0.0, 1e4, lo_open=True) = 10.0
    peak_velocity_per_volt: number(0.0, 100.0, lo_open=True) = 0.02  # m/s per terminal volt
    cone_diameter: quantity("length", 0.0, 2.0, lo_open=True, unit="mm") = 0.13
    compression_voltage: quantity("voltage", 0.0, 1000.0, lo_open=True, unit="V") = 8.0
    second_harmonic_per_volt: number(0.0, 10.0) = 0.01
    third_harmonic_per_volt2: number(0.0, 10.0) = 0.003


class NoiseSpec(_Strict):
    pressure_rms: quantity("pressure", 0.0, 1e4, unit="Pa") = 3.0
    pressure_corner: Frequency = 300.0
    pressure_correlation: Fraction = 0.2
    flame_out_fraction: Fraction = 0.3  # pressure noise left without flame
    electronic_rms: quantity("voltage", 0.0, 1.0, unit="V") = 20e-6
    light_flame_noise: number(0.0, 10.0) = 0.03  # rms of I'/Ī, broadband
    light_corner: Frequency = 1500.0
    light_shot_coefficient: quantity("voltage", 0.0, 1.0, unit="V") = 1e-6  # σ² = coef · mean
    # Noise that travels as sound (docs/scenario-file.md, "Noise that travels as sound"):
    # the share of the pressure noise power near the drive frequency that is a sound field from
    # a source at the plenum (inflow turbulence), reaching every sensor through the network
    acoustic_fraction: Fraction = 0.0
    # the share of the light's flame noise that is heat-release fluctuation radiating sound at the
    # flame (the rest is optical flicker only); the sensors hear it through the network
    flame_noise_radiated: Fraction = 0.0


class FlowMeterError(_Strict):
    """A flow meter's true error: true flow = (1 + error) × the rig file's stated flow."""

    error: number(-0.5, 0.5) = 0.0


class FlowMeterSpec(_Strict):
    reading_spread: number(0.0, 0.2) = 0.0  # relative std of true/stated flow, drawn per meter from the seed
    errors: dict[str, FlowMeterError] = Field(default_factory=dict)  # explicit per meter name


class SensorError(_Strict):
    gain: number(0.0, 10.0, lo_open=True) = 1.0  # true / nominal sensitivity
    phase: Angle = 0.0


class SensorSpec(_Strict):
    sensitivity_spread: number(0.0, 0.5, hi_open=True) = 0.03  # relative std of true/nominal
    phase_spread: quantity("angle", 0.0, math.pi / 2, unit="deg") = math.radians(0.3)
    errors: dict[str, SensorError] = Field(default_factory=dict)  # explicit per channel


class LightSpec(_Strict):
    mean_signal: Level = 2.5  # above the dark offset, with the flame on (at nominal_power)
    dark_offset: Level | None = None  # None: the rig's value
    rail: PosVoltage = 10.5  # detector amplifier output limit
    # the light chain's true small non-linearity β: mean light ∝ P (1 − β P/P_nom) at thermal power P
    # (a burner opened with thermal_power = P; otherwise P = P_nom and the light is mean_signal)
    nonlinearity: number(-0.5, 0.5) = 0.0
    nominal_power: quantity("power", 0.0, 1e7, lo_open=True, unit="kW") = 10e3
    # the lamp mode (commission lamp): the lamp's light above the dark offset at a response of 1, and
    # the chain's true relative response by position label (unlisted positions: 1)
    lamp_signal: PosVoltage = 1.0
    spatial_response: dict[str, number(0.0, 10.0)] = Field(default_factory=dict, max_length=200)


class HotWireSpec(_Strict):
    """The hot-wire's truth (only on a rig with a [hot_wire] table): its King's law and what it sees
    besides the sound (docs/scenario-file.md)."""

    kings_a: number(0.0, 1e4, lo_open=True) | None = None   # true A, V² (None: the rig's)
    kings_b: number(0.0, 1e4, lo_open=True) | None = None   # true B (None: the rig's)
    kings_n: number(0.05, 2.0) | None = None                # true n (None: the rig's)
    # a convective disturbance incoherent with the forcing (turbulence carried with the flow), rms m/s,
    # low-passed at convective_corner
    convective_rms: number(0.0, 100.0) = 0.0
    convective_corner: Frequency = 1000.0
    # a convected wave locked to the forcing: born at the duct's upstream end with this fraction of the
    # acoustic velocity there, carried at the mean duct velocity (the wall pressures do not see it)
    convected_ratio: number(0.0, 10.0) = 0.0
    noise_rms: quantity("voltage", 0.0, 1.0, unit="V") = 100e-6   # the anemometer's electronic noise


class AdcSpec(_Strict):
    bits: number(8, 32, integer=True) = 24
    input_range: PosVoltage | None = None  # None: the rig's acquisition.input_range


class DriftSpec(_Strict):
    temperature_offset_k: number(-1000.0, 1000.0) = 0.0  # true gas temperature minus the rig file's
    temperature_swing_k: number(0.0, 1000.0) = 0.4
    temperature_period: Period = 900.0
    flow_swing: number(0.0, 0.5, hi_open=True) = 0.003  # relative
    flow_period: Period = 420.0


class TransientSpec(_Strict):
    """Acoustic transients (``drivers.simulated.transients``): off by default, the answer quasi-steady."""

    enabled: StrictBool = False
    length: quantity("time", 0.05, 10.0, unit="s") = 1.0          # the impulse response's length
    max_frequency: quantity("frequency", 100.0, 1e6, unit="Hz") = 5000.0   # h's transfer tapered to zero here


class FlameOutFault(_Strict):
    enabled: StrictBool = False
    amplitude: number(0.0, 100.0, lo_open=True) | None = None  # peak |û_ref|/ū_ref that blows the flame off
    time: FaultTime | None = None


class DropoutFault(_Strict):
    enabled: StrictBool = False
    channel: str = ""
    time: FaultTime = 0.0
    level: Level = 1.5e-3  # what the dead channel reads


class LightSaturationFault(_Strict):
    enabled: StrictBool = False
    time: FaultTime = 0.0
    gain_factor: number(0.0, 1e4, lo_open=True) = 20.0


class TimedFault(_Strict):
    enabled: StrictBool = False
    time: FaultTime = 0.0


class OutputGainFault(_Strict):
    enabled: StrictBool = False
    time: FaultTime = 0.0
    factor: number(0.0, 100.0, lo_open=True) = 2.0  # delivered / commanded drive voltage


class Faults(_Strict):
    flame_out: FlameOutFault = FlameOutFault()
    sensor_dropout: DropoutFault = DropoutFault()
    light_saturation: LightSaturationFault = LightSaturationFault()
    drive_disconnect: TimedFault = TimedFault()
    stops_answering: TimedFault = TimedFault()
    output_gain: OutputGainFault = OutputGainFault()


class Scenario(_Strict):
    rig: str = Field(min_length=1)
    seed: number(0, 2**63 - 1, integer=True) = 1
    plenum: Plenum = Plenum()
    chamber: Chamber = Chamber()
    burner: BurnerSpec = BurnerSpec()
    flame: FlameSpec = FlameSpec()
    loudspeaker: LoudspeakerSpec = LoudspeakerSpec()
    noise: NoiseSpec = NoiseSpec()
    sensors: SensorSpec = SensorSpec()
    flow_meters: FlowMeterSpec = FlowMeterSpec()
    light: LightSpec = LightSpec()
    hot_wire: HotWireSpec = HotWireSpec()
    adc: AdcSpec = AdcSpec()
    drift: DriftSpec = DriftSpec()
    transients: TransientSpec = TransientSpec()
    faults: Faults = Faults()
    source_path: str = ""

    @model_validator(mode="after")
    def _flame_terms(self) -> "Scenario":
        if self.flame.model == "gaussian" and not self.flame.terms:
            raise ValueError("flame.terms: the gaussian model needs at least one term")
        return self

    @property
    def rig_path(self) -> Path:
        base = Path(self.source_path).parent if self.source_path else Path.cwd()
        return (base / self.rig).resolve()

    def load_rig(self) -> Rig:
        return load_rig(self.rig_path)

    @classmethod
    def default_for(cls, rig: Rig) -> "Scenario":
        """Plausible default physics for any rig (all sections at their defaults)."""
        return cls(rig=rig.source_path or "<rig>", source_path="")

    def warnings(self, rig: Rig | None = None) -> tuple[str, ...]:
        """What a dry run or the window should tell about this simulated rig before it runs.

        Today: whether it is linearly unstable with its flame lit, at which frequencies
        (``drivers.simulated.stability``). ``rig`` defaults to the rig this file names.
        """
        from .stability import stability  # local: the network code is not needed to load a file

        return stability(self, rig).warnings

    def check_against(self, rig: Rig) -> None:
        """Raise ConfigError if the scenario names channels the rig does not have."""
        where = self.source_path or "<scenario>"
        problems = []
        names = {s.channel for s in rig.pressure_sensors}
        for ch in self.sensors.errors:
            if ch not in names:
                problems.append(f"sensors.errors.{ch}: no pressure sensor '{ch}' in rig {rig.name!r}")
        meters = {f.name for f in rig.gas.flows}
        for name in self.flow_meters.errors:
            if name not in meters:
                problems.append(f"flow_meters.errors.{name}: no flow meter '{name}' in rig {rig.name!r}"
                                f" ({', '.join(sorted(meters)) or 'it states a mean velocity'})")
        drop = self.faults.sensor_dropout
        if drop.enabled and drop.channel not in rig.input_channels:
            problems.append(f"faults.sensor_dropout.channel: '{drop.channel}' is not an input channel of "
                            f"rig {rig.name!r} ({', '.join(rig.input_channels)})")
        if problems:
            raise ConfigError(where, problems)


SCENARIO_DOC = "docs/scenario-file.md"


def scenario_from_dict(data: dict, path: str = "<scenario>", units_required: bool = False) -> Scenario:
    """Validate a scenario given as a dict: SI numbers, or with ``units_required`` (a file's text) units."""
    return model_from_dict(Scenario, data, str(path), SCENARIO_DOC, units_required=units_required)


def load_scenario(path: str | Path) -> Scenario:
    """Load and validate a scenario file (the rig it names is not loaded here); a file that looks
    cut short (no final line break, an empty table) is refused naming the line."""
    return load_model(Scenario, path, SCENARIO_DOC, source_path=str(Path(path).resolve()), complete=True)
