"""Fixtures shared by every test folder: the ledger backends (a SQLite data folder, or a
database on a throwaway PostgreSQL server that the session starts, see pg_server.py)."""
from __future__ import annotations

import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

import pg_server


@pytest.fixture(scope="session")
def postgres() -> Iterator[pg_server.PgServer]:
    """One throwaway PostgreSQL server for the whole test session (see pg_server.py)."""
    try:
        server = pg_server.start_server()
    except pg_server.ServerUnavailable as reason:
        if pg_server.required():
            pytest.fail(f"PostgreSQL tests cannot run: {reason} ({pg_server.REQUIRE_VARIABLE} is set)")
        pytest.skip(f"PostgreSQL tests skipped: {reason}")
    yield server
    server.destroy()


@pytest.fixture()
def pg_url(postgres: pg_server.PgServer) -> Iterator[str]:
    """A new, empty database on the test server (dropped afterwards), as a ledger URL."""
    name = f"ledger_{uuid.uuid4().hex[:12]}"
    postgres.admin(f"CREATE DATABASE {name}")
    yield postgres.url(name)
    postgres.admin(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")


@pytest.fixture(params=["sqlite", "postgresql"])
def ledger_at(request: pytest.FixtureRequest, tmp_path: Path) -> str | Path:
    """Where a ledger is, on each backend in turn: a data folder (SQLite) or a server URL."""
    if request.param == "sqlite":
        return tmp_path / "data"
    return str(request.getfixturevalue("pg_url"))
