"""The rig file's [hot_wire] table: where the wire may sit, its channel, its King's law given in
the file or taken from the commissioning record's newest hot-wire check, and the messages for a
rig that gets it wrong. No physics here; King's law's form E² = A + B·Uⁿ (King 1914, from memory).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from app.commissioning_record import Check, append_check, record_path_for
from app.errors import ConfigError
from app.rig import load_rig

ROOT = Path(__file__).resolve().parents[2]
WIRE = '\n[hot_wire]\nchannel = "hw"\nposition = "-400 mm"\n'
LAW = 'kings_a = 1.4\nkings_b = 0.9\nkings_n = 0.45\n'


def _rig(tmp_path: Path, table: str) -> Path:
    p = tmp_path / "rig.toml"
    p.write_text((ROOT / "configs" / "demo-rig.toml").read_text() + table)
    return p


def test_a_wire_with_its_law_is_recorded_after_the_other_channels(tmp_path):
    rig = load_rig(_rig(tmp_path, WIRE + LAW + 'gain_uncertainty = 0.02\nphase_uncertainty = "1 deg"\n'))
    assert rig.input_channels[-1] == "hw"
    assert (rig.hot_wire.kings_a, rig.hot_wire.kings_b, rig.hot_wire.kings_n) == (1.4, 0.9, 0.45)
    assert rig.hot_wire.phase_uncertainty == pytest.approx(0.017453, rel=1e-4)
    assert load_rig(ROOT / "configs" / "demo-rig.toml").hot_wire is None        # optional


@pytest.mark.parametrize("table, words", [
    (WIRE.replace("-400 mm", "20 mm") + LAW, "never goes into the flame"),
    (WIRE.replace("-400 mm", "0 mm") + LAW, "never goes into the flame"),
    (WIRE.replace('"hw"', '"pmt"') + LAW, "duplicate channel"),
    (WIRE + "kings_a = 1.4\n", "kings_law_from"),
    (WIRE + LAW.replace("0.45", "3"), "kings_n"),
])
def test_a_wrong_wire_is_refused_naming_the_problem(tmp_path, table, words):
    with pytest.raises(ConfigError) as err:
        load_rig(_rig(tmp_path, table))
    assert words in str(err.value)


def test_the_law_from_the_commissioning_record(tmp_path):
    path = _rig(tmp_path, WIRE + 'kings_law_from = "commissioning-record"\n')
    with pytest.raises(ConfigError, match="holds no hot-wire check"):
        load_rig(path)
    name = load_rig(ROOT / "configs" / "demo-rig.toml").name
    for date, a in (("2026-11-01T09:00:00Z", 1.1), ("2026-12-01T09:00:00Z", 1.5)):
        append_check(record_path_for(path), name, Check("hot-wire", date, "simulated", "",
                                                        {"a_v2": a, "b": 0.8, "n": 0.44, "residual_rms_m_s": 0.01}))
    wire = load_rig(path).hot_wire
    assert (wire.kings_a, wire.kings_b, wire.kings_n) == (1.5, 0.8, 0.44)       # the newest check
    assert wire.kings_law_date == "2026-12-01T09:00:00Z"
