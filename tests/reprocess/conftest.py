"""Fixtures for the reprocess tests (helpers are in reprocess_support.py)."""
from __future__ import annotations

import sys
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:  # archive_files, reprocess_hooks: also in the pool's processes
    sys.path.insert(0, str(HERE))


@pytest.fixture()
def isolated(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """No user configuration or data folder leaks in."""
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "no-config.toml"))
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    return tmp_path
