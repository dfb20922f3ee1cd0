"""A station's local spool (`spool.sqlite3` in its data folder) when its ledger is on a server.

It holds what must survive the server being away and the station being stopped:
- `claims`: files taken on and not yet recorded (a station killed mid-file redoes them);
- `outcomes`: finished runs the server has not confirmed yet, oldest first, each with the
  idempotent `record_key` it is recorded under, so a replay after a lost answer is one run;
- `known`: what this instrument's newest version of each file is (sha256, size, time stamp),
  so the station can tell unchanged files while the server is away.

One connection per thread (`open_spool`), WAL, writes in BEGIN IMMEDIATE transactions.
"""
from __future__ import annotations

import json
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from processing.station.ledger import BUSY_TIMEOUT_MS, Claim, ledger_problem, now_iso, path_of, stored_path

SPOOL_FILE = "spool.sqlite3"
SPOOL_SCHEMA = 1
SPOOL_TABLES = """
    CREATE TABLE claims (
        claim_id    INTEGER PRIMARY KEY AUTOINCREMENT,
        path        TEXT NOT NULL,
        sha256      TEXT,
        received_at TEXT NOT NULL,
        owner_pid   INTEGER
    );
    CREATE TABLE outcomes (
        seq         INTEGER PRIMARY KEY AUTOINCREMENT,
        record_key  TEXT NOT NULL UNIQUE,
        path        TEXT NOT NULL,
        fields_json TEXT NOT NULL,
        result_json TEXT,
        spooled_at  TEXT NOT NULL
    );
    CREATE TABLE known (
        path       TEXT PRIMARY KEY,
        sha256     TEXT,
        size_bytes INTEGER,
        mtime_ns   INTEGER,
        run_id     INTEGER
    );
"""


@dataclass(frozen=True)
class SpooledOutcome:
    """One finished run waiting for the server: `record_run`'s arguments and its key."""

    seq: int
    record_key: str
    path: str
    fields: dict[str, Any]  # sha256, status, error, received_at, size_bytes, mtime_ns, ...
    result_json: str | None
    spooled_at: str


def spool_path(data_dir: str | Path) -> Path:
    return Path(data_dir) / SPOOL_FILE


def open_spool(data_dir: str | Path) -> sqlite3.Connection:
    """Open (creating as needed) the spool in `data_dir`; problems are one LedgerError line."""
    path = spool_path(data_dir)
    try:
        conn = sqlite3.connect(path, timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None)
        conn.row_factory = sqlite3.Row
        conn.execute("PRAGMA journal_mode = WAL")
        conn.execute("PRAGMA synchronous = FULL")  # the only copy of an outcome while the server is away
        if int(conn.execute("PRAGMA user_version").fetchone()[0]) == 0:
            conn.execute("BEGIN IMMEDIATE")
            try:
                if int(conn.execute("PRAGMA user_version").fetchone()[0]) == 0:
                    for statement in SPOOL_TABLES.split(";"):
                        if statement.strip():
                            conn.execute(statement)
                    conn.execute(f"PRAGMA user_version = {SPOOL_SCHEMA}")
                conn.execute("COMMIT")
            except BaseException:
                conn.execute("ROLLBACK")
                raise
    except sqlite3.Error as error:
        raise ledger_problem(path, error) from None
    return conn


