"""The rig description: one TOML file per rig, validated on load, SI inside.

``load_rig(path)`` returns a frozen :class:`Rig` or raises :class:`ConfigError` whose
message names the file, the key and what is wrong. Axial positions are measured along
the duct axis in the flow direction; the reference plane (usually the burner exit) is
given explicitly and every pressure sensor must lie upstream of it inside the duct.

Imports: standard library, pydantic and ``app.units`` / ``app.errors`` only.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated, Any

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, field_validator, model_validator

from .configfile import load_model, model_from_dict, read_toml  # noqa: F401 (read_toml is re-exported)
from .units import parse_quantity


def _q(kind: str):
    return BeforeValidator(lambda v: parse_quantity(v, kind))


Length = Annotated[float, _q("length")]
Temperature = Annotated[float, _q("temperature"), Field(gt=150.0, lt=3500.0)]
Pressure = Annotated[float, _q("pressure"), Field(gt=1e3, lt=1e7)]
Voltage = Annotated[float, _q("voltage")]
Sensitivity = Annotated[float, _q("sensitivity"), Field(gt=0.0)]
Frequency = Annotated[float, _q("frequency"), Field(gt=0.0)]
Duration = Annotated[float, _q("time"), Field(ge=0.0)]
VolumeFlow = Annotated[float, _q("volume_flow"), Field(ge=0.0)]

RIG_DOC = "docs/rig-file.md"
KNOWN_SPECIES = ("N2", "O2", "AR", "CO2", "H2O", "CH4", "H2", "C3H8", "NH3")
# Dry air by mole fraction (handbook composition, CO2 folded into Ar is not done: kept explicit)
DRY_AIR = {"N2": 0.78084, "O2": 0.20946, "AR": 0.00934, "CO2": 0.00036}


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


def _composition(value: Any) -> dict[str, float]:
    if isinstance(value, str):
        if value.strip().lower() == "air":
            return dict(DRY_AIR)
        raise ValueError(f"unknown mixture name {value!r}; give mole fractions, e.g. {{CH4 = 1.0}}, or 'air'")
    if not isinstance(value, dict) or not value:
        raise ValueError("expected a table of mole fractions, e.g. {CH4 = 0.8, H2 = 0.2}, or 'air'")
    out: dict[str, float] = {}
    for name, frac in value.items():
        key = str(name).upper()
        if key not in KNOWN_SPECIES:
            raise ValueError(f"unknown species {name!r}; known: {', '.join(KNOWN_SPECIES)}")
        if isinstance(frac, bool) or not isinstance(frac, (int, float)) or frac < 0:
            raise ValueError(f"mole fraction of {name} must be a number >= 0, got {frac!r}")
        out[key] = out.get(key, 0.0) + float(frac)
    total = sum(out.values())
    if not 0.98 <= total <= 1.02:
        raise ValueError(f"mole fractions add up to {total:.4f}, not 1")
    return {k: v / total for k, v in out.items()}


Composition = Annotated[dict[str, float], BeforeValidator(_composition)]


class CalibrationPoint(_Strict):
    """Relative correction factor of one sensor at one frequency: p_true = C * p_measured."""

    frequency: Frequency
    gain: float = Field(gt=0.0)
    phase_deg: float = 0.0


class PressureSensor(_Strict):
    channel: str = Field(min_length=1)
    position: Length
    sensitivity: Sensitivity
    weight: float = Field(default=1.0, gt=0.0)
    position_uncertainty: Annotated[float, _q("length"), Field(ge=0.0)] = 0.0
    calibration: tuple[CalibrationPoint, ...] = ()

    def correction(self, freq_hz: float) -> complex:
        """Complex calibration factor at ``freq_hz`` (linear interpolation, held at the ends)."""
        if not self.calibration:
            return 1.0 + 0.0j
        pts = sorted(self.calibration, key=lambda c: c.frequency)
        f = [c.frequency for c in pts]
        g = [c.gain for c in pts]
        ph = [c.phase_deg for c in pts]
        import numpy as np  # local: keep module import light

        gain = float(np.interp(freq_hz, f, g))
        phase = math.radians(float(np.interp(freq_hz, f, ph)))
        return gain * complex(math.cos(phase), math.sin(phase))


class Duct(_Strict):
    radius: Length | None = None
    diameter: Length | None = None
    upstream_end: Length
    reference_plane: Length
    area_ratio: float = Field(default=1.0, gt=0.0, description="A_sensor_section / A_reference_plane")

    @model_validator(mode="after")
    def _size(self) -> "Duct":
        if (self.radius is None) == (self.diameter is None):
            raise ValueError("give exactly one of 'radius' or 'diameter'")
        if self.radius_m <= 0:
            raise ValueError("duct radius must be > 0")
        if self.upstream_end >= self.reference_plane:
            raise ValueError("'upstream_end' must lie upstream of (less than) 'reference_plane'")
        return self

    @property
    def radius_m(self) -> float:
        return float(self.radius if self.radius is not None else self.diameter / 2.0)  # type: ignore[operator]

    @property
    def area_m2(self) -> float:
        return math.pi * self.radius_m**2


class Light(_Strict):
    channel: str = Field(min_length=1)
    sensitivity: float = Field(default=1.0, gt=0.0, description="volts per unit of light; cancels in Q'/Q")
    dark_offset: Voltage = 0.0
    dark_offset_uncertainty: Annotated[float, _q("voltage"), Field(ge=0.0)] = 0.005
    min_flame_signal: Annotated[float, _q("voltage"), Field(gt=0.0)] | None = None
    safe_max: Voltage = 10.0
    filter: str = ""

    def lit_threshold_v(self, dead_rms_v: float = 0.0) -> float:
        """Light above the stated dark offset that means a burning flame: the stated minimum a lit
        flame gives, else four standard uncertainties of the dark offset plus ten noise floors
        (a dark offset mis-stated by a few millivolts never reads as a flame)."""
        if self.min_flame_signal is not None:
            return float(self.min_flame_signal)
        return 4.0 * self.dark_offset_uncertainty + 10.0 * dead_rms_v


class Drive(_Strict):
    channel: str = Field(min_length=1)
    ceiling: Voltage = Field(gt=0.0, description="hard peak-voltage ceiling at the amplifier input")
    ramp_time: Duration = 0.5
    reference_channel: str | None = None


class Flow(_Strict):
    """One flow meter: standard volume flow with the meter's own reference state."""

    name: str = Field(min_length=1)
    composition: Composition
    flow: VolumeFlow
    reference_temperature: Temperature
    reference_pressure: Pressure = 101325.0


