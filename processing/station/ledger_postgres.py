"""The ledger on a PostgreSQL server: the same tables, migrations and rules as the SQLite file.

`PostgresConnection` lets the functions of `ledger` run unchanged on the server: it takes
SQLite's `?` placeholders, returns rows that answer by name and by position, maps `BEGIN
IMMEDIATE` (SQLite's "take the write lock now") to `BEGIN` plus one transaction-level advisory
lock, so writes are serialised exactly as they are on the file (row ids and the change journal
grow in commit order), and turns every driver error into one `LedgerError` line without the
password. The driver (psycopg 3) is optional: `pip install 'bandwatch[facility]'`.

The schema version is a one-row table `ledger_schema`; `ledger.SERVER_MIGRATIONS[i]` takes it from i to
i + 1, as `ledger.MIGRATIONS[i]` does on the file (a test compares the two schemas column by
column). Decisions are append-only in the database: triggers refuse UPDATE, DELETE and
TRUNCATE for every role, the owner's included; the roles the README documents add privileges.
"""
from __future__ import annotations

import hashlib
import re
from collections.abc import Callable, Iterator, Sequence
from typing import TYPE_CHECKING, Any
from urllib.parse import urlsplit, urlunsplit

from processing.station.ledger_errors import LedgerError, LedgerRefused, LedgerUnavailable

if TYPE_CHECKING:
    import psycopg

URL_SCHEMES = ("postgresql", "postgres")
CHANGES_CHANNEL = "bandwatch_changes"
CONNECT_TIMEOUT_SECONDS = 5
# pg_advisory_xact_lock key of the ledger's single writer lock (an arbitrary 63-bit number
# derived from a fixed name, so other programs' advisory locks do not collide with it)
WRITE_LOCK = int.from_bytes(hashlib.sha256(b"bandwatch ledger writer").digest()[:8], "big") >> 1
MIGRATION_LOCK = WRITE_LOCK - 1
# what goes into and comes out of a ledger statement
SqlValue = str | bytes | int | float | None
SqlParams = Sequence[SqlValue]
DRIVER_ADVICE = "the PostgreSQL driver is not installed: pip install 'bandwatch[facility]' (psycopg 3)"


def is_server_url(where: object) -> bool:
    """True for a `postgresql://` (or `postgres://`) URL, False for a data folder."""
    return isinstance(where, str) and where.split("://", 1)[0].lower() in URL_SCHEMES and "://" in where


def password_in_url(url: str) -> bool:
    """True when the URL carries a password (refused: it would be stored or shown)."""
    try:
        parts = urlsplit(url)
    except ValueError:
        return False
    if parts.password:
        return True
    return re.search(r"(^|[?&])password=", parts.query or "") is not None


def shown_url(url: str) -> str:
    """The URL as bandwatch prints it: never a password, even one given by mistake."""
    try:
        parts = urlsplit(url)
    except ValueError:
        return "postgresql://(unreadable URL)"
    netloc = parts.netloc
    if "@" in netloc:
        user, _, host = netloc.rpartition("@")
        netloc = f"{user.split(':', 1)[0]}@{host}"
    query = re.sub(r"(^|&)password=[^&]*", r"\1password=***", parts.query or "")
    return urlunsplit((parts.scheme, netloc, parts.path, query, ""))


def driver() -> Any:
    """The psycopg module, or one clear LedgerError when the optional extra is missing."""
    try:
        import psycopg
    except ImportError:
        raise LedgerError(DRIVER_ADVICE) from None
    return psycopg


class Row(tuple):  # type: ignore[type-arg]
    """A result row that answers by position and by column name, as sqlite3.Row does."""

    __slots__ = ()
    names: dict[str, int] = {}

    def __getitem__(self, key: int | str | slice) -> SqlValue:  # type: ignore[override]
        if isinstance(key, str):
            return tuple.__getitem__(self, self.names[key])
        return tuple.__getitem__(self, key)

    def keys(self) -> list[str]:
        return list(self.names)


def _row_factory(cursor: psycopg.Cursor[Row]) -> Callable[[Sequence[SqlValue]], Row]:
    description = cursor.description or ()
    names = {column.name: index for index, column in enumerate(description)}
    row_class = type("Row", (Row,), {"__slots__": (), "names": names})
    return lambda values: row_class(values)


