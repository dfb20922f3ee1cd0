"""The ledger: a small SQLite store of runs (one row per file version) and operator decisions.

Plain functions over a connection, returning frozen dataclasses. Each thread or process opens
its own connection with `open_ledger`; WAL mode lets readers (`bandwatch ledger list`, the app)
read while the station writes. The schema version lives in `PRAGMA user_version`; `MIGRATIONS`
takes any older ledger forward. Decisions are an append-only audit trail: a change of mind is a
new event and "undo" is a new event that reverts to the state before the latest decision.

Runs in progress are not rows in `runs`: the station first writes a claim (`claim_file`), and
`record_run(..., claim_id=...)` writes the run and drops the claim in one transaction, so a
station killed mid-file leaves only a claim, which the next start redoes.
"""
from __future__ import annotations

import json
import os
import sqlite3
import stat
import threading
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any
from urllib.parse import quote

from processing import strict_json
from processing.errors import BandwatchError
from processing.provenance import Provenance
from processing.results import BAND_QUANTITIES, MOLECULAR_CONSTANTS, ResultFormatError, RunResult, from_json, to_json
from processing.safe_text import safe_text

LEDGER_FILE = "ledger.sqlite3"
RUN_STATUSES = ("processed", "unreadable", "failed")
DECISION_ACTIONS = ("accept", "flag")
UNDO = "undo"
BUSY_TIMEOUT_MS = 10_000


class LedgerError(BandwatchError):
    """A ledger that cannot be used as it stands (e.g. written by a newer bandwatch)."""


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
    # 4 -> 5: what each version was made with (`processing.provenance`): `bandwatch reprocess`
    # skips files whose newest version has today's analysis, library and settings
    """
    ALTER TABLE runs ADD COLUMN analysis_version TEXT;
    ALTER TABLE runs ADD COLUMN library_hash TEXT;
    ALTER TABLE runs ADD COLUMN settings_hash TEXT;
    """,
)
SCHEMA_VERSION = len(MIGRATIONS)


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
    provenance: Provenance | None = None  # what this version was made with (None: recorded before bandwatch kept it)

    @property
    def name(self) -> str:
        """The file name without its folder, for tables and event lines."""
        return Path(self.path).name


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




def stored_path(path: str) -> str | bytes:
    """A path as the ledger stores it: text, or its exact bytes when the file name is not valid
    UTF-8 (Python holds such names with surrogate escapes, which SQLite text cannot take)."""
    try:
        path.encode("utf-8")
    except UnicodeEncodeError:
        return os.fsencode(path)
    return path


def path_of(value: str | bytes) -> str:
    """A stored path back as the file system's name (bytes through os.fsdecode)."""
    return os.fsdecode(value) if isinstance(value, bytes) else value


def now_iso() -> str:
    """The current UTC time as ISO 8601 with milliseconds (sorts as text)."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def ledger_path(data_dir: str | Path) -> Path:
    return Path(data_dir) / LEDGER_FILE


RESTORE_ADVICE = (
    "bandwatch will not replace it: move it aside and restore a backup, or start a new ledger by "
    "moving it away (runs recorded in it are then no longer listed)"
)


def open_ledger(data_dir: str | Path, *, read_only: bool = False) -> sqlite3.Connection:
    """Open the ledger in `data_dir` (one connection per thread), creating and migrating it as
    needed; `read_only` opens an existing ledger for reading only (a read-only folder is fine).

    Every problem is one `LedgerError` line with what to do: a missing folder or ledger, one
    that is empty, damaged, not a database, locked, on a full or read-only disk. An existing
    ledger is never replaced, and the file is only ever opened by SQLite.
    """
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


def integrity_problem(conn: sqlite3.Connection, path: Path | str) -> str | None:
    """None when SQLite's quick check finds the ledger sound, else a one-line description."""
    try:
        rows = conn.execute("PRAGMA quick_check(5)").fetchall()
    except sqlite3.Error as error:
        return str(ledger_problem(path, error))
    found = [str(row[0]) for row in rows]
    if found == ["ok"]:
        return None
    return f"{path} is damaged (SQLite quick_check: {'; '.join(found)[:300]}); {RESTORE_ADVICE}"


