"""The ledger: runs (one row per file version) and operator decisions, in a SQLite file (the
default) or on a PostgreSQL server shared by several instruments (`ledger_postgres`).

Plain functions over a connection, returning frozen dataclasses; the same functions and the same
SQL serve both backends (`open_ledger` takes a data folder or a `postgresql://` URL; the server's
connection takes SQLite's SQL, see `ledger_postgres`). Each thread or process opens its own
connection; WAL mode lets readers (`bandwatch ledger list`, the app) read while the station
writes. The schema version lives in `PRAGMA user_version` (the server: `ledger_schema`);
`MIGRATIONS` (the server: `SERVER_MIGRATIONS`, entry for entry) takes any older
ledger forward. Decisions are an append-only audit trail, enforced by the database: a change of
mind is a new event and "undo" is a new event that reverts to the state before the latest one.
Runs are keyed by instrument + path (+ version); `changes_after` is the feed every open
interface polls to see what was recorded elsewhere.

Runs in progress are not rows in `runs`: the station first writes a claim (`claim_file`), and
`record_run(..., claim_id=...)` writes the run and drops the claim in one transaction, so a
station killed mid-file leaves only a claim, which the next start redoes.
"""
from __future__ import annotations

import contextlib
import functools
import itertools
import json
import os
import sqlite3
import stat
import threading
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeVar, Union
from urllib.parse import quote, unquote_to_bytes

from processing import strict_json
from processing.provenance import Provenance
from processing.safe_text import safe_text
from processing.station import ledger_postgres
from processing.station.ledger_errors import LedgerError as LedgerError  # re-exported: callers import it from here
from processing.station.ledger_errors import LedgerRefused as LedgerRefused
from processing.station.ledger_errors import LedgerUnavailable as LedgerUnavailable
from processing.station.ledger_postgres import SqlParams, SqlValue, is_server_url, shown_url

if TYPE_CHECKING:
    from processing.results import RunResult
    from processing.run_digest import QuantityRow, RunDigest
    from processing.station.ledger_postgres import PostgresConnection

# a ledger connection: the SQLite file's, or the server's (which takes the same SQL)
Connection = Union[sqlite3.Connection, "PostgresConnection"]
LedgerRow = Union[sqlite3.Row, "ledger_postgres.Row"]  # answers by column name and by position
_Item = TypeVar("_Item")

LEDGER_FILE = "ledger.sqlite3"
RUN_STATUSES = ("processed", "unreadable", "failed")
DECISION_ACTIONS = ("accept", "flag")
UNDO = "undo"
BUSY_TIMEOUT_MS = 10_000


# 4 -> 5: what each version was made with (`processing.provenance`): `bandwatch reprocess`
# skips files whose newest version has today's analysis, library and settings (the same SQL on
# the file and on a server)
PROVENANCE_COLUMNS = """
    ALTER TABLE runs ADD COLUMN analysis_version TEXT;
    ALTER TABLE runs ADD COLUMN library_hash TEXT;
    ALTER TABLE runs ADD COLUMN settings_hash TEXT;
"""

# Each entry takes the schema from user_version == index to index + 1: SQL, or a function of
# the connection for what SQL cannot say. Never edit an entry that has shipped; add a new one.
Migration = str | Callable[[sqlite3.Connection], None]
MIGRATIONS: tuple[Migration, ...] = (
    # 0 -> 1: runs and decisions
    """
    CREATE TABLE runs (
        run_id       INTEGER PRIMARY KEY AUTOINCREMENT,
        path         TEXT NOT NULL,
        sha256       TEXT,
        version      INTEGER NOT NULL,
        status       TEXT NOT NULL,
        verdict      TEXT,
        species      TEXT NOT NULL DEFAULT '',
        result_json  TEXT,
        error        TEXT,
        received_at  TEXT NOT NULL,
        processed_at TEXT,
        UNIQUE (path, version)
    );
    CREATE INDEX runs_by_path ON runs (path, version);
    CREATE TABLE decisions (
        event_id  INTEGER PRIMARY KEY AUTOINCREMENT,
        run_id    INTEGER NOT NULL REFERENCES runs (run_id),
        action    TEXT NOT NULL CHECK (action IN ('accept', 'flag', 'undo')),
        reason    TEXT NOT NULL DEFAULT '',
        operator  TEXT NOT NULL DEFAULT '',
        at        TEXT NOT NULL
    );
    CREATE INDEX decisions_by_run ON decisions (run_id, event_id);
    CREATE TRIGGER decisions_append_only_update BEFORE UPDATE ON decisions
    BEGIN SELECT RAISE(ABORT, 'decisions are append-only'); END;
    CREATE TRIGGER decisions_append_only_delete BEFORE DELETE ON decisions
    BEGIN SELECT RAISE(ABORT, 'decisions are append-only'); END;
    """,
    # 1 -> 2: claims (runs in progress), settings of reprocessed runs
    """
    ALTER TABLE runs ADD COLUMN settings_json TEXT;
    ALTER TABLE runs ADD COLUMN reprocessed_from INTEGER REFERENCES runs (run_id);
    CREATE TABLE claims (
        claim_id    INTEGER PRIMARY KEY AUTOINCREMENT,
        path        TEXT NOT NULL,
        sha256      TEXT,
        received_at TEXT NOT NULL,
        owner_pid   INTEGER
    );
    CREATE INDEX claims_by_path ON claims (path);
    """,
    # 2 -> 3: the file's size and time stamp when read, so a restart need not re-read
    # unchanged files to know they are done
    """
    ALTER TABLE runs ADD COLUMN size_bytes INTEGER;
    ALTER TABLE runs ADD COLUMN mtime_ns INTEGER;
    """,
    # 3 -> 4: every fitted quantity of a run as a row, so a trend is one query (`trend`);
    # the runs already recorded get theirs from their stored results
    lambda conn: _add_quantities_table(conn),
    # 4 -> 5: what each version was made with
    PROVENANCE_COLUMNS,
    # 5 -> 6: instruments (runs keyed by instrument + path), idempotent record keys (a spooled
    # outcome replayed twice is one run) and the change journal the interfaces poll
    lambda conn: _add_instruments_and_changes(conn),
    # 6 -> 7: each run's main reasons (the run list shows them without decoding results); the
    # runs already recorded get theirs from their stored results
    lambda conn: _add_reasons(conn),
)
SCHEMA_VERSION = len(MIGRATIONS)
# The same migrations on a server, entry for entry (ledger_postgres holds their SQL); a test
# compares the two schemas column by column at the current version.
SERVER_MIGRATIONS: tuple[ledger_postgres.PgMigration, ...] = (
    ledger_postgres.RUNS_AND_DECISIONS,
    ledger_postgres.CLAIMS,
    ledger_postgres.FILE_STAT,
    lambda conn: _add_quantities_table(conn),
    PROVENANCE_COLUMNS,
    ledger_postgres.INSTRUMENTS_AND_CHANGES,
    lambda conn: _add_reasons(conn),
)


@dataclass(frozen=True)
class RunRecord:
    """One version of one file, as the ledger holds it, with its current decision."""

    run_id: int
    path: str
    sha256: str | None
    version: int
    status: str  # "processed" | "unreadable" | "failed"
    verdict: str | None
    decision: str | None  # "accept" | "flag" | None (no decision, or all undone)
    decision_reason: str | None
    operator: str | None  # who made the current decision
    received_at: str
    processed_at: str | None
    species: tuple[str, ...]
    error: str | None
    result: RunResult | None
    settings: dict[str, Any] | None = None  # only for runs reprocessed with changed settings
    reprocessed_from: int | None = None
    decided_at: str | None = None
    instrument: str = ""  # the station's instrument name ("" for runs recorded before instruments)
    provenance: Provenance | None = None  # what this version was made with (None: recorded before bandwatch kept it)
    reasons: tuple[str, ...] = ()  # the verdict's main reasons (`result_text.main_reasons`)
    decision_event_id: int | None = None  # the decision event in effect
    superseded_by: int | None = None  # the run id of the newest later version of the same file

    @property
    def name(self) -> str:
        """The file name without its folder, for tables and event lines (os.path: a listing
        asks 100,000 runs, and pathlib parses the whole path)."""
        return os.path.basename(self.path)


@dataclass(frozen=True)
class DecisionEvent:
    """One entry of the append-only decision trail ("accept", "flag" or "undo")."""

    event_id: int
    run_id: int
    action: str
    reason: str
    operator: str
    at: str


@dataclass(frozen=True)
class Claim:
    """A file the station has taken on but not yet recorded (a run in progress)."""

    claim_id: int
    path: str
    sha256: str | None
    received_at: str
    owner_pid: int | None




SERVER_BYTES_PATH = "bytes:"  # a server path that is not UTF-8: this prefix, then %-escaped bytes


def dialect(conn: Connection) -> str:
    """"sqlite" or "postgresql": the few places where the two backends' SQL differs ask this."""
    return getattr(conn, "dialect", "sqlite")


def stored_path(path: str, conn: Connection | None = None) -> str | bytes:
    """A path as the ledger stores it: text, or its exact bytes when the file name is not valid
    UTF-8 (Python holds such names with surrogate escapes, which SQLite text cannot take; the
    server's text column takes them %-escaped after `SERVER_BYTES_PATH`; stored paths are
    absolute, so the prefix cannot be a real name)."""
    try:
        path.encode("utf-8")
    except UnicodeEncodeError:
        raw = os.fsencode(path)
        if conn is not None and dialect(conn) == "postgresql":
            return SERVER_BYTES_PATH + quote(raw, safe="/")
        return raw
    return path