class Spool:
    """The spool's operations over one connection (each thread makes its own Spool)."""

    def __init__(self, data_dir: str | Path) -> None:
        self.path = spool_path(data_dir)
        self.conn = open_spool(data_dir)

    def close(self) -> None:
        self.conn.close()

    # -------------------------------------------------------------- claims

    def claim(self, path: str, sha256: str | None, owner_pid: int | None) -> Claim:
        stamp = now_iso()
        cursor = self.conn.execute(
            "INSERT INTO claims (path, sha256, received_at, owner_pid) VALUES (?, ?, ?, ?)",
            (stored_path(path), sha256, stamp, owner_pid),
        )
        return Claim(int(cursor.lastrowid or 0), path, sha256, stamp, owner_pid)

    def claims(self) -> list[Claim]:
        rows = self.conn.execute("SELECT * FROM claims ORDER BY claim_id").fetchall()
        return [Claim(r["claim_id"], path_of(r["path"]), r["sha256"], r["received_at"], r["owner_pid"]) for r in rows]

    def drop_claim(self, claim_id: int) -> None:
        self.conn.execute("DELETE FROM claims WHERE claim_id = ?", (claim_id,))

    # -------------------------------------------------------------- outcomes

    def add(self, record_key: str, path: str, fields: dict[str, Any], result_json: str | None, claim_id: int | None) -> int:
        """Keep an outcome (and drop its claim) in one transaction; how many now wait."""
        self.conn.execute("BEGIN IMMEDIATE")
        try:
            self.conn.execute(
                "INSERT INTO outcomes (record_key, path, fields_json, result_json, spooled_at) VALUES (?, ?, ?, ?, ?)",
                (record_key, stored_path(path), json.dumps(fields), result_json, now_iso()),
            )
            if claim_id is not None:
                self.conn.execute("DELETE FROM claims WHERE claim_id = ?", (claim_id,))
            self.remember(path, fields.get("sha256"), fields.get("size_bytes"), fields.get("mtime_ns"), None)
            self.conn.execute("COMMIT")
        except BaseException:
            self.conn.execute("ROLLBACK")
            raise
        return self.waiting()

    def waiting(self) -> int:
        return int(self.conn.execute("SELECT count(*) FROM outcomes").fetchone()[0])

    def oldest(self, limit: int = 50) -> list[SpooledOutcome]:
        rows = self.conn.execute("SELECT * FROM outcomes ORDER BY seq LIMIT ?", (limit,)).fetchall()
        return [
            SpooledOutcome(r["seq"], r["record_key"], path_of(r["path"]), json.loads(r["fields_json"]), r["result_json"], r["spooled_at"])
            for r in rows
        ]

    def recorded(self, outcome: SpooledOutcome, run_id: int) -> None:
        """The server holds `outcome` as run `run_id`: forget it, remember the run."""
        self.conn.execute("BEGIN IMMEDIATE")
        try:
            self.conn.execute("DELETE FROM outcomes WHERE seq = ?", (outcome.seq,))
            fields = outcome.fields
            self.remember(outcome.path, fields.get("sha256"), fields.get("size_bytes"), fields.get("mtime_ns"), run_id)
            self.conn.execute("COMMIT")
        except BaseException:
            self.conn.execute("ROLLBACK")
            raise

    # -------------------------------------------------------------- what this instrument has

    def remember(self, path: str, sha256: str | None, size_bytes: int | None, mtime_ns: int | None, run_id: int | None) -> None:
        """What this instrument has of `path` (the caller holds the transaction, or none is needed)."""
        self.conn.execute(
            "INSERT INTO known (path, sha256, size_bytes, mtime_ns, run_id) VALUES (?, ?, ?, ?, ?)"
            " ON CONFLICT (path) DO UPDATE SET sha256 = excluded.sha256, size_bytes = excluded.size_bytes,"
            " mtime_ns = excluded.mtime_ns, run_id = excluded.run_id",
            (stored_path(path), sha256, size_bytes, mtime_ns, run_id),
        )

    def refresh_known(self, sha_by_path: dict[str, str | None], stat_by_path: dict[str, tuple[int, int]]) -> None:
        """Take the server's view of this instrument's files (outcomes still waiting stay)."""
        self.conn.execute("BEGIN IMMEDIATE")
        try:
            waiting = {path_of(r[0]) for r in self.conn.execute("SELECT path FROM outcomes").fetchall()}
            self.conn.execute("DELETE FROM known WHERE path NOT IN (SELECT path FROM outcomes)")
            for path, sha in sha_by_path.items():
                if path in waiting:
                    continue
                size, mtime = stat_by_path.get(path, (None, None))
                self.remember(path, sha, size, mtime, None)
            self.conn.execute("COMMIT")
        except BaseException:
            self.conn.execute("ROLLBACK")
            raise

    def known_sha(self) -> dict[str, str | None]:
        return {path_of(r[0]): r[1] for r in self.conn.execute("SELECT path, sha256 FROM known").fetchall()}

    def known_stat(self) -> dict[str, tuple[int, int]]:
        rows = self.conn.execute("SELECT path, size_bytes, mtime_ns FROM known WHERE size_bytes IS NOT NULL AND mtime_ns IS NOT NULL")
        return {path_of(r[0]): (int(r[1]), int(r[2])) for r in rows.fetchall()}

    def known_for(self, path: str) -> tuple[str | None, int | None] | None:
        """(sha256, run id or None while spooled) of the newest version of `path`, or None."""
        row = self.conn.execute("SELECT sha256, run_id FROM known WHERE path = ?", (stored_path(path),)).fetchone()
        return None if row is None else (row[0], row[1])
