"""Helpers for the reprocess tests: ledgers read back with plain SQLite (not bandwatch's code)."""
from __future__ import annotations

import sqlite3
from collections import Counter
from pathlib import Path

from archive_files import write_archive  # noqa: F401  (re-exported for the tests)


def versions_by_path(data: Path) -> Counter[str]:
    """How many versions the ledger in `data` holds of each path."""
    conn = sqlite3.connect(data / "ledger.sqlite3")
    try:
        return Counter(str(row[0]) for row in conn.execute("SELECT path FROM runs"))
    finally:
        conn.close()


def stored_results(data: Path) -> dict[str, str]:
    """path -> the stored result JSON of its newest version."""
    conn = sqlite3.connect(data / "ledger.sqlite3")
    try:
        rows = conn.execute(
            "SELECT path, result_json FROM runs AS r WHERE version = (SELECT MAX(version) FROM runs WHERE path = r.path)"
        ).fetchall()
    finally:
        conn.close()
    return {str(path): text for path, text in rows}
