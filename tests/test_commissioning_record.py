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
