"""The ledger's interface on both backends: instruments, idempotent records, the change feed,
concurrent decisions, non-UTF-8 names; and what only the server has (the same schema as the
file, passwords from the environment, clear lines for a missing driver or an unreachable server).

`ledger_at` runs a test on the SQLite file and on a throwaway PostgreSQL database."""
from __future__ import annotations

import os
import socket
import sqlite3
import sys
import threading
import time
from pathlib import Path
from urllib.parse import urlsplit

import pytest

from processing.estimate import Estimate
from processing.results import Band, RunResult
from processing.station import ledger as lg
from processing.station import ledger_postgres
from processing.station.change_feed import ChangeFeed


def _result(origin: float = 2885.98) -> RunResult:
    # H35Cl 1-0 band origin of the right size (Huber & Herzberg 1979 via NIST WebBook, recalled)
    band = Band("H35Cl", 1, 0, 12, 0.003, Estimate(origin, 0.002), Estimate(10.1365, 0.0004), Estimate(10.4398, 0.0004))
    return RunResult("x.csv", "processed", "a" * 64, bands=(band,), verdict="pass")


def test_runs_are_keyed_by_instrument_and_path(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    a1 = lg.record_run(conn, "/exp/run1.csv", "1" * 64, "processed", result=_result(2885.97), instrument="ftir-a")
    b1 = lg.record_run(conn, "/exp/run1.csv", "2" * 64, "processed", result=_result(2885.99), instrument="ftir-b")
    a2 = lg.record_run(conn, "/exp/run1.csv", "3" * 64, "processed", result=_result(2885.98), instrument="ftir-a")
    # the same path on two instruments is two files: each has its own versions
    assert [(r.instrument, r.version) for r in (a1, b1, a2)] == [("ftir-a", 1), ("ftir-b", 1), ("ftir-a", 2)]
    assert lg.instruments(conn) == ["ftir-a", "ftir-b"]
    assert [r.run_id for r in lg.list_runs(conn, instrument="ftir-a")] == [a2.run_id, a1.run_id]
    assert [r.run_id for r in lg.list_runs(conn, instrument="ftir-b", latest_only=True)] == [b1.run_id]
    assert [r.run_id for r in lg.list_runs(conn, latest_only=True)] == [a2.run_id, b1.run_id]
    assert lg.latest_sha_by_path(conn, "ftir-a") == {"/exp/run1.csv": "3" * 64}
    assert lg.latest_sha_by_path(conn, "ftir-b") == {"/exp/run1.csv": "2" * 64}
    assert lg.latest_run_for_path(conn, "/exp/run1.csv", "ftir-b").run_id == b1.run_id
    assert lg.latest_run_for_path(conn, "/exp/run1.csv", "ftir-c") is None
    # one quantity across instruments: the newest version of each instrument's file
    points = lg.trend(conn, "H35Cl", "origin", "1-0")
    assert [(p.instrument, p.value) for p in points] == [("ftir-b", 2885.99), ("ftir-a", 2885.98)]
    assert [p.run_id for p in lg.trend(conn, "H35Cl", "origin", "1-0", instruments=("ftir-b",))] == [b1.run_id]
    assert lg.trend(conn, "H35Cl", "origin", "1-0", instruments=()) == []
    # a redo stays on the instrument of the run it redoes
    again = lg.record_reprocessed(conn, b1.run_id, _result(2885.96), {"species": ["H35Cl"]})
    assert (again.instrument, again.version) == ("ftir-b", 2)


def test_a_record_key_makes_a_record_idempotent(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    first = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(), instrument="i", record_key="k-1")
    again = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(), instrument="i", record_key="k-1")
    assert (again.run_id, again.version) == (first.run_id, 1)
    assert len(lg.list_runs(conn)) == 1
    assert len(lg.trend(conn, "H35Cl", "origin", "1-0")) == 1  # its quantities not doubled either
    other = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(), instrument="i", record_key="k-2")
    assert other.version == 2


def test_changes_after_names_each_changed_run_once_in_order(ledger_at: str | Path) -> None:
    writer = lg.open_ledger(ledger_at)
    reader = lg.open_ledger(ledger_at, read_only=True)
    start = lg.change_cursor(reader)
    assert lg.changes_after(reader, start) == (start, [])
    a = lg.record_run(writer, "/exp/a.csv", "1" * 64, "processed", result=_result())
    b = lg.record_run(writer, "/exp/b.csv", "2" * 64, "processed", result=_result())
    lg.record_decision(writer, a.run_id, "accept", "", "ana")
    cursor, changed = lg.changes_after(reader, start)
    assert changed == [a.run_id, b.run_id] and cursor > start
    assert lg.changes_after(reader, cursor) == (cursor, [])
    lg.record_decision(writer, b.run_id, "flag", "odd", "ben")
    later, changed = lg.changes_after(reader, cursor)
    assert changed == [b.run_id] and later > cursor