class Cursor:
    """What `ledger` reads from a statement: rows, and the first column of RETURNING."""

    def __init__(self, raw: psycopg.Cursor[Row]) -> None:
        self._raw = raw

    def fetchone(self) -> Row | None:
        return self._raw.fetchone() if self._raw.description else None

    def fetchall(self) -> list[Row]:
        return self._raw.fetchall() if self._raw.description else []

    def __iter__(self) -> Iterator[Row]:
        return iter(self.fetchall())


def translate(sql: str) -> str:
    """SQLite's `?` placeholders as psycopg's `%s` (a literal `%` doubled)."""
    return sql.replace("%", "%%").replace("?", "%s")


class PostgresConnection:
    """A psycopg connection that takes the ledger's SQL as written for SQLite (see module doc)."""

    dialect = "postgresql"

    def __init__(self, raw: psycopg.Connection[tuple[SqlValue, ...]], url: str) -> None:
        self.raw = raw
        self.url = url
        self.where = shown_url(url)

    def execute(self, sql: str, params: SqlParams = ()) -> Cursor:
        statement = sql.strip()
        if statement.upper() == "BEGIN IMMEDIATE":
            self._run("BEGIN", ())
            return self._run("SELECT pg_advisory_xact_lock(?)", (WRITE_LOCK,))
        if statement.upper() == "ROLLBACK" and self.raw.closed:
            return _EMPTY  # the connection broke: nothing is left to roll back
        return self._run(sql, params)

    def fetch_tuples(self, sql: str, params: SqlParams = ()) -> list[tuple[SqlValue, ...]]:
        """Rows as plain tuples (no names): the fast path for long listings."""
        try:
            with self.raw.cursor() as cursor:
                cursor.execute(translate(sql) if params else sql, tuple(params) if params else None)
                return cursor.fetchall()
        except _driver_errors() as error:
            raise problem(self.where, error) from None

    def stream(self, sql: str, params: SqlParams = ()) -> Iterator[tuple[SqlValue, ...]]:
        """Rows as plain tuples, one at a time as the server sends them (a long answer is never
        all in memory; the connection runs nothing else until the last row is read)."""
        try:
            with self.raw.cursor() as cursor:
                yield from cursor.stream(translate(sql) if params else sql, tuple(params) if params else None)
        except _driver_errors() as error:
            raise problem(self.where, error) from None

    def executemany(self, sql: str, rows: Sequence[SqlParams]) -> None:
        rows = list(rows)
        if not rows:
            return
        try:
            with self.raw.cursor() as cursor:
                cursor.executemany(translate(sql), rows)
        except _driver_errors() as error:
            raise problem(self.where, error) from None

    def _run(self, sql: str, params: SqlParams) -> Cursor:
        try:
            cursor = self.raw.cursor(row_factory=_row_factory)
            if params:
                cursor.execute(translate(sql), tuple(params))
            else:
                cursor.execute(sql)
        except _driver_errors() as error:
            raise problem(self.where, error) from None
        return Cursor(cursor)

    def close(self) -> None:
        try:
            self.raw.close()
        except _driver_errors():
            pass  # a broken connection is closed all the same

    @property
    def closed(self) -> bool:
        return bool(self.raw.closed)

    def __enter__(self) -> PostgresConnection:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class _Empty:
    def fetchone(self) -> None:
        return None

    def fetchall(self) -> list[Row]:
        return []

    def __iter__(self) -> Iterator[Row]:
        return iter(())


_EMPTY: Any = _Empty()


def _driver_errors() -> tuple[type[BaseException], ...]:
    return (driver().Error,)


def problem(where: str, error: BaseException) -> LedgerError:
    """A driver error as one line: unavailable (try later), refused (never), or other."""
    psycopg = driver()
    errors = psycopg.errors
    first_line = (str(error).strip().splitlines() or [type(error).__name__])[0]
    text = first_line.replace("ERROR:  ", "").strip()
    if isinstance(error, errors.InsufficientPrivilege):
        return LedgerRefused(f"ledger {where}: the server refused: {text} (this database role may not do that)")
    if isinstance(error, errors.RaiseException):
        return LedgerRefused(f"ledger {where}: {text}")
    if isinstance(error, (errors.UndefinedTable, errors.InvalidCatalogName)):
        return LedgerError(f"ledger {where}: {text} (not a bandwatch ledger, or not migrated: `bandwatch ledger migrate`)")
    if isinstance(error, (psycopg.OperationalError, psycopg.InterfaceError)):
        if "password authentication failed" in text or "no password supplied" in text:
            return LedgerRefused(
                f"ledger {where}: {text} (give the password in PGPASSWORD or the password file ~/.pgpass, never in the URL)"
            )
        return LedgerUnavailable(f"ledger {where} is unreachable: {text}")
    return LedgerError(f"ledger {where}: {text}")


