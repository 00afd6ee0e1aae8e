"""Desktop front end: the only package that imports Qt or pyqtgraph."""
