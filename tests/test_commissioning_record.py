"""The commissioning record refuses, when it is read, what would break a check later: a result that
is not a finite number, a missing value a check needs, a date in the future; each named with the
file and the check's number (never a bare traceback, nothing recorded on top of it)."""

from __future__ import annotations

import pytest

from app.commissioning_record import CommissioningRecordError, read_record

HEAD = 'format = "flamebode-commissioning"\nformat_version = 1\nrig_name = ""\n'


def _record(tmp_path, date="2026-12-01T10:00:00Z", result="mean_v = 0.021\nu_mean_v = 1e-6\n",
            kind="dark-offset"):
    p = tmp_path / "r.commissioning.toml"
    p.write_text(HEAD + f'[[check]]\nkind = "{kind}"\ndate = "{date}"\nbackend = "x"\nrig_identity = ""\n'
                 f"[check.result]\n{result}")
    return p




@pytest.mark.parametrize("result, why", [
    ("mean_v = nan\nu_mean_v = 1e-6\n", "result.mean_v = nan is not a finite number"),
    ('mean_v = "abc"\nu_mean_v = 1e-6\n', "result.mean_v = 'abc' is not a number"),
    ("u_mean_v = 1e-6\n", "result.mean_v missing"),
    ("mean_v = inf\nu_mean_v = 1e-6\n", "is not a finite number"),
])
def test_a_broken_result_is_refused_when_read(tmp_path, result, why):
    with pytest.raises(CommissioningRecordError, match="check 1") as exc:
        read_record(_record(tmp_path, result=result))
    assert why in str(exc.value)


def test_a_date_in_the_future_is_refused(tmp_path):
    with pytest.raises(CommissioningRecordError, match="in the future"):
        read_record(_record(tmp_path, date="2099-01-01T00:00:00Z"))
    assert read_record(_record(tmp_path)).latest("dark-offset").result["mean_v"] == 0.021


def test_a_pressure_calibration_made_for_another_sensor_set_is_not_counted_as_done(tmp_path):
    # the record keeps each check's rig identity (sensors' channels, positions, sensitivities and
    # the duct radius); a sensor moved since makes the relative calibration another rig's
    import datetime as dt

    from app.calibration_file import rig_identity
    from app.commissioning_record import Check, age_notes, append_check, record_path_for
    from app.rig import load_rig

    rig = load_rig("configs/demo-rig.toml")
    path = record_path_for(tmp_path / "demo-rig.toml")
    now = dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    append_check(path, rig.name, Check("pressure-calibration", now, "simulated", rig_identity(rig), {"n_sensors": 4}))
    record = read_record(path, rig.name)
    assert not [n for n in age_notes(record, 30.0, identity=rig_identity(rig)) if "pressure" in n]
    moved = rig.model_copy(update={"pressure_sensors": (
        rig.pressure_sensors[0].model_copy(update={"position": rig.pressure_sensors[0].position - 0.01}),
        *rig.pressure_sensors[1:])})
    notes = [n for n in age_notes(record, 30.0, identity=rig_identity(moved)) if "pressure" in n]
    assert len(notes) == 1 and "another sensor set or duct" in notes[0]
    # without the rig's identity (a caller that has no parsed rig) the age alone is judged, as before
    assert not [n for n in age_notes(record, 30.0) if "pressure" in n]