def path_of(value: str | bytes, conn: Connection | None = None) -> str:
    """A stored path back as the file system's name (bytes through os.fsdecode)."""
    if isinstance(value, bytes):
        return os.fsdecode(value)
    if conn is not None and dialect(conn) == "postgresql" and value.startswith(SERVER_BYTES_PATH):
        return os.fsdecode(unquote_to_bytes(value[len(SERVER_BYTES_PATH):]))
    return value


def now_iso() -> str:
    """The current UTC time as ISO 8601 with milliseconds (sorts as text)."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def ledger_path(data_dir: str | Path) -> Path:
    return Path(data_dir) / LEDGER_FILE


RESTORE_ADVICE = (
    "bandwatch will not replace it: move it aside and restore a backup, or start a new ledger by "
    "moving it away (runs recorded in it are then no longer listed)"
)


def describe_ledger(where: str | Path) -> str:
    """Where a ledger is, for messages: the file, or the server's URL without a password."""
    return shown_url(str(where)) if is_server_url(where) else str(ledger_path(where))


def open_ledger(data_dir: str | Path, *, read_only: bool = False) -> Connection:
    """Open the ledger in `data_dir` (one connection per thread), creating and migrating it as
    needed; `read_only` opens an existing ledger for reading only (a read-only folder is fine).
    `data_dir` may instead be a `postgresql://` URL: the ledger on that server (see
    `open_server_ledger`).

    Every problem is one `LedgerError` line with what to do: a missing folder or ledger, one
    that is empty, damaged, not a database, locked, on a full or read-only disk. An existing
    ledger is never replaced, and the file is only ever opened by SQLite.
    """
    if is_server_url(data_dir):
        return open_server_ledger(str(data_dir), read_only=read_only)
    folder = Path(data_dir)
    path = ledger_path(folder)
    try:
        found = os.stat(path)  # by name: opens nothing
    except FileNotFoundError:
        found = None
    except OSError as error:
        raise LedgerError(f"{path}: cannot be reached ({error.strerror or error})") from None
    if found is None:
        if read_only:
            raise LedgerError(f"{folder}: no ledger here yet (run `bandwatch watch` first, or give --data)")
        _create(folder, path)
    elif stat.S_ISDIR(found.st_mode):
        raise LedgerError(f"{path} is a folder, not a ledger; move it away")
    elif not stat.S_ISREG(found.st_mode):
        raise LedgerError(f"{path} is not a regular file; move it away")
    elif found.st_size == 0:
        raise LedgerError(
            f"{path} is empty (0 bytes): its history is gone; {RESTORE_ADVICE}"
        )
    try:
        return _connect(path, read_only)
    except sqlite3.Error as error:
        raise ledger_problem(path, error) from None
    except LedgerError as error:
        raise LedgerError(error if str(path) in str(error) else f"{path}: {error}") from None


def found_schema_version(where: str | Path) -> int:
    """The schema version a ledger has now, without changing it (0: none yet)."""
    if is_server_url(where):
        conn = ledger_postgres.connect(str(where))
        try:
            return ledger_postgres.schema_version(conn)
        finally:
            conn.close()
    path = ledger_path(where)
    if not path.exists():
        return 0
    conn = open_ledger_file_as_is(path)
    try:
        return schema_version(conn)
    finally:
        conn.close()


def open_ledger_file_as_is(path: Path) -> sqlite3.Connection:
    """A read-only connection to a ledger file at whatever schema it has (no check, no migration)."""
    try:
        return _connect_read_only(path)
    except sqlite3.Error as error:
        raise ledger_problem(path, error) from None


def open_server_ledger(url: str, *, read_only: bool = False, migrate_schema: bool = True) -> PostgresConnection:
    """The ledger on a PostgreSQL server. Its schema version is checked first: a newer one is
    refused in one line; an older one is brought forward when this role may (and `read_only`
    is False), else one line says who must run `bandwatch ledger migrate`."""
    conn = ledger_postgres.connect(url)
    where = conn.where
    try:
        found = ledger_postgres.schema_version(conn)
        if found > SCHEMA_VERSION:
            raise LedgerError(
                f"ledger {where}: schema version {found} is newer than this bandwatch understands "
                f"({SCHEMA_VERSION}); upgrade bandwatch"
            )
        if found < SCHEMA_VERSION:
            if read_only or not migrate_schema:
                raise LedgerError(
                    f"ledger {where}: schema version {found} is older than this bandwatch's ({SCHEMA_VERSION}); "
                    f"its owner brings it up to date with `bandwatch ledger migrate --ledger URL`"
                )
            try:
                ledger_postgres.migrate(conn, SCHEMA_VERSION, SERVER_MIGRATIONS)
            except LedgerRefused as error:
                raise LedgerError(
                    f"ledger {where}: schema version {found} needs bringing up to date ({SCHEMA_VERSION}) and "
                    f"this role may not ({error}); its owner runs `bandwatch ledger migrate --ledger URL`"
                ) from None
    except BaseException:
        conn.close()
        raise
    return conn


def ledger_problem(path: Path | str, error: BaseException) -> LedgerError:
    """A SQLite error on the ledger as one line saying what is wrong and what to do."""
    text = str(error)
    lowered = text.lower()
    if "not a database" in lowered or "malformed" in lowered or "corrupt" in lowered:
        return LedgerError(f"{path} is damaged (SQLite: {text}); {RESTORE_ADVICE}")
    if "locked" in lowered or "busy" in lowered:
        return LedgerError(f"{path} is locked by another program for over {BUSY_TIMEOUT_MS / 1000:g} s ({text})")
    if "full" in lowered:
        return LedgerError(f"{path}: the disk is full ({text}); free some space")
    if "readonly" in lowered or "read-only" in lowered or "unable to open" in lowered:
        return LedgerError(f"{path}: cannot be written or opened ({text}); check the data folder's permissions and free space")
    return LedgerError(f"{path}: {text}")


def _connect(path: Path, read_only: bool) -> sqlite3.Connection:
    if read_only:
        conn = _connect_read_only(path)
    else:
        conn = sqlite3.connect(path, timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None)
    try:
        conn.row_factory = sqlite3.Row
        conn.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        if not read_only:
            mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
            if str(mode).lower() != "wal":
                raise LedgerError(f"{path}: cannot switch to WAL journal mode (got {mode})")
            conn.execute("PRAGMA synchronous = NORMAL")
            conn.execute("PRAGMA foreign_keys = ON")
            migrate(conn)
        else:
            found = schema_version(conn)
            if found != SCHEMA_VERSION:
                newer = "newer than this bandwatch understands; upgrade bandwatch" if found > SCHEMA_VERSION else (
                    "older; open it once with write access (e.g. `bandwatch watch`) to bring it up to date")
                raise LedgerError(f"{path}: ledger schema version {found} is {newer}")
    except BaseException:
        conn.close()
        raise
    return conn


def _connect_read_only(path: Path) -> sqlite3.Connection:
    """Read-only: through the WAL when SQLite can reach it; in a read-only folder without a WAL
    (closed cleanly) as an immutable file, which needs no shared-memory file."""
    uri = f"file:{quote(os.fsencode(str(path.resolve())))}"
    conn = sqlite3.connect(f"{uri}?mode=ro", uri=True, timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None)
    try:
        conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        return conn
    except sqlite3.OperationalError as error:
        conn.close()
        wal = path.with_name(path.name + "-wal")
        if os.access(path.parent, os.W_OK) or wal.exists():
            raise ledger_problem(path, error) from None
    return sqlite3.connect(f"{uri}?mode=ro&immutable=1", uri=True, isolation_level=None)