def schema_version(conn: sqlite3.Connection) -> int:
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
        conn.execute("COMMIT")
    except BaseException:
        conn.execute("ROLLBACK")
        raise
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
    """`with _Transaction(conn):` = BEGIN IMMEDIATE ... COMMIT (ROLLBACK on error)."""

    def __init__(self, conn: sqlite3.Connection) -> None:
        self.conn = conn

    def __enter__(self) -> sqlite3.Connection:
        self.conn.execute("BEGIN IMMEDIATE")
        return self.conn

    def __exit__(self, exc_type: object, exc: object, tb: object) -> None:
        self.conn.execute("COMMIT" if exc_type is None else "ROLLBACK")


# ---------------------------------------------------------------- runs


def quantity_rows(result: RunResult) -> list[tuple[str, str, str, float, float | None, str]]:
    """(isotopologue, band, quantity, value, sigma, unit) of every fitted quantity of a run:
    band constants with their band ("1-0"), molecular constants with band ""."""
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


def _insert_quantities(conn: sqlite3.Connection, run_id: int, result: RunResult) -> None:
    conn.executemany(
        "INSERT INTO quantities (run_id, isotopologue, band, quantity, value, sigma, unit) VALUES (?, ?, ?, ?, ?, ?, ?)",
        [(run_id, *row) for row in quantity_rows(result)],
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


def _add_quantities_table(conn: sqlite3.Connection) -> None:
    """Migration 3 -> 4: the quantities table, filled from the processed runs already in the
    ledger (a stored result that cannot be read is left out of the trends, not an error)."""
    for statement in _statements(QUANTITIES_TABLE):
        conn.execute(statement)
    for row in conn.execute("SELECT run_id, result_json FROM runs WHERE status = 'processed' AND result_json IS NOT NULL").fetchall():
        try:
            result = from_json(row[1])
        except ResultFormatError:
            continue
        _insert_quantities(conn, int(row[0]), result)


def next_version(conn: sqlite3.Connection, path: str) -> int:
    row = conn.execute("SELECT MAX(version) FROM runs WHERE path = ?", (stored_path(path),)).fetchone()
    return int(row[0] or 0) + 1


def record_run(
    conn: sqlite3.Connection,
    path: str,
    sha256: str | None,
    status: str,
    *,
    result: RunResult | None = None,
    result_json: str | None = None,
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
    provenance: Provenance | None = None,
) -> RunRecord:
    """Record a finished run as the next version of `path`; drops `claim_id` atomically.

    `verdict` and `species` default to what `result` says; `result_json` is its JSON text
    when the caller already encoded it (the reports write the same bytes). Its fitted
    quantities go into `quantities` in the same transaction. `size_bytes` and `mtime_ns` are
    the file's stat when it was read (lets a restart skip unchanged files without reading);
    `provenance` what the result was made with (analysis version, library and settings hashes).
    """
    if status not in RUN_STATUSES:
        raise ValueError(f"run status must be one of {RUN_STATUSES}, not {status!r}")
    if verdict is None and result is not None:
        verdict = result.verdict
    if species is None:
        species = result.species if result is not None else ()
    if result is not None and result_json is None:
        result_json = to_json(result)
    if error is not None:
        error = safe_text(error)  # file names and header values are echoed in messages
    stamp = now_iso()
    with _Transaction(conn):
        version = next_version(conn, path)
        cursor = conn.execute(
            "INSERT INTO runs (path, sha256, version, status, verdict, species, result_json, error,"
            " received_at, processed_at, settings_json, reprocessed_from, size_bytes, mtime_ns,"
            " analysis_version, library_hash, settings_hash)"
            " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                stored_path(path),
                sha256,
                version,
                status,
                verdict,
                ",".join(species),
                result_json if result is not None else None,
                error,
                received_at or stamp,
                processed_at or stamp,
                strict_json.dumps(settings) if settings is not None else None,
                reprocessed_from,
                size_bytes,
                mtime_ns,
                provenance.analysis_version if provenance is not None else None,
                provenance.library_hash if provenance is not None else None,
                provenance.settings_hash if provenance is not None else None,
            ),
        )
        run_id = int(cursor.lastrowid or 0)
        if result is not None and status == "processed":
            _insert_quantities(conn, run_id, result)
        if claim_id is not None:
            conn.execute("DELETE FROM claims WHERE claim_id = ?", (claim_id,))
    return RunRecord(  # a new run has no decision yet; no need to read it back
        run_id=run_id, path=path, sha256=sha256, version=version, status=status, verdict=verdict,
        decision=None, decision_reason=None, operator=None, received_at=received_at or stamp,
        processed_at=processed_at or stamp, species=tuple(species), error=error, result=result,
        settings=settings, reprocessed_from=reprocessed_from, provenance=provenance,
    )


