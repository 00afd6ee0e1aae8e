"""Rig file loading: the demo rig loads; every kind of mistake gets a message naming file and key."""

from __future__ import annotations

import math
import textwrap
from pathlib import Path

import pytest

from app.errors import ConfigError
from app.rig import load_rig
from app.units import parse_quantity

DEMO = Path(__file__).resolve().parents[1] / "configs" / "demo-rig.toml"


def test_demo_rig_loads_in_si():
    rig = load_rig(DEMO)
    assert rig.duct.radius_m == pytest.approx(0.023)
    assert rig.pressure_sensors[0].position == pytest.approx(-0.62)
    assert rig.pressure_sensors[0].sensitivity == pytest.approx(0.0145)
    assert rig.gas.temperature == pytest.approx(297.15)
    assert rig.gas.flows[0].reference_temperature == pytest.approx(273.15)
    assert rig.gas.flows[1].reference_temperature == pytest.approx(293.15)
    assert rig.drive.ceiling == pytest.approx(2.0)
    assert rig.input_channels == ("p1", "p2", "p3", "p4", "pmt", "drv_ref")


@pytest.mark.parametrize("text, unit, si", [
    ("25 mm", "length", 0.025), ("20 degC", "temperature", 293.15), ("1 bar", "pressure", 1e5),
    ("14.5 mV/Pa", "sensitivity", 0.0145), ("100 L/min", "volume_flow", 100e-3 / 60), ("2", "voltage", 2.0),
])
def test_units_convert_to_si(text, unit, si):
    assert parse_quantity(text, unit) == pytest.approx(si)


def _write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "rig.toml"
    p.write_text(textwrap.dedent(text))
    return p


def _demo_with(tmp_path: Path, old: str, new: str) -> Path:
    text = DEMO.read_text()
    assert old in text, old
    return _write(tmp_path, text.replace(old, new, 1))


@pytest.mark.parametrize("old, new, expected", [
    ('diameter = "46 mm"', 'diametre = "46 mm"', "duct.diametre: unknown key"),
    ('diameter = "46 mm"', 'diameter = "46 kPa"', "wrong unit 'kPa' for a length"),
    ('position = "-620 mm"', 'position = "-1200 mm"', "outside the duct"),
    ('channel = "p2"', 'channel = "p1"', "duplicate channel name(s): p1"),
    ('reference_plane = "0 mm"\n', '', "duct.reference_plane: required key is missing"),
    ('temperature = "24 degC"', 'temperature = 24',
     'gas.temperature: a temperature needs a unit, e.g. "24 degC" or "297 K"'),
    ('temperature = "24 degC"', 'temperature = "24 K"', "gas.temperature: \"24 K\" is too small: allowed more than 150 K"),
    ('flow = "180 L/min"', 'flow = 7', 'gas.flows[0].flow: a flow needs a unit, e.g. "180 L/min" or "0.003 m3/s"'),
    ('position = "-620 mm"', 'position = -620', "pressure_sensors[0].position: a length needs a unit"),
    ('block_duration = "0.1 s"', 'block_duration = "0.5 ms"',
     'acquisition.block_duration: "0.5 ms" is too short: allowed at least 1 ms and at most 10 s'),
    ('ceiling = "2.0 V"', 'ceiling = "25 V"', "drive.ceiling: \"25 V\" is too large: allowed more than 0 V and at most 20 V"),
    ('reference_temperature = "0 degC"     # this meter\'s standard state\n', '',
     "gas.flows[0].reference_temperature: required key is missing"),
    ('composition = { CH4 = 0.85, H2 = 0.15 }', 'composition = { CH4 = 0.85, XE = 0.15 }', "unknown species 'XE'"),
    ('ceiling = "2.0 V"', 'ceiling = "-1 V"', "drive.ceiling"),
])
def test_mistakes_are_named(tmp_path, old, new, expected):
    path = _demo_with(tmp_path, old, new)
    with pytest.raises(ConfigError) as err:
        load_rig(path)
    msg = str(err.value)
    assert str(path) in msg
    assert expected in msg


def test_a_block_holds_at_least_16_samples(tmp_path):
    text = DEMO.read_text().replace('sample_rate = "25.6 kHz"', 'sample_rate = "10 kHz"').replace(
        'block_duration = "0.1 s"', 'block_duration = "1.5 ms"')
    with pytest.raises(ConfigError, match=r"acquisition: a block of 0.0015 s at 10000 Hz holds fewer than 16 samples"):
        load_rig(_write(tmp_path, text))


def test_a_block_holds_at_most_a_million_samples(tmp_path):
    text = DEMO.read_text().replace('sample_rate = "25.6 kHz"', 'sample_rate = "1000 kHz"').replace(
        'block_duration = "0.1 s"', 'block_duration = "2 s"')
    with pytest.raises(ConfigError, match=r"acquisition: a block of 2 s at 1e\+06 Hz holds 2e\+06 samples, more "
                                          r"than 1e\+06 per channel"):
        load_rig(_write(tmp_path, text))