def _create(folder: Path, path: Path) -> None:
    """A new ledger, made whole under a temporary name and then linked into place, so a
    ledger file never exists half made (an empty ledger file is refused, never reused)."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise LedgerError(f"{folder}: cannot make the data folder ({error.strerror or error})") from None
    temporary = folder / f".{LEDGER_FILE}.{os.getpid()}.{threading.get_ident()}.new"
    try:
        conn = sqlite3.connect(temporary, isolation_level=None)
        try:
            conn.execute("PRAGMA journal_mode = WAL")
            migrate(conn)
        finally:
            conn.close()
        try:
            os.link(temporary, path)
        except FileExistsError:
            pass  # another thread or process made it first: theirs is used
        except OSError:
            if not path.exists():  # a file system without hard links
                os.rename(temporary, path)
    except sqlite3.Error as error:
        raise ledger_problem(path, error) from None
    except OSError as error:
        raise LedgerError(f"{path}: cannot be created ({error.strerror or error})") from None
    finally:
        for leftover in (temporary, temporary.with_name(temporary.name + "-wal"), temporary.with_name(temporary.name + "-shm")):
            try:
                os.unlink(leftover)
            except FileNotFoundError:
                pass
            except OSError:
                pass  # a read-only folder would have failed above


def integrity_problem(conn: Connection, path: Path | str) -> str | None:
    """None when SQLite's quick check finds the ledger sound, else a one-line description
    (a server keeps its own integrity: None)."""
    if dialect(conn) != "sqlite":
        return None
    try:
        rows = conn.execute("PRAGMA quick_check(5)").fetchall()
    except sqlite3.Error as error:
        return str(ledger_problem(path, error))
    found = [str(row[0]) for row in rows]
    if found == ["ok"]:
        return None
    return f"{path} is damaged (SQLite quick_check: {'; '.join(found)[:300]}); {RESTORE_ADVICE}"


def schema_version(conn: Connection) -> int:
    if dialect(conn) == "postgresql":
        return ledger_postgres.schema_version(conn)  # type: ignore[arg-type]
    return int(conn.execute("PRAGMA user_version").fetchone()[0])


def migrate(conn: sqlite3.Connection) -> int:
    """Bring the schema to SCHEMA_VERSION; returns the version found before migrating."""
    found = schema_version(conn)
    if found == SCHEMA_VERSION:
        return found
    if found > SCHEMA_VERSION:
        raise LedgerError(
            f"ledger schema version {found} is newer than this bandwatch understands "
            f"({SCHEMA_VERSION}); upgrade bandwatch"
        )
    # a migration may rebuild a table others refer to (SQLite's documented way): foreign keys
    # are off meanwhile (a no-op inside a transaction, so set before it) and checked before COMMIT
    keys_were_on = bool(conn.execute("PRAGMA foreign_keys").fetchone()[0])
    conn.execute("PRAGMA foreign_keys = OFF")
    conn.execute("BEGIN IMMEDIATE")
    try:
        current = schema_version(conn)  # another process may have migrated meanwhile
        for version in range(current, SCHEMA_VERSION):
            step = MIGRATIONS[version]
            if isinstance(step, str):
                for statement in _statements(step):
                    conn.execute(statement)
            else:
                step(conn)
            conn.execute(f"PRAGMA user_version = {version + 1}")
        broken = conn.execute("PRAGMA foreign_key_check").fetchall()
        if broken:
            raise LedgerError(f"migration left {len(broken)} row(s) pointing at nothing (first: {tuple(broken[0])}); nothing was changed")
        conn.execute("COMMIT")
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    finally:
        if keys_were_on:
            conn.execute("PRAGMA foreign_keys = ON")
    return found


def _statements(script: str) -> Iterable[str]:
    """Split a migration script into statements (trigger bodies kept whole)."""
    buffer = ""
    for piece in script.split(";"):
        buffer += piece + ";"
        if sqlite3.complete_statement(buffer):
            if buffer.strip(" \n;"):
                yield buffer.strip()
            buffer = ""


class _Transaction:
    """`with _Transaction(conn):` = BEGIN IMMEDIATE ... COMMIT (ROLLBACK on error). On the server
    BEGIN IMMEDIATE takes the ledger's writer lock: writes are serialised as on the file. Inside
    `one_transaction(conn)` it is part of that transaction (committed, or rolled back, with it)."""

    def __init__(self, conn: Connection) -> None:
        self.conn = conn
        self.joined = False

    def __enter__(self) -> Connection:
        self.joined = id(self.conn) in _ONE_TRANSACTION
        if not self.joined:
            self.conn.execute("BEGIN IMMEDIATE")
        return self.conn

    def __exit__(self, exc_type: object, exc: object, tb: object) -> None:
        if not self.joined:
            self.conn.execute("COMMIT" if exc_type is None else "ROLLBACK")


_ONE_TRANSACTION: set[int] = set()  # id() of the connections inside `one_transaction` (one thread each)


@contextlib.contextmanager
def one_transaction(conn: Connection) -> Iterator[Connection]:
    """`with one_transaction(conn):` records several runs (`record_run`) in one transaction: all
    are in the ledger at its COMMIT, none after an error (ROLLBACK). A station recording a burst
    pays one commit for several runs; it announces each only after the commit."""
    conn.execute("BEGIN IMMEDIATE")
    _ONE_TRANSACTION.add(id(conn))
    try:
        yield conn
    except BaseException:
        _ONE_TRANSACTION.discard(id(conn))
        conn.execute("ROLLBACK")
        raise
    _ONE_TRANSACTION.discard(id(conn))
    try:
        conn.execute("COMMIT")
    except BaseException:
        if getattr(conn, "in_transaction", False):
            conn.execute("ROLLBACK")
        raise


def _insert_returning(conn: Connection, sql: str, params: SqlParams, key: str) -> int:
    """Run an INSERT and return the new row's `key` (SQLite: lastrowid; server: RETURNING)."""
    if dialect(conn) == "sqlite":
        return int(conn.execute(sql, params).lastrowid or 0)  # type: ignore[union-attr]
    row = conn.execute(f"{sql} RETURNING {key}", params).fetchone()
    return int(row[0]) if row else 0


# ---------------------------------------------------------------- runs


def quantity_rows(result: RunResult) -> list[QuantityRow]:
    """(isotopologue, band, quantity, value, sigma, unit) of every fitted quantity of a run:
    band constants with their band ("1-0"), molecular constants with band ""."""
    from processing.results import BAND_QUANTITIES, MOLECULAR_CONSTANTS

    rows = []
    for band in result.bands:
        for name in BAND_QUANTITIES:
            estimate = band.quantity(name)
            if estimate is not None and _finite(estimate.value):
                rows.append((band.isotopologue, band.band, name, float(estimate.value), _sigma(estimate.sigma), estimate.unit))
    for entry in result.constants:
        for name in MOLECULAR_CONSTANTS:
            estimate = entry.constants.get(name)
            if estimate is not None and _finite(estimate.value):
                rows.append((entry.isotopologue, "", name, float(estimate.value), _sigma(estimate.sigma), estimate.unit))
    return rows


def _finite(value: float) -> bool:
    return isinstance(value, (int, float)) and value == value and abs(value) != float("inf")


def _sigma(sigma: float | None) -> float | None:
    return float(sigma) if sigma is not None and _finite(sigma) else None


def _insert_quantities(conn: Connection, run_id: int, rows: Iterable[QuantityRow]) -> None:
    """A run's fitted quantities (`quantity_rows`)."""
    conn.executemany(
        "INSERT INTO quantities (run_id, isotopologue, band, quantity, value, sigma, unit) VALUES (?, ?, ?, ?, ?, ?, ?)",
        [(run_id, *row) for row in rows],
    )


QUANTITIES_TABLE = """
    CREATE TABLE quantities (
        run_id       INTEGER NOT NULL REFERENCES runs (run_id),
        isotopologue TEXT NOT NULL,
        band         TEXT NOT NULL,
        quantity     TEXT NOT NULL,
        value        REAL NOT NULL,
        sigma        REAL,
        unit         TEXT NOT NULL
    );
    CREATE INDEX quantities_by_name ON quantities (isotopologue, quantity, band, run_id);
    CREATE INDEX quantities_by_run ON quantities (run_id);
"""


def _add_quantities_table(conn: Connection) -> None:
    """Migration 3 -> 4: the quantities table, filled from the processed runs already in the
    ledger (a stored result that cannot be read is left out of the trends, not an error)."""
    if dialect(conn) == "postgresql":
        conn.execute(ledger_postgres.QUANTITIES_TABLE)
    else:
        for statement in _statements(QUANTITIES_TABLE):
            conn.execute(statement)
    for run_id, result in _stored_results(conn, "status = 'processed' AND result_json IS NOT NULL"):
        _insert_quantities(conn, run_id, quantity_rows(result))


def _stored_results(conn: Connection, where: str, batch: int = 500) -> Iterable[tuple[int, RunResult]]:
    """(run_id, result) of the recorded runs matching `where` (a migration's SQL condition), in
    run id order, `batch` stored results in memory at a time; a stored result that cannot be
    read is left out, not an error."""
    from processing.results import ResultFormatError, from_json

    after = 0
    while True:
        rows = conn.execute(
            f"SELECT run_id, result_json FROM runs WHERE ({where}) AND run_id > ? ORDER BY run_id LIMIT ?", (after, batch)
        ).fetchall()
        for row in rows:
            try:
                yield int(row[0]), from_json(row[1])
            except ResultFormatError:
                continue
        if len(rows) < batch:
            return
        after = int(rows[-1][0])


_RUN_COLUMNS_V5 = (
    "run_id, path, sha256, version, status, verdict, species, result_json, error, received_at,"
    " processed_at, settings_json, reprocessed_from, size_bytes, mtime_ns, analysis_version, library_hash, settings_hash"
)
RUNS_TABLE_V6 = """
    CREATE TABLE runs_v6 (
        run_id           INTEGER PRIMARY KEY AUTOINCREMENT,
        path             TEXT NOT NULL,
        sha256           TEXT,
        version          INTEGER NOT NULL,
        status           TEXT NOT NULL,
        verdict          TEXT,
        species          TEXT NOT NULL DEFAULT '',
        error            TEXT,
        received_at      TEXT NOT NULL,
        processed_at     TEXT,
        settings_json    TEXT,
        reprocessed_from INTEGER REFERENCES runs (run_id),
        size_bytes       INTEGER,
        mtime_ns         INTEGER,
        analysis_version TEXT,
        library_hash     TEXT,
        settings_hash    TEXT,
        instrument       TEXT NOT NULL DEFAULT '',
        record_key       TEXT,
        result_json      TEXT,  -- last: a listing reads the columns before it, never its overflow pages
        UNIQUE (instrument, path, version)
    );
"""
INSTRUMENTS_AND_CHANGES = """
    CREATE INDEX runs_by_path ON runs (instrument, path, version);
    CREATE UNIQUE INDEX runs_by_record_key ON runs (record_key);
    CREATE INDEX runs_by_instrument ON runs (instrument, run_id);
    ALTER TABLE claims ADD COLUMN instrument TEXT NOT NULL DEFAULT '';
    CREATE TABLE changes (
        change_id INTEGER PRIMARY KEY AUTOINCREMENT,
        run_id    INTEGER NOT NULL,
        kind      TEXT NOT NULL
    );
    CREATE TRIGGER runs_changed AFTER INSERT ON runs
    BEGIN INSERT INTO changes (run_id, kind) VALUES (NEW.run_id, 'run'); END;
    CREATE TRIGGER decisions_changed AFTER INSERT ON decisions
    BEGIN INSERT INTO changes (run_id, kind) VALUES (NEW.run_id, 'decision'); END;
"""


