"""The desktop front end (PySide6 + pyqtgraph): the only package that imports Qt."""
