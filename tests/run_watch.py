"""Test helpers for watching a run folder that another process is writing (not a test module)."""

from __future__ import annotations

import sqlite3
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def run_cli(*args: str, cwd: Path = ROOT, timeout_s: float = 170) -> subprocess.CompletedProcess:
    """``flamebode ARGS`` as a user runs it: a real process, output captured as text."""
    return subprocess.run([sys.executable, "-m", "app.cli", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=timeout_s)


def short_plan_text(name: str, start_hz: float, stop_hz: float, step_hz: float, record_s: float) -> str:
    """A small FTF plan (5 % peak forcing, short settle and tuning windows) as TOML text."""
    return (f'name = "{name}"\n[frequencies]\n'
            f'linear = {{ start = "{start_hz:g} Hz", stop = "{stop_hz:g} Hz", step = "{step_hz:g} Hz" }}\n'
            f'[amplitude]\nvalues = [0.05]\nbasis = "peak"\n[timing]\nrecord = "{record_s:g} s"\n'
            f'settle = "0.2 s"\ntuning_window = "0.2 s"\ntuning_discard = "0.05 s"\n')


def committed_attempts(run_dir: Path) -> set[str]:
    """Attempt ids committed to the run's index so far (read-only; empty while it cannot be read)."""
    try:
        con = sqlite3.connect(f"{(run_dir / 'index.sqlite').as_uri()}?mode=ro", uri=True, timeout=0.2)
        try:
            return {r[0] for r in con.execute("SELECT attempt_id FROM attempts")}
        finally:
            con.close()
    except sqlite3.Error:
        return set()