class Gas(_Strict):
    temperature: Temperature
    temperature_uncertainty: Annotated[float, _q("temperature_difference"), Field(ge=0.0)] = 0.0
    pressure: Pressure = 101325.0
    temperature_at_reference: Temperature | None = None
    composition: Composition | None = None
    flows: tuple[Flow, ...] = ()
    mean_velocity: Annotated[float, Field(gt=0.0)] | None = None

    @model_validator(mode="after")
    def _one_source(self) -> "Gas":
        given = [self.composition is not None, bool(self.flows)]
        if sum(given) != 1:
            raise ValueError("give either a fixed 'composition' or a list of 'flows', not both or neither")
        if self.composition is not None and self.mean_velocity is None:
            raise ValueError("a fixed 'composition' needs 'mean_velocity' (m/s at the reference plane)")
        return self


class Acquisition(_Strict):
    sample_rate: Frequency = 51200.0
    input_range: Voltage = 10.0
    block_duration: Duration = 0.1


class Rig(_Strict):
    name: str = Field(min_length=1)
    duct: Duct
    pressure_sensors: tuple[PressureSensor, ...] = Field(min_length=2)
    light: Light
    drive: Drive
    gas: Gas
    acquisition: Acquisition = Acquisition()
    hardware: dict[str, dict[str, Any]] = Field(default_factory=dict)
    source_path: str = ""

    @field_validator("pressure_sensors")
    @classmethod
    def _positions_distinct(cls, v: tuple[PressureSensor, ...]) -> tuple[PressureSensor, ...]:
        xs = sorted(s.position for s in v)
        if any(abs(b - a) < 1e-4 for a, b in zip(xs, xs[1:])):
            raise ValueError("two pressure sensors share one axial position; the fit needs distinct positions")
        return v

    @model_validator(mode="after")
    def _channels_and_positions(self) -> "Rig":
        names = [s.channel for s in self.pressure_sensors] + [self.light.channel, self.drive.channel]
        if self.drive.reference_channel:
            names.append(self.drive.reference_channel)
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise ValueError(f"duplicate channel name(s): {', '.join(dupes)}")
        for i, s in enumerate(self.pressure_sensors):
            if not self.duct.upstream_end <= s.position <= self.duct.reference_plane:
                raise ValueError(
                    f"pressure_sensors[{i}] ('{s.channel}') at {s.position * 1e3:.1f} mm lies outside the duct "
                    f"({self.duct.upstream_end * 1e3:.1f} mm to {self.duct.reference_plane * 1e3:.1f} mm)")
        return self

    @property
    def input_channels(self) -> tuple[str, ...]:
        """Names of every recorded channel: pressures, light, then the drive reference if wired."""
        chans = [s.channel for s in self.pressure_sensors] + [self.light.channel]
        if self.drive.reference_channel:
            chans.append(self.drive.reference_channel)
        return tuple(chans)

    def sensor(self, channel: str) -> PressureSensor:
        for s in self.pressure_sensors:
            if s.channel == channel:
                return s
        raise KeyError(channel)


def rig_from_dict(data: dict[str, Any], path: str = "<rig>") -> Rig:
    return model_from_dict(Rig, data, str(path), RIG_DOC)


def load_rig(path: str | Path) -> Rig:
    """Load and validate a rig file."""
    return load_model(Rig, path, RIG_DOC)
