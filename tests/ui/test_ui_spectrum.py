"""The review's spectrum: a sine reads its peak amplitude at its frequency (Hann window with its
coherent gain divided out, common practice; checked against scipy.signal.periodogram's
'spectrum' scaling as an independent reference), in the channel's unit, with the forcing marked."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import periodogram

from app.ui.models import amplitude_spectrum
from app.ui.views.spectrum import SpectrumView


def test_a_sine_reads_its_peak_amplitude_and_agrees_with_scipy():
    fs, f0, a = 25600.0, 400.0, 3.2
    t = np.arange(int(fs)) / fs                    # 1 s: 400 Hz on a bin
    x = a * np.sin(2 * np.pi * f0 * t) + 0.01 * np.random.default_rng(2).standard_normal(t.size)
    f, amp = amplitude_spectrum(x, fs)
    k = int(np.argmin(np.abs(f - f0)))
    assert amp[k] == pytest.approx(a, rel=1e-3)
    fp, p = periodogram(x, fs, window="hann", scaling="spectrum")     # power of the rms: (a/sqrt 2)^2
    assert np.sqrt(2 * p[k]) == pytest.approx(amp[k], rel=1e-6)


def test_the_view_names_the_unit_and_marks_the_forcing(qtbot):
    view = SpectrumView()
    qtbot.addWidget(view)
    fs = 25600.0
    t = np.arange(12800) / fs
    data = np.vstack([5 * np.sin(2 * np.pi * 250 * t), 0.1 * np.sin(2 * np.pi * 250 * t)])
    view.show_record(data, ("p1", "drv"), fs, 250.0, {"p1": "Pa"})
    assert view.channel.count() == 2 and view.channel.currentText() == "p1"
    assert "Pa" in view.plot.getAxis("left").labelText
    assert [m.value() for m in view.marks] == [250.0, 500.0, 750.0]
    view.channel.setCurrentIndex(1)
    assert "V" in view.plot.getAxis("left").labelText
