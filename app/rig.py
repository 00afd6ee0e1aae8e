"""The rig description: one TOML file per rig, validated on load, SI inside.

``load_rig(path)`` returns a frozen :class:`Rig` or raises :class:`ConfigError` whose
message names the file, the key and what is wrong. Axial positions are measured along
the duct axis in the flow direction; the reference plane (usually the burner exit) is
given explicitly and every pressure sensor must lie upstream of it inside the duct.

Every number is finite and within the bounds stated key by key in docs/rig-file.md
(``app.bounds``); in a file, a bare number where a unit is ambiguous is refused.

Imports: standard library, pydantic and ``app.units`` / ``app.bounds`` / ``app.configfile`` /
``app.errors`` only.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, field_validator, model_validator

from .bounds import number, quantity
from .configfile import load_model, model_from_dict, read_toml  # noqa: F401 (read_toml is re-exported)

# Bounds of every number (SI; see docs/rig-file.md, which states them key by key). Wide enough
# for any laboratory rig, narrow enough that a slip of unit or a non-number is refused.
Position = quantity("length", -10.0, 10.0, unit="m")
MAX_DUCT_M = 10.0        # sensor duct length; also keeps the simulator's stability search to seconds
Temperature = quantity("temperature", 150.0, 3500.0, lo_open=True, hi_open=True, unit="K")
MeterTemperature = quantity("temperature", 200.0, 400.0, unit="K")
Pressure = quantity("pressure", 1e3, 1e7, lo_open=True, hi_open=True, unit="Pa")
Sensitivity = quantity("sensitivity", 1e-7, 10.0, unit="V/Pa")
Frequency = quantity("frequency", 0.0, 1e6, lo_open=True, unit="Hz")
VolumeFlow = quantity("volume_flow", 0.0, 1.0, unit="L/min")
MAX_CEILING_V = 20.0     # peak volts at an amplifier input: generators give at most 10-20 V peak
MAX_BLOCK_SAMPLES = 1e6  # per channel and block: a block is a tenth of a second or so, not minutes

RIG_DOC = "docs/rig-file.md"
KNOWN_SPECIES = ("N2", "O2", "AR", "CO2", "H2O", "CH4", "H2", "C3H8", "NH3")
# Dry air by mole fraction (handbook composition, CO2 folded into Ar is not done: kept explicit)
DRY_AIR = {"N2": 0.78084, "O2": 0.20946, "AR": 0.00934, "CO2": 0.00036}


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


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
        if isinstance(frac, bool) or not isinstance(frac, (int, float)) or not 0 <= frac <= 1:
            raise ValueError(f"mole fraction of {name} must be a number from 0 to 1, got {frac!r}")
        out[key] = out.get(key, 0.0) + float(frac)
    total = sum(out.values())
    if not 0.98 <= total <= 1.02:
        raise ValueError(f"mole fractions add up to {total:.4f}, not 1")
    return {k: v / total for k, v in out.items()}


Composition = Annotated[dict[str, float], BeforeValidator(_composition)]


class CalibrationPoint(_Strict):
    """Relative correction factor of one sensor at one frequency: p_true = C * p_measured."""

    frequency: Frequency
    gain: number(0.01, 100.0) = Field()
    phase_deg: number(-360.0, 360.0) = 0.0
    # standard uncertainties of the factor (a calibration file states them per frequency);
    # None: not stated, the sensor's gain_uncertainty / phase_uncertainty apply instead
    u_gain: number(0.0, 1.0) | None = None          # relative, of |C|
    u_phase_deg: number(0.0, 90.0) | None = None    # degrees, of arg C


class PressureSensor(_Strict):
    channel: str = Field(min_length=1)
    position: Position
    sensitivity: Sensitivity
    serial: str = Field(default="", max_length=100)   # the sensor's serial number: a calibration names it
    weight: number(1e-6, 1e6) = 1.0
    position_uncertainty: quantity("length", 0.0, 0.1, unit="mm") = 0.0
    # standard uncertainties of the sensor's calibration (GUM type B, stated by the user): the
    # relative gain (0.01 = 1 %) and the phase; used where no calibration factor states its own
    gain_uncertainty: number(0.0, 0.5) = 0.0
    phase_uncertainty: quantity("angle", 0.0, math.pi / 4, unit="deg") = 0.0
    calibration: tuple[CalibrationPoint, ...] = Field(default=(), max_length=1000)

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

    def calibration_uncertainty(self, freq_hz: float) -> tuple[float, float]:
        """(relative gain, phase in rad) standard uncertainty of the calibrated sensor at ``freq_hz``.

        The calibration factors' own uncertainties (a calibration file states them per frequency;
        interpolated like the factors) where every point states them, otherwise the sensor's
        ``gain_uncertainty`` and ``phase_uncertainty``."""
        pts = sorted(self.calibration, key=lambda c: c.frequency)
        if not pts or any(c.u_gain is None or c.u_phase_deg is None for c in pts):
            return float(self.gain_uncertainty), float(self.phase_uncertainty)
        import numpy as np  # local: keep module import light

        f = [c.frequency for c in pts]
        u_g = float(np.interp(freq_hz, f, [c.u_gain for c in pts]))
        u_p = math.radians(float(np.interp(freq_hz, f, [c.u_phase_deg for c in pts])))
        return u_g, u_p


class Duct(_Strict):
    radius: quantity("length", 0.5e-3, 1.0, unit="mm") | None = None
    diameter: quantity("length", 1e-3, 2.0, unit="mm") | None = None
    upstream_end: Position
    reference_plane: Position
    area_ratio: number(0.01, 100.0) = Field(default=1.0, description="A_sensor_section / A_reference_plane")

    @model_validator(mode="after")
    def _size(self) -> "Duct":
        if (self.radius is None) == (self.diameter is None):
            raise ValueError("give exactly one of 'radius' or 'diameter'")
        if self.upstream_end >= self.reference_plane:
            raise ValueError("'upstream_end' must lie upstream of (less than) 'reference_plane'")
        if self.reference_plane - self.upstream_end > MAX_DUCT_M:
            raise ValueError(f"the duct from 'upstream_end' to 'reference_plane' is "
                             f"{self.reference_plane - self.upstream_end:g} m long; at most {MAX_DUCT_M:g} m")
        return self

    @property
    def radius_m(self) -> float:
        return float(self.radius if self.radius is not None else self.diameter / 2.0)  # type: ignore[operator]

    @property
    def area_m2(self) -> float:
        return math.pi * self.radius_m**2


class Light(_Strict):
    channel: str = Field(min_length=1)
    sensitivity: number(1e-9, 1e9) = Field(default=1.0, description="volts per unit of light; cancels in Q'/Q")
    dark_offset: quantity("voltage", -10.0, 10.0, unit="V") = 0.0
    dark_offset_uncertainty: quantity("voltage", 0.0, 1.0, unit="V") = 0.005
    min_flame_signal: quantity("voltage", 0.0, 100.0, lo_open=True, unit="V") | None = None
    safe_max: quantity("voltage", 0.0, 100.0, lo_open=True, unit="V") = 10.0
    filter: str = ""

    @model_validator(mode="after")
    def _levels(self) -> "Light":
        if self.safe_max <= self.dark_offset:
            raise ValueError(f"'safe_max' ({self.safe_max:g} V) must be above 'dark_offset' ({self.dark_offset:g} V)")
        return self

    def lit_threshold_v(self, dead_rms_v: float = 0.0) -> float:
        """Light above the stated dark offset that means a burning flame: the stated minimum a lit
        flame gives, else four standard uncertainties of the dark offset plus ten noise floors
        (a dark offset mis-stated by a few millivolts never reads as a flame)."""
        if self.min_flame_signal is not None:
            return float(self.min_flame_signal)
        return 4.0 * self.dark_offset_uncertainty + 10.0 * dead_rms_v


class HotWire(_Strict):
    """[hot_wire]: an optional hot-wire in the sensor duct for a cross-check of the acoustic velocity.

    King's law E² = A + B·Uⁿ (``kings_a`` in V², ``kings_b`` in V² (m/s)^-n, ``kings_n``), as
    ``flamebode commission hot-wire --table`` fits and stores them (A, B, n of the record's newest
    ``hot-wire`` check). ``gain_uncertainty`` (relative) and ``phase_uncertainty`` are the standard
    uncertainties of the wire's velocity fluctuation from its calibration and its time response
    (GUM type B, stated by the user). The wire must sit in the sensor duct, where the plane-wave
    fit holds, never in or downstream of the flame."""

    channel: str = Field(min_length=1)
    position: Position
    kings_a: number(0.0, 1e4, lo_open=True) | None = None
    kings_b: number(0.0, 1e4, lo_open=True) | None = None
    kings_n: number(0.05, 2.0) | None = None
    # "commissioning-record": A, B, n from the newest hot-wire check of the rig's commissioning record
    kings_law_from: Literal["commissioning-record"] | None = None
    kings_law_date: str = ""        # filled from the record: the date of the check A, B, n came from
    position_uncertainty: quantity("length", 0.0, 0.1, unit="mm") = 0.0
    gain_uncertainty: number(0.0, 0.5) = 0.0
    phase_uncertainty: quantity("angle", 0.0, math.pi / 4, unit="deg") = 0.0

    @model_validator(mode="after")
    def _one_law(self) -> "HotWire":
        given = [v is not None for v in (self.kings_a, self.kings_b, self.kings_n)]
        if self.kings_law_from is None and not all(given):
            raise ValueError("give King's law as 'kings_a', 'kings_b' and 'kings_n', or "
                             "kings_law_from = \"commissioning-record\"")
        if self.kings_law_from is not None and any(given) and not all(given):
            raise ValueError("give all of 'kings_a', 'kings_b', 'kings_n' or none of them with 'kings_law_from'")
        return self


class Drive(_Strict):
    channel: str = Field(min_length=1)
    ceiling: quantity("voltage", 0.0, MAX_CEILING_V, lo_open=True, unit="V") = Field(
        description="hard peak-voltage ceiling at the amplifier input")
    ramp_time: quantity("time", 0.01, 60.0, unit="s") = 0.5
    reference_channel: str | None = None


class Flow(_Strict):
    """One flow meter: standard volume flow with the meter's own reference state."""

    name: str = Field(min_length=1)
    composition: Composition
    flow: VolumeFlow
    reference_temperature: MeterTemperature
    reference_pressure: Pressure = 101325.0
    relative_uncertainty: number(0.0, 0.5) = 0.0   # standard uncertainty of the reading, 0.01 = 1 %