def connect(url: str, *, application_name: str = "bandwatch") -> PostgresConnection:
    """Connect (autocommit: each statement is its own transaction unless BEGIN says otherwise).
    The password comes from PGPASSWORD or the password file (libpq reads both)."""
    psycopg = driver()
    where = shown_url(url)
    try:
        raw = psycopg.connect(
            url, autocommit=True, connect_timeout=CONNECT_TIMEOUT_SECONDS, application_name=application_name
        )
    except psycopg.Error as error:
        raise problem(where, error) from None
    return PostgresConnection(raw, url)


# ---------------------------------------------------------------- schema and migrations

# The server's side of each migration: `ledger.SERVER_MIGRATIONS` lists them entry for entry
# beside `ledger.MIGRATIONS` (same tables and columns at every version). Never edit a shipped one.
# 0 -> 1: runs and decisions
RUNS_AND_DECISIONS = """
    CREATE TABLE runs (
        run_id       BIGINT GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
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
        event_id  BIGINT GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
        run_id    BIGINT NOT NULL REFERENCES runs (run_id),
        action    TEXT NOT NULL CHECK (action IN ('accept', 'flag', 'undo')),
        reason    TEXT NOT NULL DEFAULT '',
        operator  TEXT NOT NULL DEFAULT '',
        at        TEXT NOT NULL
    );
    CREATE INDEX decisions_by_run ON decisions (run_id, event_id);
    CREATE FUNCTION bandwatch_append_only() RETURNS trigger LANGUAGE plpgsql AS $body$
    BEGIN
        RAISE EXCEPTION 'decisions are append-only';
    END
    $body$;
    CREATE TRIGGER decisions_append_only_update BEFORE UPDATE ON decisions
        FOR EACH ROW EXECUTE FUNCTION bandwatch_append_only();
    CREATE TRIGGER decisions_append_only_delete BEFORE DELETE ON decisions
        FOR EACH ROW EXECUTE FUNCTION bandwatch_append_only();
    CREATE TRIGGER decisions_append_only_truncate BEFORE TRUNCATE ON decisions
        FOR EACH STATEMENT EXECUTE FUNCTION bandwatch_append_only();
"""
# 1 -> 2: claims, settings of reprocessed runs
CLAIMS = """
    ALTER TABLE runs ADD COLUMN settings_json TEXT;
    ALTER TABLE runs ADD COLUMN reprocessed_from BIGINT REFERENCES runs (run_id);
    CREATE TABLE claims (
        claim_id    BIGINT GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
        path        TEXT NOT NULL,
        sha256      TEXT,
        received_at TEXT NOT NULL,
        owner_pid   INTEGER
    );
    CREATE INDEX claims_by_path ON claims (path);
"""
# 2 -> 3: the file's size and time stamp when read
FILE_STAT = """
    ALTER TABLE runs ADD COLUMN size_bytes BIGINT;
    ALTER TABLE runs ADD COLUMN mtime_ns BIGINT;
"""
# 3 -> 4: every fitted quantity of a run as a row (`ledger` fills it from stored results)
QUANTITIES_TABLE = """
    CREATE TABLE quantities (
        run_id       BIGINT NOT NULL REFERENCES runs (run_id),
        isotopologue TEXT NOT NULL,
        band         TEXT NOT NULL,
        quantity     TEXT NOT NULL,
        value        DOUBLE PRECISION NOT NULL,
        sigma        DOUBLE PRECISION,
        unit         TEXT NOT NULL
    );
    CREATE INDEX quantities_by_name ON quantities (isotopologue, quantity, band, run_id);
    CREATE INDEX quantities_by_run ON quantities (run_id);
"""
# (4 -> 5, the provenance columns, is the same SQL as the file's: `ledger.PROVENANCE_COLUMNS`)
# 5 -> 6: instruments (runs keyed by instrument + path), idempotent record keys (a spooled
# outcome replayed twice is one run), and the change journal every interface polls (its
# trigger takes the writer lock, so change ids grow in commit order, and announces each one)
INSTRUMENTS_AND_CHANGES = f"""
    ALTER TABLE runs ADD COLUMN instrument TEXT NOT NULL DEFAULT '';
    ALTER TABLE runs ADD COLUMN record_key TEXT;
    ALTER TABLE runs DROP CONSTRAINT runs_path_version_key;
    ALTER TABLE runs ADD CONSTRAINT runs_instrument_path_version_key UNIQUE (instrument, path, version);
    DROP INDEX runs_by_path;
    CREATE INDEX runs_by_path ON runs (instrument, path, version);
    CREATE UNIQUE INDEX runs_by_record_key ON runs (record_key);
    CREATE INDEX runs_by_instrument ON runs (instrument, run_id);
    ALTER TABLE claims ADD COLUMN instrument TEXT NOT NULL DEFAULT '';
    CREATE TABLE changes (
        change_id BIGINT GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
        run_id    BIGINT NOT NULL,
        kind      TEXT NOT NULL
    );
    CREATE FUNCTION bandwatch_note_change() RETURNS trigger LANGUAGE plpgsql AS $body$
    DECLARE
        noted BIGINT;
    BEGIN
        PERFORM pg_advisory_xact_lock({WRITE_LOCK});
        INSERT INTO changes (run_id, kind) VALUES (NEW.run_id, TG_ARGV[0]) RETURNING change_id INTO noted;
        PERFORM pg_notify('{CHANGES_CHANNEL}', noted::text);
        RETURN NULL;
    END
    $body$;
    CREATE TRIGGER runs_changed AFTER INSERT ON runs
        FOR EACH ROW EXECUTE FUNCTION bandwatch_note_change('run');
    CREATE TRIGGER decisions_changed AFTER INSERT ON decisions
        FOR EACH ROW EXECUTE FUNCTION bandwatch_note_change('decision');
"""
# 6 -> 7: each run's main reasons (`ledger` fills them from the stored results)
REASONS_COLUMN = "ALTER TABLE runs ADD COLUMN reasons_json TEXT"
PgMigration = str | Callable[["PostgresConnection"], None]

