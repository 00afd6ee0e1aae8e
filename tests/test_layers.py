"""Layer check: the import-linter contracts in pyproject.toml must hold.

The measurement core never imports Qt, pyqtgraph or any ``drivers`` module; drivers
never import the engine, storage or the front end; and so on (see DEVELOPERS.md).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_import_contracts_hold():
    proc = subprocess.run([sys.executable, "-c", "import sys; from importlinter.cli import lint_imports_command; sys.exit(lint_imports_command())"],
                          cwd=ROOT, capture_output=True, text=True, timeout=240)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "BROKEN" not in proc.stdout and "KEPT" in proc.stdout
