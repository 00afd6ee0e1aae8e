"""The tuning view: "step n of max", a logarithmic drive axis, the readout cleared between points.

A soft start opens a point at millivolts under a ceiling of volts (common practice: raise
the drive gradually), so on a linear 0-2 V axis the first steps look like zero.
"""

from __future__ import annotations

import numpy as np


def test_the_tuning_readout_says_step_n_of_max_and_clears_between_points(qtbot):
    from app.engine.events import TuningStep
    from app.ui.models import TuningHistory
    from app.ui.views.tuning import TuningView

    model = TuningHistory()
    view = TuningView(model)
    qtbot.addWidget(view)
    view.set_ceiling(2.0)
    model.max_steps = 8
    model.add(TuningStep(point_index=0, step=1, drive_v=0.004, measured_ratio=0.006, target_ratio=0.05,
                         tolerance=0.05, window_s=0.3, within_tolerance=False))
    view.refresh()
    assert "Tuning point 1: step 1 of 8, 4 mV gives" in view.caption.text()
    assert view.drive_plot.getPlotItem().ctrl.logYCheck.isChecked() if hasattr(view.drive_plot, "getPlotItem") \
        else view.drive_plot.ctrl.logYCheck.isChecked()
    low, high = view.drive_plot.getViewBox().viewRange()[1]
    assert low <= np.log10(0.004) and high >= np.log10(2.0)       # the millivolt step and the ceiling both shown
    model.begin_point(1, 0.05)
    view.refresh()
    assert "Tuning point 2: first tuning window" in view.caption.text()
    assert view.amp_curve.getData()[0] is None or len(view.amp_curve.getData()[0]) == 0
