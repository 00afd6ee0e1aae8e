"""Opening a folder that is not a run says so in red in the Review tab, naming the folder.

Found by a new user: the failure appeared in small black text that was easy to miss. Common
practice: an error the operator must act on stands out from the tab's ordinary messages.
"""

from __future__ import annotations

import html


def test_opening_a_folder_that_is_not_a_run_is_said_in_red(qtbot, make_window, tiny_plan, tmp_path):
    win = make_window(tiny_plan)
    folder = tmp_path / "notarun"
    folder.mkdir()
    win.open_review(folder)
    qtbot.waitUntil(lambda: "open run failed" in win.review.message.text(), timeout=30_000)
    text = win.review.message.text()
    assert "color:#C62828" in text and str(folder) in html.unescape(text), text
    assert win.review.run is None