def _rebuild_runs(conn: Connection, table_sql: str, name: str, columns: str) -> None:
    """SQLite changes a table's layout only by building it anew: `table_sql` makes the table
    `name`, `columns` of `runs` are copied into it, and it takes the name `runs`."""
    for statement in _statements(table_sql):
        conn.execute(statement)
    conn.execute(f"INSERT INTO {name} ({columns}) SELECT {columns} FROM runs")
    conn.execute("DROP TABLE runs")
    conn.execute(f"ALTER TABLE {name} RENAME TO runs")


def _add_instruments_and_changes(conn: sqlite3.Connection) -> None:
    """Migration 5 -> 6 on the file: `runs` rebuilt with `instrument` and `record_key` and the
    key (instrument, path, version) (SQLite cannot change a table's UNIQUE in place; `migrate`
    turns foreign keys off meanwhile), every column of version 5 carried over (provenance
    included), claims get `instrument`, and the change journal starts. Runs already recorded
    keep instrument "" until their station adopts them (`adopt_unnamed_runs`)."""
    _rebuild_runs(conn, RUNS_TABLE_V6, "runs_v6", _RUN_COLUMNS_V5)
    for statement in _statements(INSTRUMENTS_AND_CHANGES):
        conn.execute(statement)


_RUN_COLUMNS_V6 = _RUN_COLUMNS_V5 + ", instrument, record_key"
# version 7's `runs`: version 6's with `reasons_json` before the stored result (derived from
# the shipped 5 -> 6 text, which never changes)
RUNS_TABLE_V7 = RUNS_TABLE_V6.replace("runs_v6", "runs_v7").replace(
    "        result_json      TEXT,", "        reasons_json     TEXT,\n        result_json      TEXT,"
)
assert RUNS_TABLE_V7.count("reasons_json") == 1
# what a rebuilt `runs` needs again: its indexes and the change journal's trigger (as in 5 -> 6)
RUNS_INDEXES_V7 = """
    CREATE INDEX runs_by_path ON runs (instrument, path, version);
    CREATE UNIQUE INDEX runs_by_record_key ON runs (record_key);
    CREATE INDEX runs_by_instrument ON runs (instrument, run_id);
    CREATE TRIGGER runs_changed AFTER INSERT ON runs
    BEGIN INSERT INTO changes (run_id, kind) VALUES (NEW.run_id, 'run'); END;
"""


def _add_reasons(conn: Connection) -> None:
    """Migration 6 -> 7: `runs.reasons_json` (each run's main reasons, a JSON list), filled
    from the stored results (one that cannot be read keeps none). On the file `runs` is
    rebuilt so the new column comes before `result_json` (a listing never reads a stored
    result's overflow pages), ids and AUTOINCREMENT's memory kept; the server adds the column
    (it keeps long values apart anyway)."""
    if dialect(conn) == "postgresql":
        conn.execute(ledger_postgres.REASONS_COLUMN)
    else:
        row = conn.execute("SELECT seq FROM sqlite_sequence WHERE name = 'runs'").fetchone()
        _rebuild_runs(conn, RUNS_TABLE_V7, "runs_v7", _RUN_COLUMNS_V6)
        for statement in _statements(RUNS_INDEXES_V7):
            conn.execute(statement)
        if row is not None:
            conn.execute("UPDATE sqlite_sequence SET seq = max(seq, ?) WHERE name = 'runs'", (int(row[0]),))
    from processing.result_text import main_reasons

    filled = [
        (json.dumps(list(main_reasons(result))), run_id) for run_id, result in _stored_results(conn, "result_json IS NOT NULL")
    ]
    conn.executemany("UPDATE runs SET reasons_json = ? WHERE run_id = ?", filled)


def adopt_unnamed_runs(conn: Connection, instrument: str) -> int:
    """Give runs and claims recorded before instruments existed (instrument "") to `instrument`
    (a station does this with its own ledger file at start); how many runs it took."""
    if not instrument:
        return 0
    unnamed = "SELECT (SELECT count(*) FROM runs WHERE instrument = '') + (SELECT count(*) FROM claims WHERE instrument = '')"
    if not conn.execute(unnamed).fetchone()[0]:
        return 0  # nothing to adopt: no write (a station may start while another program holds the lock)
    with _Transaction(conn):
        found = conn.execute("SELECT count(*) FROM runs WHERE instrument = ''").fetchone()[0]
        if found:
            conn.execute("UPDATE runs SET instrument = ? WHERE instrument = ''", (instrument,))
        conn.execute("UPDATE claims SET instrument = ? WHERE instrument = ''", (instrument,))
    return int(found)


def next_version(conn: Connection, path: str, instrument: str = "") -> int:
    row = conn.execute(
        "SELECT MAX(version) FROM runs WHERE instrument = ? AND path = ?", (instrument, stored_path(path, conn))
    ).fetchone()
    return int(row[0] or 0) + 1


def record_run(
    conn: Connection,
    path: str,
    sha256: str | None,
    status: str,
    *,
    result: RunResult | None = None,
    result_json: str | None = None,
    digest: RunDigest | None = None,
    error: str | None = None,
    verdict: str | None = None,
    species: tuple[str, ...] | None = None,
    received_at: str | None = None,
    processed_at: str | None = None,
    claim_id: int | None = None,
    settings: dict[str, Any] | None = None,
    reprocessed_from: int | None = None,
    size_bytes: int | None = None,
    mtime_ns: int | None = None,
    instrument: str = "",
    record_key: str | None = None,
    provenance: Provenance | None = None,
) -> RunRecord:
    """Record a finished run as the next version of `path` on `instrument`; drops `claim_id`
    atomically.

    `verdict` and `species` default to what `result` says; `result_json` is its JSON text
    when the caller already encoded it (the reports write the same bytes). Its fitted
    quantities go into `quantities` in the same transaction. `digest` (`run_digest`, with
    `result_json`) stands for the result: what is stored is taken from it, and the result
    object is not needed (a station's worker made both). `size_bytes` and `mtime_ns` are
    the file's stat when it was read (lets a restart skip unchanged files without reading);
    `provenance` what the result was made with (analysis version, library and settings hashes).
    `record_key` makes the record idempotent: a run already recorded under that key is
    returned as it is, nothing is written (a spooled outcome replayed after a lost answer).
    """
    from processing.run_digest import digest_of
    from processing.results import to_json

    if status not in RUN_STATUSES:
        raise ValueError(f"run status must be one of {RUN_STATUSES}, not {status!r}")
    if digest is None and result is not None:
        digest = digest_of(result)
    if result is not None and result_json is None:
        result_json = to_json(result)
    if digest is not None and result_json is None:
        raise ValueError("a run recorded from its digest needs its result's JSON too")
    if verdict is None and digest is not None:
        verdict = digest.verdict
    if species is None:
        species = digest.species if digest is not None else ()
    if error is not None:
        error = safe_text(error)  # file names and header values are echoed in messages
    reasons = digest.reasons if digest is not None and status == "processed" else ()
    stamp = now_iso()
    with _Transaction(conn):
        if record_key is not None:
            row = conn.execute(f"SELECT {_RUN_COLUMNS_LISTED} FROM runs WHERE record_key = ?", (record_key,)).fetchone()
            if row is not None:
                return replace(_record(row, None, False, conn), result=result)
        version = next_version(conn, path, instrument)
        run_id = _insert_returning(
            conn,
            "INSERT INTO runs (path, sha256, version, status, verdict, species, result_json, error,"
            " received_at, processed_at, settings_json, reprocessed_from, size_bytes, mtime_ns, instrument, record_key,"
            " analysis_version, library_hash, settings_hash, reasons_json)"
            " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                stored_path(path, conn),
                sha256,
                version,
                status,
                verdict,
                ",".join(species),
                result_json if digest is not None else None,
                error,
                received_at or stamp,
                processed_at or stamp,
                strict_json.dumps(settings) if settings is not None else None,
                reprocessed_from,
                size_bytes,
                mtime_ns,
                instrument,
                record_key,
                provenance.analysis_version if provenance is not None else None,
                provenance.library_hash if provenance is not None else None,
                provenance.settings_hash if provenance is not None else None,
                json.dumps(list(reasons)),
            ),
            "run_id",
        )
        if digest is not None and status == "processed":
            _insert_quantities(conn, run_id, digest.quantities)
        if claim_id is not None:
            conn.execute("DELETE FROM claims WHERE claim_id = ?", (claim_id,))
    return RunRecord(  # a new run has no decision yet; no need to read it back
        run_id=run_id, path=path, sha256=sha256, version=version, status=status, verdict=verdict,
        decision=None, decision_reason=None, operator=None, received_at=received_at or stamp,
        processed_at=processed_at or stamp, species=tuple(species), error=error, result=result,
        settings=settings, reprocessed_from=reprocessed_from, instrument=instrument, provenance=provenance,
        reasons=reasons,
    )


