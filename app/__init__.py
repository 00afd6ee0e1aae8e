"""flamebode: acquisition and control for flame transfer / describing function sweeps.

Sub-packages: ``core`` (pure measurement functions), ``engine`` (sweep state machine),
``storage`` (run files), ``ui`` (the only Qt importer). ``rig`` and ``units`` hold the
rig description. Nothing here imports Qt at package import time.
"""

__version__ = "0.1.0"
