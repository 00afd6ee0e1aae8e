"""Run services: every operation a person can do on a stored run, once, for every front end.

Open, review, decide (accept or reject an attempt by point and attempt number), re-acquire,
reprocess, export and compare live here as plain functions with typed requests and results
(frozen dataclasses in ``app.services.types``). The command line (``app.commands``) parses
arguments and prints these results; the window (``app.ui``) calls the same functions on its
worker thread and shows the results. Neither front end opens the index itself.

Modules: ``runs`` (open, review), ``decisions`` (accept/reject), ``reacquire`` (check the
choice, report which attempt each point uses), ``reprocess``, ``export`` (export, compare,
report, list), ``snapshots`` (checks before measuring into a run again), ``sweeps`` (the run
writer a front end's sweep stores through), ``points`` (point numbers people write),
``commissioning`` (the rig's commissioning checks and record, for ``commission`` and the window).

Must not import Qt, pyqtgraph, ``app.ui``, ``app.cli`` or ``app.commands``.
"""