class Gas(_Strict):
    temperature: Temperature
    temperature_uncertainty: quantity("temperature_difference", 0.0, 100.0, unit="K") = 0.0
    pressure: Pressure = 101325.0
    temperature_at_reference: Temperature | None = None
    composition: Composition | None = None
    flows: tuple[Flow, ...] = Field(default=(), max_length=20)
    mean_velocity: number(0.0, 300.0, lo_open=True) | None = None
    mean_velocity_uncertainty: number(0.0, 0.5) = 0.0   # relative standard uncertainty of mean_velocity

    @model_validator(mode="after")
    def _one_source(self) -> "Gas":
        given = [self.composition is not None, bool(self.flows)]
        if sum(given) != 1:
            raise ValueError("give either a fixed 'composition' or a list of 'flows', not both or neither")
        if self.composition is not None and self.mean_velocity is None:
            raise ValueError("a fixed 'composition' needs 'mean_velocity' (m/s at the reference plane)")
        if self.flows and not any(f.flow > 0 for f in self.flows):
            raise ValueError("every flow in 'flows' is zero: no mean flow to force")
        return self


class Acquisition(_Strict):
    sample_rate: quantity("frequency", 1e3, 1e6, unit="Hz") = 51200.0
    input_range: quantity("voltage", 1e-3, 100.0, unit="V") = 10.0
    block_duration: quantity("time", 1e-3, 10.0, unit="s") = 0.1

    @model_validator(mode="after")
    def _block(self) -> "Acquisition":
        n = self.sample_rate * self.block_duration
        if n < 16:
            raise ValueError(f"a block of {self.block_duration:g} s at {self.sample_rate:g} Hz holds fewer than "
                             f"16 samples; use a longer 'block_duration'")
        if n > MAX_BLOCK_SAMPLES:
            raise ValueError(f"a block of {self.block_duration:g} s at {self.sample_rate:g} Hz holds {n:.3g} samples, "
                             f"more than {MAX_BLOCK_SAMPLES:g} per channel; use a shorter 'block_duration'")
        return self