def record_reprocessed(
    conn: Connection,
    run_id: int,
    result: RunResult | None,
    settings: dict[str, Any],
    *,
    result_json: str | None = None,
    status: str | None = None,
    error: str | None = None,
    provenance: Provenance | None = None,
) -> RunRecord:
    """Record a run reprocessed with changed settings: a new version of the same file (on the
    same instrument)."""
    original = get_run(conn, run_id, with_result=False)
    if original is None:
        raise LedgerError(f"no run {run_id} in the ledger")
    if status is None:
        status = result.status if result is not None else "failed"
    if status not in RUN_STATUSES:
        status = "failed"
    return record_run(
        conn,
        original.path,
        (result.sha256 if result is not None else None) or original.sha256,
        status,
        result=result,
        result_json=result_json,
        error=error if error is not None else (result.error if result is not None else None),
        settings=settings,
        reprocessed_from=run_id,
        instrument=original.instrument,
        provenance=provenance,
    )


_RUN_COLUMNS_OWN = (
    "run_id, path, sha256, version, status, verdict, species, error, received_at,"
    " processed_at, settings_json, reprocessed_from, instrument, analysis_version, library_hash, settings_hash,"
    " reasons_json"
)
# the run id of the newest later version of the row's file (NULL for the newest)
_SUPERSEDED_BY = (
    "(SELECT later.run_id FROM runs AS later WHERE later.instrument = runs.instrument AND later.path = runs.path"
    " AND later.version > runs.version ORDER BY later.version DESC LIMIT 1) AS superseded_by"
)
_RUN_COLUMNS_LISTED = f"{_RUN_COLUMNS_OWN}, {_SUPERSEDED_BY}"
_RUN_COLUMNS = _RUN_COLUMNS_LISTED + ", result_json"


def _tuples(conn: Connection, sql: str, params: SqlParams) -> list[tuple[SqlValue, ...]]:
    """Rows as plain tuples: long listings skip building a named row for each."""
    if dialect(conn) == "postgresql":
        return conn.fetch_tuples(sql, params)  # type: ignore[union-attr]
    cursor = conn.cursor()  # type: ignore[union-attr]
    cursor.row_factory = None
    return cursor.execute(sql, params).fetchall()


_new_object = object.__new__


def _listed(values: tuple[SqlValue, ...], decision: DecisionEvent | None, conn: Connection, replaced_by: int | None = None) -> RunRecord:
    """A RunRecord from a row of `_RUN_COLUMNS_LISTED` (+ result_json), by position.

    Filled through its __dict__ without the dataclass's __init__ (every field; the record is
    as frozen and compares equal as any other, `test_listed_records_equal_the_ones_read_one_by_one`):
    `bandwatch ledger list` builds 100,000 of them, and the generated __init__ was a third of
    its time. Species, settings and reasons texts repeat from run to run: decoded once each."""
    (run_id, path, sha256, version, status, verdict, species, error, received_at, processed_at,
     settings_json, reprocessed_from, instrument, analysis_version, library_hash, settings_hash,
     reasons_json, superseded_by) = values[:18]
    if isinstance(path, bytes) or path.startswith(SERVER_BYTES_PATH):  # type: ignore[union-attr]
        path = path_of(path, conn)  # type: ignore[arg-type]
    record = _new_object(RunRecord)
    record.__dict__.update(
        run_id=run_id, path=path, sha256=sha256, version=version, status=status, verdict=verdict,
        decision=None, decision_reason=None, operator=None,
        received_at=received_at, processed_at=processed_at,
        species=_species(species or ""),  # type: ignore[arg-type]
        error=error,
        result=_result_text(run_id, values[18]) if len(values) > 18 and values[18] else None,  # type: ignore[arg-type]
        settings=json.loads(settings_json) if settings_json else None,  # type: ignore[arg-type]
        reprocessed_from=reprocessed_from, decided_at=None, instrument=instrument or "",
        provenance=None if analysis_version is None else _made_with(analysis_version, library_hash or "", settings_hash or ""),  # type: ignore[arg-type]
        reasons=() if reasons_json is None else _reasons(reasons_json),  # type: ignore[arg-type]
        decision_event_id=None,
        superseded_by=replaced_by if superseded_by is None else int(superseded_by),  # type: ignore[arg-type]
    )
    if decision is not None:
        record.__dict__.update(decision=decision.action, decision_reason=decision.reason, operator=decision.operator,
                               decided_at=decision.at, decision_event_id=decision.event_id)
    return record


@functools.lru_cache(maxsize=256)
def _species(text: str) -> tuple[str, ...]:
    """The stored species ("H35Cl,H37Cl") as a tuple; the texts repeat, so each is split once."""
    return tuple(label for label in text.split(",") if label)


@functools.lru_cache(maxsize=256)
def _made_with(analysis_version: str, library_hash: str, settings_hash: str) -> Provenance:
    return Provenance(analysis_version, library_hash, settings_hash)


def _result_text(run_id: int, text: str) -> RunResult:
    """A stored result decoded (the results module is imported by the first that is read: a
    listing reads none)."""
    from processing.results import ResultFormatError, from_json

    try:
        return from_json(text)
    except ResultFormatError as error:
        raise LedgerError(f"run {run_id}: its stored result cannot be read ({error})") from None


def _current_decisions(conn: Connection, run_ids: list[int] | None, instrument: str | None = None) -> dict[int, DecisionEvent]:
    """run_id -> the decision event currently in effect (runs with none are absent): of the
    runs `run_ids`, else of every run (of `instrument` when given)."""
    rows = _decision_rows(conn, "*", run_ids, instrument)
    return _in_effect((row["run_id"], row["action"], _event(row)) for row in rows)


def _current_actions(conn: Connection, run_ids: list[int] | None, instrument: str | None = None) -> dict[int, str]:
    """run_id -> the action of the decision in effect ("accept", "flag"), as `_current_decisions`
    picks the runs: what a listing shows, without building the events."""
    rows = [(run_id, action) for run_id, action in _decision_rows(conn, "run_id, action", run_ids, instrument)]
    undone = {run_id for run_id, action in rows if action == UNDO}
    found = dict(rows)  # a run without an undo: its last decision is in effect (every other action decides)
    if undone:  # replayed: an undo reverts to the decision before the last
        replayed = _in_effect((run_id, action, action) for run_id, action in rows if run_id in undone)
        for run_id in undone:
            if run_id in replayed:
                found[run_id] = replayed[run_id]
            else:
                del found[run_id]
    return found


def _decision_rows(conn: Connection, columns: str, run_ids: list[int] | None, instrument: str | None) -> list[Any]:
    """The decision trail's rows (`columns`) in the order they were made: of the runs
    `run_ids`, else of every run (of `instrument` when given)."""
    if run_ids is not None:
        if not run_ids:
            return []
        marks = ",".join("?" * len(run_ids))
        return conn.execute(f"SELECT {columns} FROM decisions WHERE run_id IN ({marks}) ORDER BY event_id", run_ids).fetchall()
    if instrument is not None:
        return conn.execute(
            f"SELECT {columns} FROM decisions WHERE run_id IN (SELECT run_id FROM runs WHERE instrument = ?) ORDER BY event_id",
            (instrument,),
        ).fetchall()
    return conn.execute(f"SELECT {columns} FROM decisions ORDER BY event_id").fetchall()


def _in_effect(trail: Iterable[tuple[int, str, _Item]]) -> dict[int, _Item]:
    """run_id -> the item of the decision in effect, replaying (run_id, action, item) in the
    order made: a decision pushes, an undo reverts to the state before the last one."""
    stacks: dict[int, list[_Item]] = {}
    for run_id, action, item in trail:
        stack = stacks.setdefault(run_id, [])
        if action != UNDO:
            stack.append(item)
        elif stack:
            stack.pop()
    return {run_id: stack[-1] for run_id, stack in stacks.items() if stack}


def _event(row: LedgerRow) -> DecisionEvent:
    return DecisionEvent(
        event_id=int(row["event_id"]),
        run_id=int(row["run_id"]),
        action=row["action"],
        reason=row["reason"],
        operator=row["operator"],
        at=row["at"],
    )


def _record(row: LedgerRow, decision: DecisionEvent | None, with_result: bool = True, conn: Connection | None = None) -> RunRecord:
    return RunRecord(
        run_id=int(row["run_id"]),
        path=path_of(row["path"], conn),
        sha256=row["sha256"],
        version=row["version"],
        status=row["status"],
        verdict=row["verdict"],
        decision=decision.action if decision else None,
        decision_reason=decision.reason if decision else None,
        operator=decision.operator if decision else None,
        received_at=row["received_at"],
        processed_at=row["processed_at"],
        species=_species(row["species"] or ""),
        error=row["error"],
        result=_result(row) if with_result and row["result_json"] else None,
        settings=json.loads(row["settings_json"]) if row["settings_json"] else None,
        reprocessed_from=None if row["reprocessed_from"] is None else int(row["reprocessed_from"]),
        decided_at=decision.at if decision else None,
        instrument=row["instrument"] or "",
        provenance=_provenance(row),
        reasons=_reasons(row["reasons_json"]),
        decision_event_id=decision.event_id if decision else None,
        superseded_by=None if row["superseded_by"] is None else int(row["superseded_by"]),
    )


def _provenance(row: LedgerRow) -> Provenance | None:
    if row["analysis_version"] is None:
        return None
    return _made_with(row["analysis_version"], row["library_hash"] or "", row["settings_hash"] or "")


@functools.lru_cache(maxsize=4096)
def _reasons(text: str | None) -> tuple[str, ...]:
    """The stored main reasons (a JSON list of text); none when absent or unreadable."""
    if not text:
        return ()
    try:
        found = json.loads(text)
    except ValueError:
        return ()
    return tuple(str(item) for item in found) if isinstance(found, list) else ()


