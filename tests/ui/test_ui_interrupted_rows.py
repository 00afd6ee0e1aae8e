"""An interrupted attempt (a record cut short by a halt, an abort or a fatal fault) is never a result.

The run layout (docs/run-layout.md) stores such a record as evidence, flagged ``interrupted``,
and never accepts it. The window's point table and response curve must agree: seen once in
the window, a flame-out mid-record showed the cut record as a 'flagged' point on the curve.
Qt-free: the table model the views draw from.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from app.engine.events import FaultRaised, PointSettled
from app.ui.models import FAILED, KEPT, REJECTED, PointTable


def _settled(index: int, gain: float, flags: tuple[str, ...]) -> PointSettled:
    result = SimpleNamespace(gain=gain, phase_rad=-1.0, gain_ci95=0.02, phase_ci95_rad=0.02,
                             velocity=SimpleNamespace(amplitude_ratio=0.05))
    return PointSettled(attempt_id=f"a{index}-{gain}", point_index=index, freq_hz=100.0 * (index + 1),
                        target_ratio=0.05, drive_v=0.1, record=np.zeros((1, 1)), channels=("p1",),
                        sample_rate_hz=1.0, result=result, tuning=(), flags=flags, overflows=0,
                        identity={}, started_wall_s=0.0)


def _table() -> PointTable:
    t = PointTable()
    t.set_plan([SimpleNamespace(index=i, freq_hz=100.0 * (i + 1), amplitude_ratio=0.05) for i in range(3)])
    return t


def test_an_interrupted_first_attempt_is_rejected_and_not_on_the_curve():
    t = _table()
    t.on_settled(_settled(0, 1.1, ()))
    t.on_settled(_settled(1, 0.9, ("interrupted", "halted")))
    assert t.row(0).status == KEPT and t.row(1).status == REJECTED
    [curve] = t.curves().values()
    assert list(curve["freq_hz"]) == [100.0]           # only the kept point
    assert t.n_done == 1


def test_a_fatal_fault_at_the_point_stays_a_fault():
    t = _table()
    t.on_fault(FaultRaised(name="flame-out", message="m", action="a", advice="b", point_index=2, fatal=True))
    t.on_settled(_settled(2, 0.7, ("interrupted", "flame-out")))
    assert t.row(2).status == FAILED and not t.curves()


def test_an_interrupted_reacquire_keeps_the_earlier_accepted_result():
    t = _table()
    t.on_settled(_settled(0, 1.1, ()))
    t.on_settled(_settled(0, 0.5, ("interrupted",)))
    assert t.row(0).status == KEPT and t.row(0).gain == 1.1