def test_a_decision_made_elsewhere_reaches_an_open_feed_within_two_seconds(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    run = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result())
    with ChangeFeed(ledger_at) as feed:
        assert feed.poll() == []  # the feed starts from now
        made_at: list[float] = []

        def decide_elsewhere() -> None:
            time.sleep(0.3)
            other = lg.open_ledger(ledger_at)
            lg.record_decision(other, run.run_id, "flag", "baseline drifts", "ben")
            made_at.append(time.monotonic())
            other.close()

        thread = threading.Thread(target=decide_elsewhere)
        thread.start()
        changed = feed.wait(5.0)
        seen_at = time.monotonic()
        thread.join()
    assert changed == [run.run_id]
    delay = seen_at - made_at[0]
    # the promise: within 2 s (the file is polled every 0.5 s; the server announces it)
    assert delay < 2.0
    if lg.dialect(conn) == "postgresql":
        assert delay < 0.4, f"LISTEN/NOTIFY should wake the feed at once, took {delay:.3f} s"


def test_decisions_from_two_desks_at_once_are_all_recorded_in_order(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    run = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result())
    start = lg.change_cursor(conn)
    errors: list[BaseException] = []
    per_desk = 40

    def desk(name: str) -> None:
        own = lg.open_ledger(ledger_at)
        try:
            for index in range(per_desk):
                action = "accept" if index % 2 else "flag"
                lg.record_decision(own, run.run_id, action, f"{name} {index}", name)
        except BaseException as error:  # reported to the test thread below
            errors.append(error)
        finally:
            own.close()

    desks = [threading.Thread(target=desk, args=(name,)) for name in ("ana", "ben")]
    for thread in desks:
        thread.start()
    for thread in desks:
        thread.join()
    assert not errors
    history = lg.decision_history(conn, run.run_id)
    assert len(history) == 2 * per_desk
    for name in ("ana", "ben"):  # each desk's decisions in the order it made them
        assert [e.reason for e in history if e.operator == name] == [f"{name} {i}" for i in range(per_desk)]
    # event ids grow in commit order, and the journal saw them in that order too
    assert [e.event_id for e in history] == sorted(e.event_id for e in history)
    journal = conn.execute(
        "SELECT change_id FROM changes WHERE change_id > ? AND kind = 'decision' ORDER BY change_id", (start,)
    ).fetchall()
    assert len(journal) == 2 * per_desk
    # the decision in effect is the last one recorded
    assert lg.get_run(conn, run.run_id).decision_reason == history[-1].reason


