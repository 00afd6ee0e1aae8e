"""Named errors shared by every layer (no imports beyond the standard library).

Every error a user can cause carries a message that names the problem and its place
(file, key, channel) so the CLI and the window can show it without a traceback.
"""

from __future__ import annotations


class FlamebodeError(Exception):
    """Base of every error the tool reports to a user as a plain message."""


class ConfigError(FlamebodeError):
    """A rig, plan or scenario file is malformed; the message names file and key."""

    def __init__(self, path: str, problems: list[str]):
        self.path = path
        self.problems = list(problems)
        lines = "\n".join(f"  - {p}" for p in self.problems)
        super().__init__(f"{path}: {len(self.problems)} problem(s)\n{lines}")


class RecordError(FlamebodeError):
    """A recorded data file cannot be used (missing channel, bad cells, too short...)."""
