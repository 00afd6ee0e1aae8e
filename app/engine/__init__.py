"""Sweep engine: plans, the state table, amplitude control, fault checks.

Must not import Qt, storage internals or concrete back-ends; it sees drivers only
through ``drivers.protocols``.
"""