def _result(row: LedgerRow) -> RunResult:
    return _result_text(int(row["run_id"]), row["result_json"])


# a run is its file's newest version on its instrument
_NEWEST = (
    "version = (SELECT MAX(later.version) FROM runs AS later"
    " WHERE later.instrument = runs.instrument AND later.path = runs.path)"
)


def list_runs(
    conn: Connection,
    limit: int | None = None,
    *,
    latest_only: bool = False,
    with_result: bool = True,
    instrument: str | None = None,
) -> list[RunRecord]:
    """Runs newest first; `latest_only` keeps only the newest version of each file;
    `instrument` keeps only that instrument's runs."""
    rows, replaced = _listing(
        conn, _RUN_COLUMNS_OWN, limit, latest_only, instrument, then=", result_json" if with_result else ""
    )
    decisions = _current_decisions(conn, [int(row[0]) for row in rows] if limit else None, instrument)  # type: ignore[arg-type]
    return [_listed(row, decisions.get(row[0]), conn, replaced.get(row[0])) for row in rows]


@dataclass(frozen=True)
class RunColumns:
    """Runs newest first as columns (item i of every tuple is one run): what a listing prints
    of each, without results, settings or hashes. `bandwatch ledger list` shows 100,000 runs
    from these without building an object per run."""

    run_id: tuple[int, ...]
    instrument: tuple[str, ...]
    version: tuple[int, ...]
    status: tuple[str, ...]
    verdict: tuple[str | None, ...]
    species: tuple[str, ...]  # as stored: "H35Cl,H37Cl"
    processed_at: tuple[str | None, ...]  # UTC, ISO 8601 as stored
    path: tuple[str, ...]
    reasons: tuple[tuple[str, ...], ...]  # a processed run's main reasons
    error: tuple[str | None, ...]
    # by run id, only the runs it applies to (few of 100,000)
    decided: dict[int, str]  # the decision in effect ("accept", "flag")
    replaced: dict[int, int]  # the run id of the file's newest version, for a run that is not it

    def __len__(self) -> int:
        return len(self.run_id)

    @property
    def decision(self) -> tuple[str | None, ...]:
        """Run by run, the decision in effect; None when undecided."""
        return tuple(map(self.decided.get, self.run_id))

    @property
    def superseded_by(self) -> tuple[int | None, ...]:
        """Run by run, the run id of the file's newest version when not this one."""
        return tuple(map(self.replaced.get, self.run_id))


# the columns of RunColumns that come straight from the table, in its order
_COLUMNS_LISTING = "run_id, instrument, version, status, verdict, species, processed_at, path, reasons_json, error"


@dataclass(frozen=True)
class WholeListing:
    """What each part of a listing made in parts needs of the whole (by run id): the decisions
    in effect and the replaced runs (`whole_listing`)."""

    decided: dict[int, str]
    replaced: dict[int, int]


def whole_listing(conn: Connection, *, latest_only: bool = False, instrument: str | None = None) -> WholeListing:
    """The decisions in effect and the replaced runs of a listing without a limit (the newer
    version may be in another part: the database finds them all, once for all parts)."""
    return WholeListing(_current_actions(conn, None, instrument), {} if latest_only else _replaced_everywhere(conn, instrument))


def list_run_columns(
    conn: Connection, limit: int | None = None, *, latest_only: bool = False, instrument: str | None = None,
    part: tuple[tuple[int, int], WholeListing] | None = None,
) -> RunColumns:
    """The runs `list_runs` gives (same order, limit and filters), as columns of what a listing
    shows; `part` (first and last run id, and `whole_listing`) keeps the runs in that range, of
    a listing without a limit made in parts."""
    run_range, whole = part if part is not None else (None, None)
    rows, replaced = _listing(conn, _COLUMNS_LISTING, limit, latest_only, instrument, run_range=run_range)
    if whole is not None:
        actions, replaced = whole.decided, whole.replaced
    else:
        actions = _current_actions(conn, [int(row[0]) for row in rows] if limit else None, instrument)  # type: ignore[arg-type]
    (run_id, instrument_, version, status, verdict, species, processed_at, path, reasons_json,
     error, superseded_by) = zip(*rows) if rows else ((),) * 11
    joined = "\n" + "\n".join(path) if all(map(isinstance, path, itertools.repeat(str))) else None
    if joined is None or "\n" + SERVER_BYTES_PATH in joined:
        path = tuple(path_of(item, conn) for item in path)  # type: ignore[arg-type]  # undecodable names
    reasons_of: dict[Any, tuple[str, ...]] = {None: ()}
    for text in set(reasons_json):
        reasons_of[text] = _reasons(text)  # type: ignore[arg-type]
    return RunColumns(
        run_id=run_id, instrument=instrument_, version=version,  # type: ignore[arg-type]
        status=status, verdict=verdict, species=species, processed_at=processed_at, path=path,  # type: ignore[arg-type]
        reasons=tuple(map(reasons_of.__getitem__, reasons_json)), error=error,  # type: ignore[arg-type]
        decided=actions,
        replaced=replaced if limit is None else {  # type: ignore[dict-item]
            run: newer for run, newer in zip(run_id, superseded_by) if newer is not None},
    )


def _listing(
    conn: Connection, columns: str, limit: int | None, latest_only: bool,
    instrument: str | None, then: str = "", run_range: tuple[int, int] | None = None,
) -> tuple[list[tuple[SqlValue, ...]], dict[int, int]]:
    """The rows of a listing (`columns`, run_id first, then superseded_by, then the columns
    `then` adds) and the replaced runs."""
    conditions = []
    params: list[Any] = []
    if instrument is not None:
        conditions.append("instrument = ?")
        params.append(instrument)
    if latest_only:
        conditions.append(_NEWEST)
    if run_range is not None:
        conditions.append("run_id BETWEEN ? AND ?")
        params += [int(run_range[0]), int(run_range[1])]
    where = f" WHERE {' AND '.join(conditions)}" if conditions else ""
    # Without a limit the replaced runs are found by one query over the (instrument, path,
    # version) index (`_replaced_everywhere`), not by a query per row; latest_only replaces none.
    every_version = limit is None
    superseded = "NULL AS superseded_by" if every_version else _SUPERSEDED_BY
    sql = f"SELECT {columns}, {superseded}{then} FROM runs{where} ORDER BY run_id DESC"
    if limit is not None:
        sql += " LIMIT ?"
        params.append(int(limit))
    rows = _tuples(conn, sql, tuple(params))
    if not every_version or latest_only or run_range is not None:  # a part's: `whole_listing`
        return rows, {}
    return rows, _replaced_everywhere(conn, instrument)


def _replaced_everywhere(conn: Connection, instrument: str | None) -> dict[int, int]:
    """run_id -> the run id of its file's newest version, for every run in the ledger (of
    `instrument` when given) that is not that version: the files with more than one version,
    from the (instrument, path, version) index, then their older versions."""
    mine = " WHERE instrument = ?" if instrument is not None else ""
    sql = (
        "SELECT older.run_id, newest.run_id FROM"
        f" (SELECT instrument, path, MAX(version) AS version FROM runs{mine} GROUP BY instrument, path HAVING COUNT(*) > 1) AS file"
        " JOIN runs AS newest ON newest.instrument = file.instrument AND newest.path = file.path AND newest.version = file.version"
        " JOIN runs AS older ON older.instrument = file.instrument AND older.path = file.path AND older.version < file.version"
    )
    return dict(_tuples(conn, sql, (instrument,) if instrument is not None else ()))  # type: ignore[arg-type]


def instruments(conn: Connection) -> list[str]:
    """The instruments that have runs in the ledger, by name."""
    return [row[0] for row in conn.execute("SELECT DISTINCT instrument FROM runs ORDER BY instrument").fetchall()]


def get_run(conn: Connection, run_id: int, *, with_result: bool = True) -> RunRecord | None:
    """One run with its current decision (and its result, decoded, unless `with_result` is False)."""
    columns = _RUN_COLUMNS if with_result else _RUN_COLUMNS_LISTED
    row = conn.execute(f"SELECT {columns} FROM runs WHERE run_id = ?", (int(run_id),)).fetchone()
    if row is None:
        return None
    return _record(row, _current_decisions(conn, [int(run_id)]).get(int(run_id)), with_result, conn)


def latest_run_for_path(conn: Connection, path: str, instrument: str = "") -> RunRecord | None:
    row = conn.execute(
        f"SELECT {_RUN_COLUMNS_LISTED} FROM runs WHERE instrument = ? AND path = ? ORDER BY version DESC LIMIT 1",
        (instrument, stored_path(path, conn)),
    ).fetchone()
    if row is None:
        return None
    run_id = int(row["run_id"])
    return _record(row, _current_decisions(conn, [run_id]).get(run_id), with_result=False, conn=conn)


def latest_stat_by_path(conn: Connection, instrument: str = "") -> dict[str, tuple[int, int]]:
    """path -> (size_bytes, mtime_ns) of its newest version on `instrument`, where recorded."""
    rows = conn.execute(
        f"SELECT path, size_bytes, mtime_ns FROM runs WHERE instrument = ? AND {_NEWEST}"
        " AND size_bytes IS NOT NULL AND mtime_ns IS NOT NULL",
        (instrument,),
    ).fetchall()
    return {path_of(row["path"], conn): (int(row["size_bytes"]), int(row["mtime_ns"])) for row in rows}