SCHEMA_TABLE = "CREATE TABLE IF NOT EXISTS ledger_schema (version INTEGER NOT NULL)"


def schema_version(conn: PostgresConnection) -> int:
    """The version in `ledger_schema` (0 for an empty database)."""
    found = conn.execute("SELECT to_regclass('ledger_schema') IS NOT NULL").fetchone()
    if not found or not found[0]:
        return 0
    row = conn.execute("SELECT max(version) FROM ledger_schema").fetchone()
    return int(row[0] or 0) if row else 0


def migrate(conn: PostgresConnection, target: int, migrations: Sequence[PgMigration]) -> int:
    """Bring the schema to `target` in one transaction (DDL is transactional on the server);
    returns the version found before. Concurrent starts wait for each other."""
    found = schema_version(conn)
    if found >= target:
        return found
    conn.execute("BEGIN")
    try:
        conn.execute("SELECT pg_advisory_xact_lock(?)", (MIGRATION_LOCK,))
        conn.execute(SCHEMA_TABLE)
        current = schema_version(conn)
        if conn.execute("SELECT count(*) FROM ledger_schema").fetchone()[0] == 0:  # type: ignore[index]
            conn.execute("INSERT INTO ledger_schema (version) VALUES (0)")
        for version in range(current, target):
            step = migrations[version]
            if isinstance(step, str):
                conn.execute(step)
            else:
                step(conn)
            conn.execute("UPDATE ledger_schema SET version = ?", (version + 1,))
        conn.execute("COMMIT")
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    return found


class ChangeListener:
    """LISTEN on the change channel over a connection of its own: `wait(timeout)` returns as
    soon as any interface or station records something (or after `timeout`)."""

    def __init__(self, url: str) -> None:
        self.conn = connect(url, application_name="bandwatch listener")
        self.conn.execute(f"LISTEN {CHANGES_CHANNEL}")

    def wait(self, timeout: float) -> bool:
        """True when a change was announced within `timeout` seconds."""
        psycopg = driver()
        try:
            for _ in self.conn.raw.notifies(timeout=max(0.0, timeout), stop_after=1):
                return True
        except psycopg.Error as error:
            raise problem(self.conn.where, error) from None
        return False

    def close(self) -> None:
        self.conn.close()