def record_reprocessed(
    conn: sqlite3.Connection,
    run_id: int,
    result: RunResult | None,
    settings: dict[str, Any],
    *,
    result_json: str | None = None,
    status: str | None = None,
    error: str | None = None,
    provenance: Provenance | None = None,
) -> RunRecord:
    """Record a run reprocessed with changed settings: a new version of the same file."""
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
        provenance=provenance,
    )



_RUN_COLUMNS = (
    "run_id, path, sha256, version, status, verdict, species, result_json, error, received_at,"
    " processed_at, settings_json, reprocessed_from, analysis_version, library_hash, settings_hash"
)


def _current_decisions(conn: sqlite3.Connection, run_ids: list[int] | None) -> dict[int, DecisionEvent]:
    """run_id -> the decision event currently in effect (runs with none are absent)."""
    if run_ids is None:
        rows = conn.execute("SELECT * FROM decisions ORDER BY event_id").fetchall()
    elif not run_ids:
        return {}
    else:
        marks = ",".join("?" * len(run_ids))
        rows = conn.execute(
            f"SELECT * FROM decisions WHERE run_id IN ({marks}) ORDER BY event_id", run_ids
        ).fetchall()
    stacks: dict[int, list[DecisionEvent]] = {}
    for row in rows:
        _apply(stacks.setdefault(row["run_id"], []), _event(row))
    return {run_id: stack[-1] for run_id, stack in stacks.items() if stack}


def _apply(stack: list[DecisionEvent], event: DecisionEvent) -> None:
    """Replay one event: a decision pushes, an undo reverts to the state before the last one."""
    if event.action == UNDO:
        if stack:
            stack.pop()
    else:
        stack.append(event)


def _event(row: sqlite3.Row) -> DecisionEvent:
    return DecisionEvent(
        event_id=row["event_id"],
        run_id=row["run_id"],
        action=row["action"],
        reason=row["reason"],
        operator=row["operator"],
        at=row["at"],
    )


def _record(row: sqlite3.Row, decision: DecisionEvent | None, with_result: bool = True) -> RunRecord:
    return RunRecord(
        run_id=row["run_id"],
        path=path_of(row["path"]),
        sha256=row["sha256"],
        version=row["version"],
        status=row["status"],
        verdict=row["verdict"],
        decision=decision.action if decision else None,
        decision_reason=decision.reason if decision else None,
        operator=decision.operator if decision else None,
        received_at=row["received_at"],
        processed_at=row["processed_at"],
        species=tuple(s for s in (row["species"] or "").split(",") if s),
        error=row["error"],
        result=_result(row) if with_result and row["result_json"] else None,
        settings=json.loads(row["settings_json"]) if row["settings_json"] else None,
        reprocessed_from=row["reprocessed_from"],
        decided_at=decision.at if decision else None,
        provenance=_provenance(row),
    )


def _provenance(row: sqlite3.Row) -> Provenance | None:
    if row["analysis_version"] is None:
        return None
    return Provenance(row["analysis_version"], row["library_hash"] or "", row["settings_hash"] or "")


def _result(row: sqlite3.Row) -> RunResult:
    try:
        return from_json(row["result_json"])
    except ResultFormatError as error:
        raise LedgerError(f"run {row['run_id']}: its stored result cannot be read ({error})") from None


