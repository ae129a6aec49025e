"""The layers are a test, not a hope: import-linter checks the contracts written in pyproject.toml."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_the_import_contracts_hold():
    # lint-imports reads [tool.importlinter] from pyproject.toml; its module form runs where PATH lacks the script.
    result = subprocess.run([sys.executable, "-c", "import sys; from importlinter.cli import lint_imports; "
                             "sys.exit(lint_imports())"], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert result.returncode == 0, result.stdout + result.stderr
    assert "Contracts: 4 kept, 0 broken." in result.stdout
