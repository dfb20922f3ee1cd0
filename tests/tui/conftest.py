"""Fixtures for the interface tests (helpers live in tui_support.py: fixed times, hand-made results of the public shape).

The numbers in the hand-made results only have to look like a real HCl run (the interface
renders them, it computes nothing); they are H35Cl/H37Cl values of the right size:
# H35Cl band origin 2885.98 cm-1, B_e 10.5934 cm-1, alpha_e 0.3072 cm-1, r_e 1.27455 Å:
# Huber & Herzberg 1979 via NIST WebBook, values recalled from memory.
"""
from __future__ import annotations

import asyncio
import inspect
from pathlib import Path

import pytest

from tui_support import make_lab


@pytest.hookimpl(tryfirst=True)
def pytest_pyfunc_call(pyfuncitem: pytest.Function) -> bool | None:
    """Run `async def` tests in a fresh event loop (no asyncio plugin needed)."""
    if not inspect.iscoroutinefunction(pyfuncitem.obj):
        return None
    arguments = {name: pyfuncitem.funcargs[name] for name in pyfuncitem._fixtureinfo.argnames}
    asyncio.run(pyfuncitem.obj(**arguments))
    return True


@pytest.fixture(autouse=True)
def no_user_keys_file(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    """Tests never read the keys file of whoever runs them."""
    monkeypatch.setenv("BANDWATCH_KEYS", str(tmp_path / "no-keys.toml"))


@pytest.fixture
def lab(tmp_path: Path) -> dict[str, Path]:
    """An export folder with three spectra and a data folder whose ledger holds their runs."""
    return make_lab(tmp_path)
