"""Run files: index, per-attempt records, export. Must not import Qt or drivers."""
