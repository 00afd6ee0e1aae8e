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


def test_the_run_service_contracts_are_declared():
    """The service layer's contracts (DEVELOPERS.md, layers) are among those run above."""
    import tomllib

    contracts = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["importlinter"]["contracts"]
    by_source = {tuple(c["source_modules"]): set(c["forbidden_modules"]) for c in contracts}
    assert {"PySide6", "pyqtgraph", "app.ui", "app.cli", "app.commands"} <= by_source[("app.services",)]
    assert {"app.storage", "app.commands"} <= by_source[("app.ui",)]
    run_commands = next(s for s in by_source if "app.commands.accept" in s)
    assert "app.storage" in by_source[run_commands] and "app.commands.review" in run_commands