def list_runs(
    conn: sqlite3.Connection,
    limit: int | None = None,
    *,
    latest_only: bool = False,
    with_result: bool = True,
) -> list[RunRecord]:
    """Runs newest first; `latest_only` keeps only the newest version of each file."""
    where = (
        " WHERE version = (SELECT MAX(version) FROM runs AS later WHERE later.path = runs.path)"
        if latest_only
        else ""
    )
    sql = f"SELECT {_RUN_COLUMNS} FROM runs{where} ORDER BY run_id DESC"
    params: tuple[int, ...] = ()
    if limit is not None:
        sql += " LIMIT ?"
        params = (int(limit),)
    rows = conn.execute(sql, params).fetchall()
    decisions = _current_decisions(conn, [row["run_id"] for row in rows] if limit else None)
    return [_record(row, decisions.get(row["run_id"]), with_result) for row in rows]


def get_run(conn: sqlite3.Connection, run_id: int, *, with_result: bool = True) -> RunRecord | None:
    """One run with its current decision (and its result, decoded, unless `with_result` is False)."""
    row = conn.execute(f"SELECT {_RUN_COLUMNS} FROM runs WHERE run_id = ?", (int(run_id),)).fetchone()
    if row is None:
        return None
    return _record(row, _current_decisions(conn, [int(run_id)]).get(int(run_id)), with_result)


def latest_run_for_path(conn: sqlite3.Connection, path: str) -> RunRecord | None:
    row = conn.execute(
        f"SELECT {_RUN_COLUMNS} FROM runs WHERE path = ? ORDER BY version DESC LIMIT 1", (stored_path(path),)
    ).fetchone()
    if row is None:
        return None
    return _record(row, _current_decisions(conn, [row["run_id"]]).get(row["run_id"]), with_result=False)


def latest_stat_by_path(conn: sqlite3.Connection) -> dict[str, tuple[int, int]]:
    """path -> (size_bytes, mtime_ns) of its newest version, where recorded."""
    rows = conn.execute(
        "SELECT path, size_bytes, mtime_ns FROM runs AS r WHERE version ="
        " (SELECT MAX(version) FROM runs WHERE path = r.path)"
        " AND size_bytes IS NOT NULL AND mtime_ns IS NOT NULL"
    ).fetchall()
    return {path_of(row["path"]): (int(row["size_bytes"]), int(row["mtime_ns"])) for row in rows}


def latest_sha_by_path(conn: sqlite3.Connection) -> dict[str, str | None]:
    """path -> sha256 of its newest version: what the station already has."""
    rows = conn.execute(
        "SELECT path, sha256 FROM runs AS r WHERE version ="
        " (SELECT MAX(version) FROM runs WHERE path = r.path)"
    ).fetchall()
    return {path_of(row["path"]): row["sha256"] for row in rows}


# ---------------------------------------------------------------- claims


def claim_file(conn: sqlite3.Connection, path: str, sha256: str | None, owner_pid: int | None = None) -> Claim:
    """Mark a file as taken on (a run in progress)."""
    stamp = now_iso()
    with _Transaction(conn):
        cursor = conn.execute(
            "INSERT INTO claims (path, sha256, received_at, owner_pid) VALUES (?, ?, ?, ?)",
            (stored_path(path), sha256, stamp, owner_pid),
        )
    return Claim(int(cursor.lastrowid or 0), path, sha256, stamp, owner_pid)


def list_claims(conn: sqlite3.Connection) -> list[Claim]:
    rows = conn.execute("SELECT * FROM claims ORDER BY claim_id").fetchall()
    return [Claim(r["claim_id"], path_of(r["path"]), r["sha256"], r["received_at"], r["owner_pid"]) for r in rows]


def drop_claim(conn: sqlite3.Connection, claim_id: int) -> None:
    with _Transaction(conn):
        conn.execute("DELETE FROM claims WHERE claim_id = ?", (claim_id,))


# ---------------------------------------------------------------- decisions


def record_decision(
    conn: sqlite3.Connection, run_id: int, action: str, reason: str, operator: str
) -> DecisionEvent:
    """Append an accept or flag decision for a run."""
    if action not in DECISION_ACTIONS:
        raise ValueError(f"decision must be one of {DECISION_ACTIONS}, not {action!r}")
    return _append_event(conn, run_id, action, reason, operator)