def test_non_utf8_file_names_round_trip(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    name = os.fsdecode(b"/exp/r\xe9sum\xe9.csv")  # Latin-1 bytes: not UTF-8
    run = lg.record_run(conn, name, "1" * 64, "unreadable", error="bad", instrument="i")
    assert lg.get_run(conn, run.run_id).path == name
    assert lg.latest_sha_by_path(conn, "i") == {name: "1" * 64}
    assert lg.next_version(conn, name, "i") == 2


def test_the_server_schema_matches_the_file_column_for_column(tmp_path: Path, pg_url: str) -> None:
    file_conn = lg.open_ledger(tmp_path)
    server_conn = lg.open_ledger(pg_url)
    tables = ("runs", "decisions", "claims", "quantities", "changes")
    on_file = {
        (table, row[1], bool(row[3])) for table in tables for row in file_conn.execute(f"PRAGMA table_info({table})")
    }
    on_server = {
        (row[0], row[1], row[2] == "NO")
        for row in server_conn.execute(
            "SELECT table_name, column_name, is_nullable FROM information_schema.columns"
            " WHERE table_schema = 'public' AND table_name IN ('runs', 'decisions', 'claims', 'quantities', 'changes')"
        ).fetchall()
    }
    # SQLite reports an INTEGER PRIMARY KEY as nullable; the server as NOT NULL: compare names
    # for the keys and nullability for every other column
    keys = {("runs", "run_id"), ("decisions", "event_id"), ("claims", "claim_id"), ("changes", "change_id")}
    assert {c[:2] for c in on_file} == {c[:2] for c in on_server}
    assert {c for c in on_file if c[:2] not in keys} == {c for c in on_server if c[:2] not in keys}
    file_indexes = {row[0] for row in file_conn.execute("SELECT name FROM sqlite_master WHERE type = 'index' AND name NOT LIKE 'sqlite_%'")}
    server_indexes = {
        row[0] for row in server_conn.execute(
            "SELECT indexname FROM pg_indexes WHERE schemaname = 'public'"
            " AND indexname NOT IN (SELECT conname FROM pg_constraint)"  # keys' own indexes
        )
    }
    assert file_indexes == server_indexes


def test_a_missing_driver_is_one_line_naming_the_extra(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "psycopg", None)  # import psycopg now raises ImportError
    with pytest.raises(lg.LedgerError) as refused:
        lg.open_ledger("postgresql://station@db.example/bandwatch")
    assert str(refused.value) == ledger_postgres.DRIVER_ADVICE
    assert "bandwatch[facility]" in str(refused.value)


def test_an_unreachable_server_is_one_line_and_a_passing_trouble() -> None:
    pytest.importorskip("psycopg")
    with socket.socket() as probe:  # a free port nobody listens on
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    with pytest.raises(lg.LedgerUnavailable) as refused:
        lg.open_ledger(f"postgresql://station@127.0.0.1:{port}/bandwatch")
    message = str(refused.value)
    assert "\n" not in message and "unreachable" in message and f"127.0.0.1:{port}" in message


def test_urls_are_shown_without_a_password() -> None:
    assert ledger_postgres.password_in_url("postgresql://station:s3cret@db/bw")
    assert ledger_postgres.password_in_url("postgresql://station@db/bw?password=s3cret")
    assert not ledger_postgres.password_in_url("postgresql://station@db/bw?sslmode=require")
    assert "s3cret" not in ledger_postgres.shown_url("postgresql://station:s3cret@db:5432/bw")
    assert "s3cret" not in ledger_postgres.shown_url("postgresql://station@db/bw?sslmode=require&password=s3cret")
    assert ledger_postgres.shown_url("postgresql://station@db:5432/bw") == "postgresql://station@db:5432/bw"


def test_the_password_comes_from_the_environment_or_the_password_file(
    postgres: object, pg_url: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    server = postgres
    lg.open_ledger(pg_url).close()  # made by its owner
    database = urlsplit(pg_url).path.lstrip("/")
    server.admin("CREATE ROLE tester LOGIN PASSWORD 'pw-from-elsewhere'")  # type: ignore[attr-defined]
    try:
        server.admin("GRANT SELECT ON ALL TABLES IN SCHEMA public TO tester", database)  # type: ignore[attr-defined]
        url = server.url(database, "tester", tcp=True)  # type: ignore[attr-defined]
        monkeypatch.delenv("PGPASSWORD", raising=False)
        monkeypatch.setenv("PGPASSFILE", str(tmp_path / "none"))
        with pytest.raises(lg.LedgerRefused) as refused:
            lg.open_ledger(url, read_only=True)
        assert "PGPASSWORD" in str(refused.value) and "pw-from-elsewhere" not in str(refused.value)
        monkeypatch.setenv("PGPASSWORD", "pw-from-elsewhere")
        assert lg.list_runs(lg.open_ledger(url, read_only=True)) == []
        monkeypatch.delenv("PGPASSWORD")
        passfile = tmp_path / "pgpass"
        passfile.write_text(f"127.0.0.1:{server.port}:{database}:tester:pw-from-elsewhere\n")  # type: ignore[attr-defined]
        passfile.chmod(0o600)  # libpq ignores a password file others can read
        monkeypatch.setenv("PGPASSFILE", str(passfile))
        conn = lg.open_ledger(url, read_only=True)
        assert lg.schema_version(conn) == lg.SCHEMA_VERSION
        conn.close()
    finally:
        server.admin("DROP OWNED BY tester", database)  # type: ignore[attr-defined]
        server.admin("DROP ROLE tester")  # type: ignore[attr-defined]


def test_sqlite_migration_to_6_keeps_ids_growing(tmp_path: Path) -> None:
    """The file's 5 -> 6 rebuild of `runs` keeps AUTOINCREMENT's memory of deleted top ids."""
    conn = lg.open_ledger(tmp_path)
    for index in range(3):
        lg.record_run(conn, f"/exp/{index}.csv", None, "unreadable", error="bad")
    sequence = conn.execute("SELECT seq FROM sqlite_sequence WHERE name = 'runs'").fetchone()
    assert sequence is not None and sequence[0] == 3
    assert conn.execute("PRAGMA foreign_keys").fetchone()[0] == 1  # back on after migrating
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert isinstance(conn, sqlite3.Connection)
