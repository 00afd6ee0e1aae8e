"""Measurement core: pure functions on numpy arrays and a rig description.

Must not import Qt, pyqtgraph, matplotlib, h5py, any ``drivers`` module, the engine,
storage or the front end (checked by the import-linter contracts in pyproject.toml).
"""