def undo_last_decision(conn: sqlite3.Connection, run_id: int, operator: str) -> DecisionEvent | None:
    """Append an undo that reverts the decision in effect; None when there is none to undo."""
    with _Transaction(conn):
        current = _current_decisions(conn, [int(run_id)]).get(int(run_id))
        if current is None:
            return None
        reason = f"undo of {current.action} (event {current.event_id})"
        return _insert_event(conn, run_id, UNDO, reason, operator)


def _append_event(conn: sqlite3.Connection, run_id: int, action: str, reason: str, operator: str) -> DecisionEvent:
    with _Transaction(conn):
        return _insert_event(conn, run_id, action, reason, operator)


def _insert_event(conn: sqlite3.Connection, run_id: int, action: str, reason: str, operator: str) -> DecisionEvent:
    if conn.execute("SELECT 1 FROM runs WHERE run_id = ?", (int(run_id),)).fetchone() is None:
        raise LedgerError(f"no run {run_id} in the ledger")
    stamp = now_iso()
    cursor = conn.execute(
        "INSERT INTO decisions (run_id, action, reason, operator, at) VALUES (?, ?, ?, ?, ?)",
        (int(run_id), action, reason or "", operator or "", stamp),
    )
    return DecisionEvent(int(cursor.lastrowid or 0), int(run_id), action, reason or "", operator or "", stamp)


def decision_history(conn: sqlite3.Connection, run_id: int) -> list[DecisionEvent]:
    """Every decision event of a run, oldest first."""
    rows = conn.execute(
        "SELECT * FROM decisions WHERE run_id = ? ORDER BY event_id", (int(run_id),)
    ).fetchall()
    return [_event(row) for row in rows]


def all_decisions(conn: sqlite3.Connection) -> list[DecisionEvent]:
    return [_event(row) for row in conn.execute("SELECT * FROM decisions ORDER BY event_id")]


# ---------------------------------------------------------------- trends


@dataclass(frozen=True)
class TrendPoint:
    """One run's value of a quantity."""

    processed_at: str
    run_id: int
    value: float
    sigma: float | None


def trend(conn: sqlite3.Connection, isotopologue: str, quantity: str, band: str = "") -> list[TrendPoint]:
    """One fitted quantity over processed runs, oldest first, in one query: a band constant
    of `band` ("1-0"; "origin", "B_upper", ...) or a molecular constant (band "": "B_e", ...).
    Only the newest version of each file counts (a reprocessed file is one measurement)."""
    rows = conn.execute(
        "SELECT r.processed_at, r.run_id, q.value, q.sigma FROM quantities AS q JOIN runs AS r ON r.run_id = q.run_id"
        " WHERE q.isotopologue = ? AND q.quantity = ? AND q.band = ? AND r.status = 'processed'"
        " AND r.version = (SELECT MAX(version) FROM runs WHERE path = r.path)"
        " ORDER BY r.processed_at, r.run_id",
        (isotopologue, quantity, band),
    ).fetchall()
    return [TrendPoint(row[0], int(row[1]), float(row[2]), None if row[3] is None else float(row[3])) for row in rows]


# ---------------------------------------------------------------- reprocess (`bandwatch reprocess`)


@dataclass(frozen=True)
class LatestVersion:
    """A file's newest version: what `bandwatch reprocess` needs to decide whether to analyse it
    again and to record the next version (no result, no decision)."""

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


@dataclass(frozen=True)
class RunQuery:
    """Which files of the ledger: every condition given must hold for the file's newest version."""

    received_from: str | None = None  # received_at >= this (ISO 8601 text, UTC)
    received_before: str | None = None  # received_at < this
    verdicts: tuple[str, ...] = ()
    statuses: tuple[str, ...] = ()
    path_glob: str | None = None  # SQLite GLOB on the stored path
    species: tuple[str, ...] = ()  # isotopologue labels: any of them among the run's species
    instrument: str | None = None  # only on a ledger that records instruments


_LATEST_COLUMNS = (
    "run_id, path, sha256, status, verdict, received_at, size_bytes, mtime_ns, analysis_version, library_hash,"
    " settings_hash, settings_json"
)
_NEWEST = "version = (SELECT MAX(later.version) FROM runs AS later WHERE later.path = runs.path)"


