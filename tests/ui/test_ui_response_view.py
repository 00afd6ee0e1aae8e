"""The response curve: flagged points drawn open, the frequency axis fixed to the plan's range,
the selected point's values and intervals read out with the phase as on the curve."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from app.engine.events import PointSettled
from app.ui.models import PointTable
from app.ui.views.response import ResponseView


def _settled(index, freq_hz, phase_rad, flags=()):
    result = SimpleNamespace(gain=1.0 + 0.01 * index, phase_rad=phase_rad, gain_ci95=0.02, phase_ci95_rad=0.03,
                             velocity=SimpleNamespace(amplitude_ratio=0.05))
    return PointSettled(attempt_id=f"a{index}", point_index=index, freq_hz=freq_hz, target_ratio=0.05, drive_v=0.1,
                        record=np.zeros((1, 1)), channels=("p1",), sample_rate_hz=1.0, result=result, tuning=(),
                        flags=tuple(flags), overflows=0, identity={}, started_wall_s=0.0)


def test_flagged_open_axis_fixed_and_readout(qtbot):
    freqs = [100.0, 300.0, 500.0, 700.0]
    table = PointTable()
    table.set_plan([SimpleNamespace(index=i, freq_hz=f, amplitude_ratio=0.05) for i, f in enumerate(freqs)])
    view = ResponseView(table)
    qtbot.addWidget(view)
    view.set_frequency_range((90.0, 735.0))
    # phases falling through -180 degrees: wrapped they jump, on the curve they are unwrapped
    table.on_settled(_settled(0, 100.0, np.radians(-100.0)))
    table.on_settled(_settled(1, 300.0, np.radians(-170.0), flags=("pair-spread",)))
    table.on_settled(_settled(2, 500.0, np.radians(120.0)))      # = -240 degrees unwrapped
    view.refresh()
    # the axis stays on the plan's range although only 100-500 Hz are measured
    lo, hi = view.gain_plot.getViewBox().viewRange()[0]
    assert lo <= 90.0 and hi >= 735.0 and hi < 800.0
    # flagged: open (white) marker; good: filled in the curve's colour
    [(g, _ge, _p, _pe)] = view._items.values()
    brushes = [b.color().name() for b in g.opts["symbolBrush"]]
    assert brushes[1] == "#ffffff" and brushes[0] != "#ffffff" and brushes[2] != "#ffffff"
    assert "1 flagged: open markers" in view.caption.text()
    view.select([2])
    assert "point 3: 500 Hz, gain 1.020 ± 0.020, phase -240.0° ± 1.7° (95 %)" in view.readout.text()


def test_the_table_reads_the_phase_the_curve_shows(qtbot):
    # one convention for people: degrees, unwrapped along frequency, with the interval
    from app.ui.views.points import PointListView

    table = PointTable()
    table.set_plan([SimpleNamespace(index=i, freq_hz=f, amplitude_ratio=0.05) for i, f in enumerate([100.0, 300.0])])
    view = PointListView(table)
    qtbot.addWidget(view)
    table.on_settled(_settled(0, 100.0, np.radians(-150.0)))
    table.on_settled(_settled(1, 300.0, np.radians(150.0)))        # wrapped; -210 degrees on the curve
    view.qt_model._changed()
    phase_col = 6
    text = view.qt_model.data(view.qt_model.index(1, phase_col))
    assert text == "-210.0 ± 1.7", text
    horizontal = __import__("PySide6.QtCore", fromlist=["Qt"]).Qt.Orientation.Horizontal
    tip = __import__("PySide6.QtCore", fromlist=["Qt"]).Qt.ItemDataRole.ToolTipRole
    assert view.qt_model.headerData(phase_col, horizontal) == "Phase (deg)"
    assert "unwrapped along frequency as on the curve" in view.qt_model.headerData(phase_col, horizontal, tip)
