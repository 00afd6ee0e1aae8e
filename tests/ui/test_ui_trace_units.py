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


def test_a_kilohertz_trace_is_shown_for_a_few_periods_triggered_on_the_drive(qtbot):
    # 200 periods of 1 kHz in 0.2 s are a grey band; a few periods, standing still, are readable
    from app.ui.views.traces import trigger

    fs, f = 25600.0, 1000.0
    t = np.arange(-0.2, 0.0, 1 / fs)
    rng = np.random.default_rng(1)
    for phase in (0.3, 1.7, 4.0):                     # wherever the frame happens to end
        drive = 0.1 * np.sin(2 * np.pi * f * t + phase) + 1e-4 * rng.standard_normal(t.size)
        data = np.vstack([np.sin(2 * np.pi * f * t + phase + 1.0), drive])
        shifted, window = trigger(t, data, 1, f, 0.2)
        assert window == 0.01                           # 6 periods is 6 ms: at least 10 ms shown
        at0 = np.interp(0.0, shifted, drive)
        slope = np.interp(1e-5, shifted, drive) - np.interp(-1e-5, shifted, drive)
        assert abs(at0) < 2e-3 and slope > 0            # the newest rising zero crossing at t = 0
        assert shifted[0] <= -window                     # a whole window of signal before it
    view = TracesView()
    qtbot.addWidget(view)
    view.configure(("p1", "drv"), {"p1": "pressure", "drv": "drive"})
    view.show_frame(TraceFrame(("p1", "drv"), t, data, state=1), freq_hz=f)
    lo, hi = view.plots["pressure"].getViewBox().viewRange()[0]
    assert abs(lo + 0.01) < 1e-3 and abs(hi) < 1e-3
    view.show_frame(TraceFrame(("p1", "drv"), t, data, state=2), freq_hz=0.0)   # drive off: the whole 0.2 s
    lo, _ = view.plots["pressure"].getViewBox().viewRange()[0]
    assert abs(lo + 0.2) < 1e-3
