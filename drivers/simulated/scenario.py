"""Scenario files of the simulated burner: the TRUE physics behind a rig description.

A scenario TOML names a rig file (path relative to the scenario) and states what the
simulated rig really is: plenum, combustion chamber, flame model, loudspeaker, noise,
the true sensor deviations from the rig's nominal values, the light chain, the ADC,
slow drifts, the random seed and switchable faults. Values with units are strings such
as "300 mm" or "1.2 ms" (app.units); every section and key has a default, so
``Scenario.default_for(rig)`` gives a plausible rig. Unknown keys are errors; problems
are reported as app.errors.ConfigError naming the file and the key.

Imports: standard library, pydantic, app.units, app.errors, app.rig. Not app.core analysis.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, model_validator

from app.configfile import load_model, model_from_dict
from app.errors import ConfigError
from app.rig import Rig, load_rig
from app.units import parse_quantity


def _q(kind: str):
    return BeforeValidator(lambda v: parse_quantity(v, kind))


Length = Annotated[float, _q("length"), Field(ge=0.0)]
PosLength = Annotated[float, _q("length"), Field(gt=0.0)]
Temperature = Annotated[float, _q("temperature"), Field(gt=150.0, lt=3500.0)]
Pressure = Annotated[float, _q("pressure"), Field(ge=0.0)]
Voltage = Annotated[float, _q("voltage")]
PosVoltage = Annotated[float, _q("voltage"), Field(gt=0.0)]
Frequency = Annotated[float, _q("frequency"), Field(gt=0.0)]
Time = Annotated[float, _q("time"), Field(ge=0.0)]
PosTime = Annotated[float, _q("time"), Field(gt=0.0)]
Angle = Annotated[float, _q("angle")]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Plenum(_Strict):
    """Either a duct (length + diameter) or a lumped volume (volume, m³)."""

    length: Length = 0.30
    diameter: PosLength = 0.20
    volume: Annotated[float, Field(ge=0.0)] = 0.0  # m³; > 0 selects the lumped model


class Chamber(_Strict):
    length: PosLength = 0.40
    diameter: PosLength = 0.08
    end_reflection_magnitude: Annotated[float, Field(ge=0.0, le=1.0)] = 0.9
    end_reflection_phase: Angle = math.pi  # "180 deg": an open end

    @property
    def end_reflection(self) -> complex:
        return self.end_reflection_magnitude * complex(math.cos(self.end_reflection_phase),
                                                       math.sin(self.end_reflection_phase))


class BurnerSpec(_Strict):
    """The burner between the sensor duct and the flame (nozzle, flame holder)."""

    loss_coefficient: Annotated[float, Field(ge=0.0)] = 20.0  # ζ: mean pressure drop / (½ρū_ref²)


class DelayTerm(_Strict):
    n: float
    tau: Time
    sigma: Time = 0.0


class FlameSpec(_Strict):
    model: Literal["n_tau", "gaussian", "conical"] = "gaussian"
    n: float = 1.0                       # n_tau
    tau: Time = 1.5e-3                   # n_tau
    terms: tuple[DelayTerm, ...] = (DelayTerm(n=1.0, tau=1.5e-3, sigma=0.4e-3),)  # gaussian
    radius: PosLength | None = None      # conical: defaults to the nozzle radius
    flame_speed: Annotated[float, Field(gt=0.0)] = 0.4  # conical: S_L in m/s
    half_angle: Angle = math.radians(20.0)  # conical
    temperature: Temperature = 1800.0    # burnt gas temperature
    burnt_gamma: Annotated[float, Field(gt=1.0, lt=1.7)] | None = None  # None: from the gas model
    saturation: Annotated[float, Field(gt=0.0)] | None = 0.35  # peak Q'/Q̄ the flame can reach


class LoudspeakerSpec(_Strict):
    resonance: Frequency = 120.0
    q: Annotated[float, Field(gt=0.05)] = 1.5
    amplifier_gain: Annotated[float, Field(gt=0.0)] = 10.0
    peak_velocity_per_volt: Annotated[float, Field(gt=0.0)] = 0.02  # m/s per terminal volt
    cone_diameter: PosLength = 0.13
    compression_voltage: PosVoltage = 8.0
    second_harmonic_per_volt: Annotated[float, Field(ge=0.0)] = 0.01
    third_harmonic_per_volt2: Annotated[float, Field(ge=0.0)] = 0.003


class NoiseSpec(_Strict):
    pressure_rms: Pressure = 3.0
    pressure_corner: Frequency = 300.0
    pressure_correlation: Annotated[float, Field(ge=0.0, le=1.0)] = 0.2
    flame_out_fraction: Annotated[float, Field(ge=0.0, le=1.0)] = 0.3  # pressure noise left without flame
    electronic_rms: Annotated[float, _q("voltage"), Field(ge=0.0)] = 20e-6
    light_flame_noise: Annotated[float, Field(ge=0.0)] = 0.03  # rms of I'/Ī, broadband
    light_corner: Frequency = 1500.0
    light_shot_coefficient: Annotated[float, _q("voltage"), Field(ge=0.0)] = 1e-6  # σ² = coef · mean


class SensorError(_Strict):
    gain: Annotated[float, Field(gt=0.0)] = 1.0  # true / nominal sensitivity
    phase: Angle = 0.0


class SensorSpec(_Strict):
    sensitivity_spread: Annotated[float, Field(ge=0.0, lt=0.5)] = 0.03  # relative std of true/nominal
    phase_spread: Angle = math.radians(0.3)
    errors: dict[str, SensorError] = Field(default_factory=dict)  # explicit per channel


class LightSpec(_Strict):
    mean_signal: Voltage = 2.5  # above the dark offset, with the flame on
    dark_offset: Voltage | None = None  # None: the rig's value
    rail: PosVoltage = 10.5  # detector amplifier output limit


class AdcSpec(_Strict):
    bits: Annotated[int, Field(ge=8, le=32)] = 24
    input_range: PosVoltage | None = None  # None: the rig's acquisition.input_range


class DriftSpec(_Strict):
    temperature_offset_k: float = 0.0  # true gas temperature minus the rig file's
    temperature_swing_k: Annotated[float, Field(ge=0.0)] = 0.4
    temperature_period: PosTime = 900.0
    flow_swing: Annotated[float, Field(ge=0.0, lt=0.5)] = 0.003  # relative
    flow_period: PosTime = 420.0


class FlameOutFault(_Strict):
    enabled: bool = False
    amplitude: Annotated[float, Field(gt=0.0)] | None = None  # peak |û_ref|/ū_ref that blows the flame off
    time: Time | None = None


class DropoutFault(_Strict):
    enabled: bool = False
    channel: str = ""
    time: Time = 0.0
    level: Voltage = 1.5e-3  # what the dead channel reads


class LightSaturationFault(_Strict):
    enabled: bool = False
    time: Time = 0.0
    gain_factor: Annotated[float, Field(gt=0.0)] = 20.0


class TimedFault(_Strict):
    enabled: bool = False
    time: Time = 0.0


class OutputGainFault(_Strict):
    enabled: bool = False
    time: Time = 0.0
    factor: Annotated[float, Field(gt=0.0, le=100.0)] = 2.0  # delivered / commanded drive voltage


class Faults(_Strict):
    flame_out: FlameOutFault = FlameOutFault()
    sensor_dropout: DropoutFault = DropoutFault()
    light_saturation: LightSaturationFault = LightSaturationFault()
    drive_disconnect: TimedFault = TimedFault()
    stops_answering: TimedFault = TimedFault()
    output_gain: OutputGainFault = OutputGainFault()


class Scenario(_Strict):
    rig: str = Field(min_length=1)
    seed: int = 1
    plenum: Plenum = Plenum()
    chamber: Chamber = Chamber()
    burner: BurnerSpec = BurnerSpec()
    flame: FlameSpec = FlameSpec()
    loudspeaker: LoudspeakerSpec = LoudspeakerSpec()
    noise: NoiseSpec = NoiseSpec()
    sensors: SensorSpec = SensorSpec()
    light: LightSpec = LightSpec()
    adc: AdcSpec = AdcSpec()
    drift: DriftSpec = DriftSpec()
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
        drop = self.faults.sensor_dropout
        if drop.enabled and drop.channel not in rig.input_channels:
            problems.append(f"faults.sensor_dropout.channel: '{drop.channel}' is not an input channel of "
                            f"rig {rig.name!r} ({', '.join(rig.input_channels)})")
        if problems:
            raise ConfigError(where, problems)


SCENARIO_DOC = "docs/scenario-file.md"


def scenario_from_dict(data: dict, path: str = "<scenario>") -> Scenario:
    return model_from_dict(Scenario, data, str(path), SCENARIO_DOC)


def load_scenario(path: str | Path) -> Scenario:
    """Load and validate a scenario file (the rig it names is not loaded here)."""
    return load_model(Scenario, path, SCENARIO_DOC, source_path=str(Path(path).resolve()))