def test_a_duct_is_at_most_10_m_long(tmp_path):
    text = DEMO.read_text().replace('upstream_end = "-900 mm"', 'upstream_end = "-9 m"').replace(
        'reference_plane = "0 mm"', 'reference_plane = "2 m"')
    with pytest.raises(ConfigError, match=r"duct: the duct from 'upstream_end' to 'reference_plane' is 11 m long; "
                                          r"at most 10 m"):
        load_rig(_write(tmp_path, text))


def test_every_flow_zero_is_refused(tmp_path):
    text = DEMO.read_text().replace('flow = "180 L/min"', 'flow = "0 L/min"').replace('flow = "18.1 L/min"',
                                                                                      'flow = "0 L/min"')
    with pytest.raises(ConfigError, match=r"gas: every flow in 'flows' is zero"):
        load_rig(_write(tmp_path, text))


def test_counts_are_bounded(tmp_path):
    text = DEMO.read_text()
    flows = text[text.index("[[gas.flows]]"):text.index("[acquisition]")]
    many = text.replace(flows, flows * 11)         # 22 flow meters: at most 20
    with pytest.raises(ConfigError, match=r"gas.flows: Tuple should have at most 20 items"):
        load_rig(_write(tmp_path, many))
    sensors = "".join(f'[[pressure_sensors]]\nchannel = "q{i}"\nposition = "{-800 + 5 * i} mm"\n'
                      f'sensitivity = "14 mV/Pa"\n' for i in range(65))
    with pytest.raises(ConfigError, match=r"pressure_sensors: Tuple should have at most 64 items"):
        load_rig(_write(tmp_path, text.replace("[light]", sensors + "[light]", 1)))


def test_old_files_with_bare_si_numbers_can_still_be_read(tmp_path):
    path = _demo_with(tmp_path, 'ramp_time = "0.3 s"', "ramp_time = 0.3")
    with pytest.raises(ConfigError, match="drive.ramp_time: a duration needs a unit"):
        load_rig(path)
    assert load_rig(path, units_required=False).drive.ramp_time == 0.3


def test_a_dict_from_a_file_can_be_checked_like_the_file():
    from app.rig import read_toml, rig_from_dict

    data = read_toml(DEMO)
    data["drive"]["ramp_time"] = 0.3      # bare seconds: SI for a program, refused in a file
    assert rig_from_dict(data).drive.ramp_time == 0.3
    with pytest.raises(ConfigError, match="drive.ramp_time: a duration needs a unit"):
        rig_from_dict(data, units_required=True)


def test_toml_syntax_error_names_line(tmp_path):
    path = _write(tmp_path, 'name = "x"\n[duct\n')
    with pytest.raises(ConfigError, match=r"not valid TOML.*line 2"):
        load_rig(path)


def test_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="file not found"):
        load_rig(tmp_path / "nope.toml")


def test_calibration_factor_interpolates():
    rig = load_rig(DEMO)
    data = rig.model_dump()
    data["pressure_sensors"][1]["calibration"] = [
        {"frequency": "100 Hz", "gain": 1.0, "phase_deg": 0.0},
        {"frequency": "300 Hz", "gain": 1.1, "phase_deg": 2.0},
    ]
    from app.rig import rig_from_dict

    data.pop("source_path")
    rig2 = rig_from_dict(data)
    c = rig2.pressure_sensors[1].correction(200.0)
    assert abs(c) == pytest.approx(1.05)
    assert math.degrees(math.atan2(c.imag, c.real)) == pytest.approx(1.0)


def test_a_referenced_calibration_file_gives_the_sensors_its_factor_uncertainties(tmp_path, demo_rig_path):
    # The calibration file states u_gain and u_phase_deg per frequency; a rig that references
    # it uses them in the error budget instead of the sensors' stated gain/phase uncertainties.
    import math

    from app.calibration_file import read_calibration
    from test_calibration_file import _rig_naming, _write

    cal_path = _write(load_rig(demo_rig_path), tmp_path / "cal.toml")
    rig = load_rig(_rig_naming(tmp_path, demo_rig_path))
    cal = read_calibration(cal_path)
    for sensor in rig.pressure_sensors:
        factors = cal.sensor(sensor.channel)
        i = 1
        u_g, u_p = sensor.calibration_uncertainty(cal.frequency_hz[i])
        assert u_g == pytest.approx(factors.u_gain[i])
        assert u_p == pytest.approx(math.radians(factors.u_phase_deg[i]))
    assert any(s.calibration_uncertainty(500.0)[0] > 0 for s in rig.pressure_sensors)
