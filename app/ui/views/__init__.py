"""Thin widgets of the window; each draws one Qt-free model from ``app.ui.models``.

Imports: PySide6, pyqtgraph, numpy and ``app.ui.models`` only; no measurement logic.
"""
