"""The pre-scan view: the transfer on a log axis with its uncertainty, lost lines counted, and
the reason when there was no pre-scan."""

from __future__ import annotations

import math

import numpy as np


def test_the_prescan_view_plots_the_transfer_and_says_why_when_skipped(qtbot):
    from app.engine.events import TransferMeasured
    from app.ui.views.prescan import PrescanView

    view = PrescanView()
    qtbot.addWidget(view)
    ev = TransferMeasured((100.0, 150.0, 200.0), (0.1, math.nan, 2.0), (0.02, math.inf, 0.01), (0.0,) * 3,
                          3.7, 0.15, 0.06, 3)
    view.show_transfer(ev)
    x, y = view.curve.getData()
    assert list(x) == [100.0, 200.0]
    assert np.allclose(y, [0.1, 2.0]) or np.allclose(y, np.log10([0.1, 2.0]))
    text = view.caption.text()
    assert "3 lines 100-200 Hz" in text and "3.7 s" in text and "1 line(s) lost in the noise" in text
    view.show_transfer(TransferMeasured((), (), (), (), 0.0, 0.0, 0.0, 0, skipped="no MultiSineDrive"))
    assert view.caption.text() == "Pre-scan skipped: no MultiSineDrive"
