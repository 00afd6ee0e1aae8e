"""The installed Qt binding keeps Python's reference count of None intact.

PySide6 6.12.0 on Python 3.11 drops one reference to None on every call of a void Qt
method (measured here; CPython's own diagnosis of the resulting abort is in
python/cpython#93762: an extension returning Py_None without a new reference). A live
window makes thousands of such calls a second and the interpreter aborts with
"none_dealloc". This test names the cause instead of a crash at exit.
"""

from __future__ import annotations

import sys

import pytest


@pytest.mark.skipif(sys.version_info >= (3, 12), reason="None is immortal from Python 3.12 (PEP 683)")
def test_void_qt_calls_keep_the_refcount_of_none(qtbot) -> None:
    from PySide6.QtWidgets import QLabel

    label = QLabel()
    qtbot.addWidget(label)
    before = sys.getrefcount(None)
    for _ in range(2000):
        label.setText("x")
        label.update()
    lost = before - sys.getrefcount(None)
    assert lost < 100, (f"the Qt binding dropped {lost} references to None in 4000 calls; install a "
                        f"PySide6 without this bug (pyproject pins <6.12 on Python < 3.12)")