def latest_sha_by_path(conn: Connection, instrument: str = "") -> dict[str, str | None]:
    """path -> sha256 of its newest version on `instrument`: what the station already has."""
    rows = conn.execute(
        f"SELECT path, sha256 FROM runs WHERE instrument = ? AND {_NEWEST}",
        (instrument,),
    ).fetchall()
    return {path_of(row["path"], conn): row["sha256"] for row in rows}


# ---------------------------------------------------------------- claims


def claim_file(
    conn: Connection, path: str, sha256: str | None, owner_pid: int | None = None, instrument: str = ""
) -> Claim:
    """Mark a file as taken on (a run in progress)."""
    stamp = now_iso()
    with _Transaction(conn):
        claim_id = _insert_returning(
            conn,
            "INSERT INTO claims (path, sha256, received_at, owner_pid, instrument) VALUES (?, ?, ?, ?, ?)",
            (stored_path(path, conn), sha256, stamp, owner_pid, instrument),
            "claim_id",
        )
    return Claim(claim_id, path, sha256, stamp, owner_pid)


def list_claims(conn: Connection, instrument: str | None = None) -> list[Claim]:
    """Runs in progress (of `instrument` only, when given)."""
    if instrument is None:
        rows = conn.execute("SELECT * FROM claims ORDER BY claim_id").fetchall()
    else:
        rows = conn.execute("SELECT * FROM claims WHERE instrument = ? ORDER BY claim_id", (instrument,)).fetchall()
    return [Claim(int(r["claim_id"]), path_of(r["path"], conn), r["sha256"], r["received_at"], r["owner_pid"]) for r in rows]


def drop_claim(conn: Connection, claim_id: int) -> None:
    with _Transaction(conn):
        conn.execute("DELETE FROM claims WHERE claim_id = ?", (claim_id,))


# ---------------------------------------------------------------- decisions


def record_decision(
    conn: Connection, run_id: int, action: str, reason: str, operator: str
) -> DecisionEvent:
    """Append an accept or flag decision for a run."""
    if action not in DECISION_ACTIONS:
        raise ValueError(f"decision must be one of {DECISION_ACTIONS}, not {action!r}")
    return _append_event(conn, run_id, action, reason, operator)


def undo_last_decision(conn: Connection, run_id: int, operator: str) -> DecisionEvent | None:
    """Append an undo that reverts the decision in effect; None when there is none to undo."""
    with _Transaction(conn):
        current = _current_decisions(conn, [int(run_id)]).get(int(run_id))
        if current is None:
            return None
        reason = f"undo of {current.action} (event {current.event_id})"
        return _insert_event(conn, run_id, UNDO, reason, operator)


@dataclass(frozen=True)
class Decided:
    """What `decide` did: the new event, or (nothing written) the other person's decision in
    effect that the operator has not yet confirmed deciding over."""

    event: DecisionEvent | None
    over: DecisionEvent | None = None  # the decision in effect before (someone else's), if any


def decide(
    conn: Connection, run_id: int, action: str, reason: str, operator: str, *, confirmed_over: int | None = None
) -> Decided:
    """Accept, flag or undo a run unless another person's decision is in effect that the
    operator has not confirmed deciding over (`confirmed_over`, its event id): then nothing is
    written and that decision is returned (ask, then call again with its id). Both stay on
    record: the new event names the one it decides over. Checked and written in one
    transaction (on a server under the ledger's writer lock), so a decision recorded meanwhile
    elsewhere is never silently overridden."""
    if action not in (*DECISION_ACTIONS, UNDO):
        raise ValueError(f"decision must be one of {(*DECISION_ACTIONS, UNDO)}, not {action!r}")
    with _Transaction(conn):
        current = _current_decisions(conn, [int(run_id)]).get(int(run_id))
        others = current is not None and current.operator != operator
        if others and current is not None and current.event_id != confirmed_over:
            return Decided(None, current)
        if action == UNDO:
            if current is None:
                return Decided(None, None)
            by = f" by {current.operator or 'someone'}" if others else ""
            reason = f"undo of {current.action}{by} (event {current.event_id})"
        elif others and current is not None:
            over = f"over {current.action} by {current.operator or 'someone'} (event {current.event_id})"
            reason = f"{reason} ({over})" if reason else over
        return Decided(_insert_event(conn, run_id, action, reason, operator), current if others else None)


def _append_event(conn: Connection, run_id: int, action: str, reason: str, operator: str) -> DecisionEvent:
    with _Transaction(conn):
        return _insert_event(conn, run_id, action, reason, operator)


def _insert_event(conn: Connection, run_id: int, action: str, reason: str, operator: str) -> DecisionEvent:
    if conn.execute("SELECT 1 FROM runs WHERE run_id = ?", (int(run_id),)).fetchone() is None:
        raise LedgerError(f"no run {run_id} in the ledger")
    stamp = now_iso()
    event_id = _insert_returning(
        conn,
        "INSERT INTO decisions (run_id, action, reason, operator, at) VALUES (?, ?, ?, ?, ?)",
        (int(run_id), action, reason or "", operator or "", stamp),
        "event_id",
    )
    return DecisionEvent(event_id, int(run_id), action, reason or "", operator or "", stamp)


def decision_history(conn: Connection, run_id: int) -> list[DecisionEvent]:
    """Every decision event of a run, oldest first."""
    rows = conn.execute(
        "SELECT * FROM decisions WHERE run_id = ? ORDER BY event_id", (int(run_id),)
    ).fetchall()
    return [_event(row) for row in rows]


def all_decisions(conn: Connection) -> list[DecisionEvent]:
    return [_event(row) for row in conn.execute("SELECT * FROM decisions ORDER BY event_id")]


# ---------------------------------------------------------------- what changed elsewhere


def change_cursor(conn: Connection) -> int:
    """The newest entry of the change journal: where a new interface starts `changes_after`."""
    row = conn.execute("SELECT MAX(change_id) FROM changes").fetchone()
    return int(row[0] or 0) if row else 0


def changes_after(conn: Connection, cursor: int | None) -> tuple[int, list[int]]:
    """(new cursor, run ids whose decision or versions changed since `cursor`, ascending). A
    new version of a file also changes its earlier versions (they are now replaced). The cursor
    only grows; the database journals every run and decision as it is inserted (triggers), in
    commit order on both backends (the writer lock), so a poller that passes back the cursor it
    got misses nothing and sees nothing twice. `cursor` None: the current cursor, no run ids."""
    if cursor is None:
        return change_cursor(conn), []
    rows = conn.execute(
        "SELECT change_id, run_id FROM changes WHERE change_id > ? ORDER BY change_id", (int(cursor),)
    ).fetchall()
    if not rows:
        return int(cursor), []
    replaced = conn.execute(
        "SELECT DISTINCT older.run_id FROM changes AS c JOIN runs AS newer ON newer.run_id = c.run_id"
        " JOIN runs AS older ON older.instrument = newer.instrument AND older.path = newer.path"
        " AND older.version < newer.version WHERE c.change_id > ? AND c.change_id <= ? AND c.kind = 'run'",
        (int(cursor), int(rows[-1][0])),
    ).fetchall()
    changed = {int(row[1]) for row in rows} | {int(row[0]) for row in replaced}
    return int(rows[-1][0]), sorted(changed)


# ---------------------------------------------------------------- trends


@dataclass(frozen=True)
class TrendPoint:
    """One run's value of a quantity."""

    processed_at: str
    run_id: int
    value: float
    sigma: float | None
    instrument: str = ""
    verdict: str | None = None  # the run's verdict: a failed run's value is drawn apart
    decision: str | None = None  # "accept" | "flag" | None: a flagged run's value is drawn apart


def trend(
    conn: Connection, isotopologue: str, quantity: str, band: str = "", instruments: tuple[str, ...] | None = None
) -> list[TrendPoint]:
    """One fitted quantity over processed runs, oldest first, in one query: a band constant
    of `band` ("1-0"; "origin", "B_upper", ...) or a molecular constant (band "": "B_e", ...),
    of every instrument or of `instruments`. Only the newest version of each file counts (a
    reprocessed file is one measurement). Each point carries its run's verdict and current
    decision."""
    params: list[Any] = [isotopologue, quantity, band]
    chosen = ""
    if instruments is not None:
        if not instruments:
            return []
        chosen = f" AND r.instrument IN ({','.join('?' * len(instruments))})"
        params.extend(instruments)
    rows = conn.execute(
        "SELECT r.processed_at, r.run_id, q.value, q.sigma, r.instrument, r.verdict"
        " FROM quantities AS q JOIN runs AS r ON r.run_id = q.run_id"
        " WHERE q.isotopologue = ? AND q.quantity = ? AND q.band = ? AND r.status = 'processed'" + chosen +
        " AND r.version = (SELECT MAX(version) FROM runs WHERE instrument = r.instrument AND path = r.path)"
        " ORDER BY r.processed_at, r.run_id",
        tuple(params),
    ).fetchall()
    decisions = _current_decisions(conn, [int(row[1]) for row in rows])
    return [
        TrendPoint(row[0], int(row[1]), float(row[2]), None if row[3] is None else float(row[3]), row[4] or "",
                   row[5], decisions[int(row[1])].action if int(row[1]) in decisions else None)
        for row in rows
    ]


