"""ruff (configured in pyproject.toml) finds nothing: unused or undefined names, bare excepts,
`except Exception: pass`, mutable defaults."""
from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_finds_nothing() -> None:
    ruff = shutil.which("ruff", path=str(Path(sys.executable).parent)) or shutil.which("ruff")
    assert ruff, "ruff is part of the test extra"
    result = subprocess.run([ruff, "check", "--output-format", "concise", "."], capture_output=True, text=True, cwd=ROOT)
    assert result.returncode == 0, result.stdout + result.stderr