class Rig(_Strict):
    name: str = Field(min_length=1)
    duct: Duct
    pressure_sensors: tuple[PressureSensor, ...] = Field(min_length=2, max_length=64)
    light: Light
    drive: Drive
    gas: Gas
    acquisition: Acquisition = Acquisition()
    hardware: dict[str, dict[str, Any]] = Field(default_factory=dict)
    pressure_calibration: str | None = Field(default=None, min_length=1)  # docs/calibration-file.md
    hot_wire: HotWire | None = None                                    # optional velocity cross-check
    source_path: str = ""

    @model_validator(mode="after")
    def _one_calibration_source(self) -> "Rig":
        if self.pressure_calibration and any(s.calibration for s in self.pressure_sensors):
            raise ValueError("give either 'pressure_calibration' (a calibration file) or per-sensor 'calibration' "
                             "tables, not both")
        return self

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
        if self.hot_wire is not None:
            names.append(self.hot_wire.channel)
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise ValueError(f"duplicate channel name(s): {', '.join(dupes)}")
        for i, s in enumerate(self.pressure_sensors):
            if not self.duct.upstream_end <= s.position <= self.duct.reference_plane:
                raise ValueError(
                    f"pressure_sensors[{i}].position ('{s.channel}') at {s.position * 1e3:.1f} mm lies outside the "
                    f"duct (duct.upstream_end {self.duct.upstream_end * 1e3:.1f} mm to duct.reference_plane "
                    f"{self.duct.reference_plane * 1e3:.1f} mm)")
        hw = self.hot_wire
        if hw is not None and not self.duct.upstream_end <= hw.position < self.duct.reference_plane:
            raise ValueError(
                f"hot_wire.position ('{hw.channel}') at {hw.position * 1e3:.1f} mm lies outside the sensor duct "
                f"(duct.upstream_end {self.duct.upstream_end * 1e3:.1f} mm to, not at, duct.reference_plane "
                f"{self.duct.reference_plane * 1e3:.1f} mm): a hot-wire never goes into the flame")
        return self

    @property
    def input_channels(self) -> tuple[str, ...]:
        """Names of every recorded channel: pressures, light, the drive reference if wired, then the
        hot-wire if the rig has one."""
        chans = [s.channel for s in self.pressure_sensors] + [self.light.channel]
        if self.drive.reference_channel:
            chans.append(self.drive.reference_channel)
        if self.hot_wire is not None:
            chans.append(self.hot_wire.channel)
        return tuple(chans)

    def sensor(self, channel: str) -> PressureSensor:
        for s in self.pressure_sensors:
            if s.channel == channel:
                return s
        raise KeyError(channel)