def _latest(row: sqlite3.Row) -> LatestVersion:
    return LatestVersion(
        int(row["run_id"]), path_of(row["path"]), row["sha256"], row["status"], row["verdict"], row["received_at"],
        row["size_bytes"], row["mtime_ns"], _provenance(row), row["settings_json"],
    )


def latest_versions(conn: sqlite3.Connection, paths: Iterable[str]) -> dict[str, LatestVersion]:
    """path -> its newest version, for those of `paths` the ledger holds (one query per 500)."""
    stored = [stored_path(path) for path in paths]
    found: dict[str, LatestVersion] = {}
    for start in range(0, len(stored), 500):
        part = stored[start:start + 500]
        rows = conn.execute(
            f"SELECT {_LATEST_COLUMNS} FROM runs WHERE path IN ({','.join('?' * len(part))}) AND {_NEWEST}", part
        ).fetchall()
        for row in rows:
            latest = _latest(row)
            found[latest.path] = latest
    return found


def _query_sql(conn: sqlite3.Connection, query: RunQuery) -> tuple[str, list[Any]]:
    terms = [_NEWEST]
    params: list[Any] = []
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
        terms.append("CAST(path AS TEXT) GLOB ?")
        params.append(query.path_glob)
    if query.species:
        terms.append("(" + " OR ".join("(',' || species || ',') LIKE ?" for _ in query.species) + ")")
        params.extend(f"%,{label},%" for label in query.species)
    if query.instrument is not None:
        columns = {row[1] for row in conn.execute("PRAGMA table_info(runs)")}
        if "instrument" not in columns:
            raise LedgerError("this ledger records no instruments: leave out instrument=")
        terms.append("instrument = ?")
        params.append(query.instrument)
    return " AND ".join(terms), params


def latest_matching(
    conn: sqlite3.Connection, query: RunQuery, after: str | bytes | None = None, limit: int = 1000
) -> list[LatestVersion]:
    """The newest versions of files matching `query`, in stored-path order, the first `limit`
    after the stored path `after` (pages: pass `stored_path(last.path)` of the page before)."""
    where, params = _query_sql(conn, query)
    if after is not None:
        where += " AND path > ?"
        params.append(after)
    rows = conn.execute(
        f"SELECT {_LATEST_COLUMNS} FROM runs WHERE {where} ORDER BY path LIMIT ?", [*params, int(limit)]
    ).fetchall()
    return [_latest(row) for row in rows]


def count_matching(conn: sqlite3.Connection, query: RunQuery) -> int:
    where, params = _query_sql(conn, query)
    return int(conn.execute(f"SELECT COUNT(*) FROM runs WHERE {where}", params).fetchone()[0])


def quantity_changes(conn: sqlite3.Connection, provenance: Provenance) -> Iterable[tuple[str, str, str, str, float]]:
    """(isotopologue, band, quantity, unit, new - old) of every fitted quantity found both in a
    file's newest version made with today's analysis and library (`provenance`; its settings,
    or an operator's redo request carried over) by a reprocess, and in the version it was
    reprocessed from with the same redo request; ordered by isotopologue, band and quantity,
    streamed (never all in memory)."""
    cursor = conn.execute(
        "SELECT n.isotopologue, n.band, n.quantity, n.unit, n.value - o.value FROM runs"
        " JOIN runs AS old ON old.run_id = runs.reprocessed_from"
        " JOIN quantities AS n ON n.run_id = runs.run_id"
        " JOIN quantities AS o ON o.run_id = old.run_id AND o.isotopologue = n.isotopologue"
        " AND o.band = n.band AND o.quantity = n.quantity"
        " WHERE runs.analysis_version = ? AND runs.library_hash = ?"
        " AND (runs.settings_json IS NOT NULL OR runs.settings_hash = ?)"
        f" AND runs.settings_json IS old.settings_json AND runs.{_NEWEST}"
        " ORDER BY n.isotopologue, n.band, n.quantity",
        (provenance.analysis_version, provenance.library_hash, provenance.settings_hash),
    )
    for row in cursor:
        yield (row[0], row[1], row[2], row[3], float(row[4]))