def band_quantities(
    conn: Connection, run_ids: list[int], quantities: tuple[str, ...] = ("origin", "B_upper", "B_lower")
) -> dict[int, list[tuple[str, str, str, float, float | None]]]:
    """run_id -> (isotopologue, band, quantity, value, sigma) of its bands' fitted `quantities`,
    in one query per 500 runs (the day export's band origins and B values); bands in byte order
    of isotopologue and band on both backends, each band's quantities in the order asked."""
    if not run_ids:
        return {}
    found: dict[int, list[tuple[str, str, str, float, float | None]]] = {}
    collate = ' COLLATE "C"' if dialect(conn) == "postgresql" else ""
    position = "CASE quantity " + " ".join(f"WHEN ? THEN {index}" for index in range(len(quantities))) + " END"
    for start in range(0, len(run_ids), 500):  # SQLite's limit on bound parameters
        chunk = run_ids[start:start + 500]
        marks = ",".join("?" * len(chunk))
        names = ",".join("?" * len(quantities))
        rows = conn.execute(
            f"SELECT run_id, isotopologue, band, quantity, value, sigma FROM quantities"
            f" WHERE run_id IN ({marks}) AND band != '' AND quantity IN ({names})"
            f" ORDER BY run_id, isotopologue{collate}, band{collate}, {position}",
            [*chunk, *quantities, *quantities],
        ).fetchall()
        for row in rows:
            found.setdefault(int(row[0]), []).append(
                (row[1], row[2], row[3], float(row[4]), None if row[5] is None else float(row[5])))
    return found


# ---------------------------------------------------------------- reprocess (`bandwatch reprocess`)


@dataclass(frozen=True)
class LatestVersion:
    """A file's newest version on its instrument: what `bandwatch reprocess` needs to decide
    whether to analyse it again and to record the next version (no result, no decision)."""

    run_id: int
    path: str
    sha256: str | None
    status: str
    verdict: str | None
    received_at: str
    size_bytes: int | None
    mtime_ns: int | None
    provenance: Provenance | None
    request_json: str | None = None  # the operator's redo request this version was made with
    instrument: str = ""


@dataclass(frozen=True)
class RunQuery:
    """Which files of the ledger: every condition given must hold for the file's newest version."""

    received_from: str | None = None  # received_at >= this (ISO 8601 text, UTC)
    received_before: str | None = None  # received_at < this
    verdicts: tuple[str, ...] = ()
    statuses: tuple[str, ...] = ()
    path_glob: str | None = None  # a glob on the path (`*`, `?`, `[...]`; `*` crosses folders)
    species: tuple[str, ...] = ()  # isotopologue labels: any of them among the run's species
    instrument: str | None = None  # only this instrument's files


_LATEST_COLUMNS = (
    "run_id, path, sha256, status, verdict, received_at, size_bytes, mtime_ns, analysis_version, library_hash,"
    " settings_hash, settings_json, instrument"
)
LATEST_BATCH = 500  # paths asked per query


def _latest(row: LedgerRow, conn: Connection) -> LatestVersion:
    return LatestVersion(
        int(row["run_id"]), path_of(row["path"], conn), row["sha256"], row["status"], row["verdict"],
        row["received_at"], row["size_bytes"], row["mtime_ns"], _provenance(row), row["settings_json"],
        row["instrument"] or "",
    )


def latest_versions(conn: Connection, paths: Iterable[str], instrument: str = "") -> dict[str, LatestVersion]:
    """path -> its newest version on `instrument`, for those of `paths` the ledger holds (one
    query per `LATEST_BATCH` paths)."""
    stored = [stored_path(path, conn) for path in paths]
    found: dict[str, LatestVersion] = {}
    for start in range(0, len(stored), LATEST_BATCH):
        part = stored[start:start + LATEST_BATCH]
        rows = conn.execute(
            f"SELECT {_LATEST_COLUMNS} FROM runs WHERE instrument = ? AND path IN ({','.join('?' * len(part))})"
            f" AND {_NEWEST}",
            (instrument, *part),
        ).fetchall()
        for row in rows:
            latest = _latest(row, conn)
            found[latest.path] = latest
    return found


def glob_regex(pattern: str) -> str | None:
    """A path glob as an anchored POSIX regular expression with SQLite GLOB's meaning: `*` any
    text (folders included), `?` one character, `[abc]`, `[a-z]`, `[^abc]` one of (or none of)
    a set; everything else literal, case kept; None for a `[` never closed (GLOB then matches
    nothing). The server has no GLOB; it matches with `~`."""
    out = ["^"]
    index = 0
    while index < len(pattern):
        char = pattern[index]
        if char == "*":
            out.append(".*")
        elif char == "?":
            out.append(".")
        elif char == "[":
            end = index + 1
            if end < len(pattern) and pattern[end] == "^":
                end += 1
            if end < len(pattern) and pattern[end] == "]":
                end += 1  # a ] first in the set is one of its members
            end = pattern.find("]", end)
            if end < 0:
                return None
            members = pattern[index + 1:end]
            negated = members.startswith("^")
            if negated:
                members = members[1:]
            escaped = members.replace("\\", "\\\\")  # a ] first stays first: a member, as in GLOB
            out.append(f"[{'^' if negated else ''}{escaped}]")
            index = end
        else:
            out.append("\\" + char if not char.isalnum() and char not in "/_ " else char)
        index += 1
    out.append("$")
    return "".join(out)


def _query_sql(conn: Connection, query: RunQuery) -> tuple[str, list[SqlValue]]:
    terms = [_NEWEST]
    params: list[SqlValue] = []
    if query.received_from is not None:
        terms.append("received_at >= ?")
        params.append(query.received_from)
    if query.received_before is not None:
        terms.append("received_at < ?")
        params.append(query.received_before)
    for column, values in (("verdict", query.verdicts), ("status", query.statuses)):
        if values:
            terms.append(f"{column} IN ({','.join('?' * len(values))})")
            params.extend(values)
    if query.path_glob is not None:
        if dialect(conn) == "postgresql":
            # a name that is not UTF-8 is stored as SERVER_BYTES_PATH + %-escapes: its folders still match
            regex = glob_regex(query.path_glob)
            if regex is None:
                terms.append("1 = 0")
            else:
                terms.append("regexp_replace(path, ?, '') ~ ?")
                params.extend(("^" + SERVER_BYTES_PATH, regex))
        else:
            terms.append("CAST(path AS TEXT) GLOB ?")
            params.append(query.path_glob)
    if query.species:
        terms.append("(" + " OR ".join("(',' || species || ',') LIKE ?" for _ in query.species) + ")")
        params.extend(f"%,{label},%" for label in query.species)
    if query.instrument is not None:
        terms.append("instrument = ?")
        params.append(query.instrument)
    return " AND ".join(terms), params


def latest_matching(
    conn: Connection, query: RunQuery, after: LatestVersion | None = None, limit: int = 1000
) -> list[LatestVersion]:
    """The newest versions of files matching `query`, ordered by instrument and stored path (on
    the file a name that is not UTF-8, stored as bytes, comes after every text path), the first
    `limit` after `after` (pages: pass the last of the page before)."""
    where, params = _query_sql(conn, query)
    if after is not None:
        where += " AND (instrument > ? OR (instrument = ? AND path > ?))"
        params.extend((after.instrument, after.instrument, stored_path(after.path, conn)))
    rows = conn.execute(
        f"SELECT {_LATEST_COLUMNS} FROM runs WHERE {where} ORDER BY instrument, path LIMIT ?", (*params, int(limit))
    ).fetchall()
    return [_latest(row, conn) for row in rows]


def count_matching(conn: Connection, query: RunQuery) -> int:
    """How many files `latest_matching` pages through for `query`."""
    where, params = _query_sql(conn, query)
    row = conn.execute(f"SELECT COUNT(*) FROM runs WHERE {where}", tuple(params)).fetchone()
    return int(row[0]) if row else 0


def quantity_changes(conn: Connection, provenance: Provenance) -> Iterable[tuple[str, str, str, str, float]]:
    """(isotopologue, band, quantity, unit, new - old) of every fitted quantity found both in a
    file's newest version made with today's analysis and library (`provenance`; its settings,
    or an operator's redo request carried over) by a reprocess, and in the version it was
    reprocessed from with the same redo request; ordered by isotopologue, band and quantity
    (byte order on both backends), streamed (never all in memory)."""
    server = dialect(conn) == "postgresql"
    same_request = "IS NOT DISTINCT FROM" if server else "IS"  # equal, or both NULL
    order = ', '.join(f'n.{column} COLLATE "C"' if server else f"n.{column}" for column in ("isotopologue", "band", "quantity"))
    sql = (
        "SELECT n.isotopologue, n.band, n.quantity, n.unit, n.value - o.value FROM runs"
        " JOIN runs AS old ON old.run_id = runs.reprocessed_from"
        " JOIN quantities AS n ON n.run_id = runs.run_id"
        " JOIN quantities AS o ON o.run_id = old.run_id AND o.isotopologue = n.isotopologue"
        " AND o.band = n.band AND o.quantity = n.quantity"
        " WHERE runs.analysis_version = ? AND runs.library_hash = ?"
        " AND (runs.settings_json IS NOT NULL OR runs.settings_hash = ?)"
        f" AND runs.settings_json {same_request} old.settings_json AND runs.{_NEWEST}"
        f" ORDER BY {order}"
    )
    params = (provenance.analysis_version, provenance.library_hash, provenance.settings_hash)
    rows: Iterable[tuple[SqlValue, ...]]
    if server:
        rows = conn.stream(sql, params)  # type: ignore[union-attr]
    else:
        rows = conn.execute(sql, params)
    for row in rows:
        yield (str(row[0]), str(row[1]), str(row[2]), str(row[3]), float(row[4]))  # type: ignore[arg-type]