def rig_from_dict(data: dict[str, Any], path: str = "<rig>", units_required: bool = False) -> Rig:
    """Validate a rig given as a dict: SI numbers, or with ``units_required`` (the text of a file) units."""
    rig = model_from_dict(Rig, data, str(path), RIG_DOC, units_required=units_required)
    return _with_hot_wire_record(_with_calibration_file(rig), str(path))


def load_rig(path: str | Path, units_required: bool = True, attach_calibration: bool = True) -> Rig:
    """Load and validate a rig file (``units_required=False`` reads an old file's bare numbers as SI).

    ``attach_calibration=False`` leaves the calibration file the rig names unread (a new pressure
    calibration measures the sensors as they are, whatever the old file says or whether it exists)."""
    rig = load_model(Rig, path, RIG_DOC, units_required=units_required)
    return _with_hot_wire_record(_with_calibration_file(rig) if attach_calibration else rig, str(path))


def _with_hot_wire_record(rig: Rig, path: str) -> Rig:
    """The rig with the hot-wire's King's law from its commissioning record, when it asks for it
    (``kings_law_from``, values given in the file win); a record without a hot-wire check is refused."""
    hw = rig.hot_wire
    if hw is None or hw.kings_law_from is None or hw.kings_a is not None:
        return rig
    from .commissioning_record import read_record, record_path_for  # local: that module is not a description
    from .errors import ConfigError

    record = read_record(record_path_for(rig.source_path or path), rig.name)
    check = record.latest("hot-wire")
    if check is None:
        raise ConfigError(path, [f"hot_wire.kings_law_from: the commissioning record {record.path} holds no "
                                 "hot-wire check; run 'flamebode commission hot-wire RIG --table FILE.csv' or give "
                                 "kings_a, kings_b and kings_n"])
    try:
        law = {"kings_a": float(check.result["a_v2"]), "kings_b": float(check.result["b"]),
               "kings_n": float(check.result["n"]), "kings_law_date": check.date}
        wire = HotWire.model_validate({**hw.model_dump(), **law})
    except (KeyError, TypeError, ValueError) as exc:
        raise ConfigError(path, [f"hot_wire.kings_law_from: the hot-wire check of {check.date} in {record.path} "
                                 f"has no usable A, B, n ({exc})"]) from None
    return rig.model_copy(update={"hot_wire": wire})


def _with_calibration_file(rig: Rig) -> Rig:
    """The rig with the factors of the calibration file it names in its sensors' tables (checked there)."""
    if not rig.pressure_calibration:
        return rig
    from .calibration_file import attach  # local: that module reads this one's types

    return attach(rig)
