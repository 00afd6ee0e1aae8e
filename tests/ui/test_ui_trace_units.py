"""Live traces a person can read: pressures in pascals (volts / sensitivity, the sensors' own
calibration), channel names in the title rather than a legend over the data, and the light's
mean level beside its value at the start (a flame-out reads at a glance)."""

from __future__ import annotations

import numpy as np

from app.ui.models import TraceFrame
from app.ui.views.traces import TracesView


def test_pressures_in_pascals_names_in_the_title_and_the_light_level(qtbot):
    view = TracesView()
    qtbot.addWidget(view)
    channels = ("p1", "p2", "pmt", "drv")
    roles = {"p1": "pressure", "p2": "pressure", "pmt": "light", "drv": "drive"}
    view.set_scales({"p1": 1 / 0.02, "p2": 1 / 0.025})        # 20 and 25 mV/Pa
    view.configure(channels, roles)
    t = np.linspace(-0.2, 0.0, 200)
    data = np.vstack([0.02 * np.sin(t * 900), 0.025 * np.sin(t * 900), 2.4 + 0 * t, 0.1 * np.sin(t * 900)])
    view.show_frame(TraceFrame(channels, t, data, state=1))
    pressures = view.plots["pressure"]
    assert pressures.getAxis("left").labelText == "Pa"
    _, y1 = view.curves["p1"].getData()
    _, y2 = view.curves["p2"].getData()
    assert np.allclose(np.abs(y1).max(), 1.0, rtol=0.02) and np.allclose(np.abs(y2).max(), 1.0, rtol=0.02)
    assert "p1" in pressures.titleLabel.text and "p2" in pressures.titleLabel.text
    assert pressures.legend is None                                 # nothing drawn over the data
    view.light_start_v = 2.45
    view.show_frame(TraceFrame(channels, t, data, state=2))
    assert view.plots["light"].titleLabel.text == "Heat-release light: mean 2.4 V (start 2.45 V)"


def test_without_sensitivities_pressures_stay_in_volts(qtbot):
    view = TracesView()
    qtbot.addWidget(view)
    view.configure(("p1", "p2"), {"p1": "pressure", "p2": "pressure"})
    assert view.plots["pressure"].getAxis("left").labelText == "V at the ADC"
