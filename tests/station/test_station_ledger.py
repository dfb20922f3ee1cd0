"""Ledger: runs, versions, claims, append-only decisions, trends, migrations, concurrent readers.

Every test runs on both backends (`ledger_at`: a data folder for SQLite, a throwaway
PostgreSQL database); the few about the SQLite file itself say so in their name."""
from __future__ import annotations

import os
import sqlite3
import threading
from pathlib import Path

import pytest

from processing.estimate import Estimate
from processing.provenance import Provenance
from processing.results import Band, IsotopologueConstants, RunResult
from processing.station import ledger as lg
from processing.station import ledger_postgres

# what the database raises when raw SQL breaks a ledger rule (the server's errors come through
# the connection as one LedgerError line)
RULE_BROKEN = (sqlite3.IntegrityError, lg.LedgerRefused)


def create_at_version(where: str | Path, version: int) -> lg.Connection:
    """A ledger made by the first `version` migrations only (as an older bandwatch left it)."""
    if ledger_postgres.is_server_url(where):
        conn = ledger_postgres.connect(str(where))
        ledger_postgres.migrate(conn, version, lg.SERVER_MIGRATIONS)
        return conn
    Path(where).mkdir(parents=True, exist_ok=True)
    old = sqlite3.connect(Path(where) / lg.LEDGER_FILE, isolation_level=None)
    for step in lg.MIGRATIONS[:version]:
        if isinstance(step, str):
            for statement in lg._statements(step):
                old.execute(statement)
        else:
            step(old)
    old.execute(f"PRAGMA user_version = {version}")
    return old


def set_schema_version(conn: lg.Connection, version: int) -> None:
    if lg.dialect(conn) == "postgresql":
        conn.execute("UPDATE ledger_schema SET version = ?", (version,))
    else:
        conn.execute(f"PRAGMA user_version = {version}")


def _result(verdict: str = "pass", origin: float = 2885.98, b_e: float = 10.5934, v_upper: int = 1) -> RunResult:
    # H35Cl 1-0 origin and B_e of the right size (Huber & Herzberg 1979 via NIST WebBook, recalled)
    band = Band("H35Cl", v_upper, 0, 12, 0.003, Estimate(origin, 0.002), Estimate(10.1365, 0.0004), Estimate(10.4398, 0.0004))
    constants = IsotopologueConstants("H35Cl", 12, (0, 1), 0.003, {"B_e": Estimate(b_e, None)}, {}, {}, {}, (), {}, {}, ())
    return RunResult("x.csv", "processed", "a" * 64, bands=(band,), constants=(constants,), verdict=verdict)


def test_sqlite_file_is_a_wal_ledger(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path / "data")
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_open_creates_a_ledger_at_current_schema(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    assert lg.schema_version(conn) == lg.SCHEMA_VERSION == 7
    assert len(lg.SERVER_MIGRATIONS) == len(lg.MIGRATIONS)
    assert lg.list_runs(conn) == [] and lg.change_cursor(conn) == 0
    conn.close()
    again = lg.open_ledger(ledger_at, read_only=True)  # opened again: nothing to migrate
    assert lg.schema_version(again) == lg.SCHEMA_VERSION


def test_record_run_versions_per_path_and_lists_newest_first(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    first = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result())
    other = lg.record_run(conn, "/exp/b.csv", None, "unreadable", error="/exp/b.csv: file is empty")
    second = lg.record_run(conn, "/exp/a.csv", "2" * 64, "processed", result=_result("fail"))
    assert (first.version, other.version, second.version) == (1, 1, 2)
    assert first.species == ("H35Cl",) and first.verdict == "pass"
    assert second.verdict == "fail"
    assert [r.run_id for r in lg.list_runs(conn)] == [second.run_id, other.run_id, first.run_id]
    assert [r.run_id for r in lg.list_runs(conn, limit=2)] == [second.run_id, other.run_id]
    assert [r.run_id for r in lg.list_runs(conn, latest_only=True)] == [second.run_id, other.run_id]
    assert lg.latest_sha_by_path(conn) == {"/exp/a.csv": "2" * 64, "/exp/b.csv": None}
    assert lg.get_run(conn, other.run_id).error == "/exp/b.csv: file is empty"
    assert lg.get_run(conn, 999) is None
    with pytest.raises(ValueError):
        lg.record_run(conn, "/exp/c.csv", None, "in progress")


def test_claim_is_dropped_in_the_same_transaction_as_the_run(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    claim = lg.claim_file(conn, "/exp/a.csv", "1" * 64, owner_pid=123)
    assert [c.path for c in lg.list_claims(conn)] == ["/exp/a.csv"]
    lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(), claim_id=claim.claim_id)
    assert lg.list_claims(conn) == []
    assert lg.latest_stat_by_path(conn) == {}  # old runs have no stat: re-read once, then known


def test_decisions_are_append_only_with_undo(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    run = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result())
    assert lg.undo_last_decision(conn, run.run_id, "ana") is None  # nothing to undo
    lg.record_decision(conn, run.run_id, "accept", "lines look right", "ana")
    lg.record_decision(conn, run.run_id, "flag", "baseline drifts", "ben")
    current = lg.get_run(conn, run.run_id)
    assert (current.decision, current.decision_reason, current.operator) == ("flag", "baseline drifts", "ben")
    undo = lg.undo_last_decision(conn, run.run_id, "ben")
    assert undo is not None and undo.action == "undo"
    assert lg.get_run(conn, run.run_id).decision == "accept"  # back to the state before the flag
    lg.undo_last_decision(conn, run.run_id, "ana")
    assert lg.get_run(conn, run.run_id).decision is None
    assert lg.undo_last_decision(conn, run.run_id, "ana") is None
    history = lg.decision_history(conn, run.run_id)
    assert [e.action for e in history] == ["accept", "flag", "undo", "undo"]
    assert [e.operator for e in history] == ["ana", "ben", "ben", "ana"]
    # the trail cannot be rewritten, even with raw SQL: the database refuses
    with pytest.raises(RULE_BROKEN, match="append-only"):
        conn.execute("UPDATE decisions SET action = 'accept'")
    with pytest.raises(RULE_BROKEN, match="append-only"):
        conn.execute("DELETE FROM decisions")
    if lg.dialect(conn) == "postgresql":
        with pytest.raises(RULE_BROKEN, match="append-only"):
            conn.execute("TRUNCATE decisions CASCADE")
    assert len(lg.decision_history(conn, run.run_id)) == 4
    with pytest.raises(ValueError):
        lg.record_decision(conn, run.run_id, "undo", "", "ana")
    with pytest.raises(lg.LedgerError):
        lg.record_decision(conn, 999, "accept", "", "ana")


def test_current_decision_listed_per_run(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    a = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result())
    b = lg.record_run(conn, "/exp/b.csv", "2" * 64, "processed", result=_result())
    lg.record_decision(conn, a.run_id, "flag", "odd", "ana")
    lg.record_decision(conn, b.run_id, "accept", "", "ana")
    decisions = {r.run_id: r.decision for r in lg.list_runs(conn)}
    assert decisions == {a.run_id: "flag", b.run_id: "accept"}
    assert {r.run_id: r.decision for r in lg.list_runs(conn, limit=1)} == {b.run_id: "accept"}


def test_reprocessed_is_a_new_version_with_its_settings(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    run = lg.record_run(conn, "/exp/a.csv", "a" * 64, "processed", result=_result())
    again = lg.record_reprocessed(conn, run.run_id, _result("warn"), {"species": ["H35Cl"]})
    # the sha256 is the one the reprocessing read (same file content here)
    assert (again.path, again.version, again.sha256) == ("/exp/a.csv", 2, "a" * 64)
    assert again.settings == {"species": ["H35Cl"]} and again.reprocessed_from == run.run_id
    assert again.verdict == "warn"


def test_trend_reads_band_and_molecular_constants_oldest_first(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    a = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(origin=2885.97))
    b = lg.record_run(conn, "/exp/b.csv", "2" * 64, "processed", result=_result(origin=2885.99, b_e=10.59))
    lg.record_run(conn, "/exp/c.csv", None, "unreadable", error="bad")
    overtone = lg.record_run(conn, "/exp/d.csv", "4" * 64, "processed", result=_result(origin=5667.98, v_upper=2))
    origins = lg.trend(conn, "H35Cl", "origin", "1-0")
    assert [(p.run_id, p.value, p.sigma) for p in origins] == [(a.run_id, 2885.97, 0.002), (b.run_id, 2885.99, 0.002)]
    assert [(p.run_id, p.value) for p in lg.trend(conn, "H35Cl", "origin", "2-0")] == [(overtone.run_id, 5667.98)]
    assert [p.value for p in lg.trend(conn, "H35Cl", "B_e")] == [10.5934, 10.59, 10.5934]
    assert lg.trend(conn, "H35Cl", "B_e")[0].sigma is None
    assert lg.trend(conn, "D35Cl", "origin", "1-0") == []
    # a newer version of a file replaces the older one in the trend
    lg.record_reprocessed(conn, a.run_id, _result(origin=2885.975), {})
    assert [p.value for p in lg.trend(conn, "H35Cl", "origin", "1-0")] == [2885.99, 2885.975]


def test_migration_fills_the_quantities_of_runs_recorded_before(ledger_at: str | Path) -> None:
    from processing.results import to_json

    from dataclasses import replace

    from processing.results import Check

    shifted = Check("calibration", "warn", "wavenumber calibration offset: offset +0.240 +- 0.005 cm-1", 0.24)
    old = create_at_version(ledger_at, 3)
    for index, origin in enumerate((2885.97, 2885.99)):
        old.execute(
            "INSERT INTO runs (path, sha256, version, status, verdict, species, result_json, error, received_at, processed_at)"
            " VALUES (?, 'ab', 1, 'processed', 'pass', 'H35Cl', ?, NULL, ?, ?)",
            (f"/exp/{index}.csv", to_json(replace(_result(origin=origin), checks=(shifted,))),
             f"2026-01-0{index + 1}T00:00:00Z", f"2026-01-0{index + 1}T00:00:01Z"),
        )
    old.execute(
        "INSERT INTO runs (path, sha256, version, status, verdict, species, result_json, error, received_at, processed_at)"
        " VALUES ('/exp/bad.csv', 'cd', 1, 'processed', 'pass', '', '{\"schema\": 7}', NULL, '2026-01-03T00:00:00Z', NULL)"
    )
    old.close()
    conn = lg.open_ledger(ledger_at)
    assert lg.schema_version(conn) == lg.SCHEMA_VERSION
    assert [p.value for p in lg.trend(conn, "H35Cl", "origin", "1-0")] == [2885.97, 2885.99]
    # the runs recorded before get their main reasons (migration 6 -> 7); the change journal
    # starts empty and sees what is recorded from now on
    assert lg.get_run(conn, 1).reasons == ("calibration +0.24 cm-1",)  # type: ignore[union-attr]
    # its stored result cannot be read: no reasons (reading the run itself says so)
    assert [r.reasons for r in lg.list_runs(conn, with_result=False) if r.run_id == 3] == [()]
    cursor = lg.change_cursor(conn)
    assert (cursor, lg.changes_after(conn, cursor)) == (0, (0, []))
    lg.record_decision(conn, 2, "flag", "check", "ana")
    assert lg.changes_after(conn, cursor)[1] == [2]


@pytest.mark.parametrize("old_version", [1, 2, 3, 4, 5])
def test_migration_from_an_older_schema_keeps_runs_and_decisions(ledger_at: str | Path, old_version: int) -> None:
    old = create_at_version(ledger_at, old_version)
    old.execute(
        "INSERT INTO runs (path, sha256, version, status, verdict, species, result_json, error,"
        " received_at, processed_at) VALUES ('/exp/a.csv', 'ab', 1, 'processed', 'pass', 'H35Cl',"
        " NULL, NULL, '2026-01-01T00:00:00Z', '2026-01-01T00:00:01Z')"
    )
    old.execute(
        "INSERT INTO decisions (run_id, action, reason, operator, at)"
        " VALUES (1, 'accept', 'ok', 'ana', '2026-01-01T00:01:00Z')"
    )
    old.close()
    conn = lg.open_ledger(ledger_at)
    assert lg.schema_version(conn) == lg.SCHEMA_VERSION
    run = lg.get_run(conn, 1)
    assert (run.path, run.verdict, run.decision, run.species, run.settings, run.instrument) == (
        "/exp/a.csv", "pass", "accept", ("H35Cl",), None, "",
    )
    assert lg.list_claims(conn) == []
    # the rules hold after the migration: the trail stays append-only, new ids follow the old
    with pytest.raises(RULE_BROKEN, match="append-only"):
        conn.execute("DELETE FROM decisions")
    later = lg.record_run(conn, "/exp/a.csv", "cd", "unreadable", error="bad")
    assert later.run_id == 2 and later.version == 2
    # the journal starts with the migration; the new version replaces run 1, which changes too
    assert lg.changes_after(conn, 0) == (1, [1, later.run_id])
    # runs recorded before instruments existed go to the station that opens its ledger
    assert lg.adopt_unnamed_runs(conn, "ftir-1") == 2
    assert {r.instrument for r in lg.list_runs(conn)} == {"ftir-1"}
    assert lg.latest_sha_by_path(conn, "ftir-1") == {"/exp/a.csv": "cd"}


def test_migration_to_instruments_keeps_what_each_version_was_made_with(ledger_at: str | Path) -> None:
    """5 -> 6 rebuilds `runs` on the file (a new key): the provenance columns of 4 -> 5 come along."""
    old = create_at_version(ledger_at, 5)
    old.execute(
        "INSERT INTO runs (path, sha256, version, status, verdict, species, received_at, processed_at,"
        " size_bytes, mtime_ns, analysis_version, library_hash, settings_hash) VALUES ('/exp/a.csv', 'ab', 1,"
        " 'processed', 'pass', 'H35Cl', '2026-01-01T00:00:00Z', '2026-01-01T00:00:01Z', 10, 5, '0.1.0+abc', 'lib', 'set')"
    )
    old.close()
    conn = lg.open_ledger(ledger_at)
    assert lg.schema_version(conn) == lg.SCHEMA_VERSION
    run = lg.get_run(conn, 1)
    assert run.provenance == Provenance("0.1.0+abc", "lib", "set") and run.instrument == ""
    assert lg.latest_stat_by_path(conn) == {"/exp/a.csv": (10, 5)}
    [latest] = lg.latest_versions(conn, ["/exp/a.csv"]).values()
    assert latest.provenance == run.provenance and (latest.size_bytes, latest.mtime_ns) == (10, 5)


def test_migration_to_reasons_keeps_every_column_the_journal_and_the_keys(ledger_at: str | Path) -> None:
    """6 -> 7 adds each run's main reasons (the file rebuilds `runs` so they come before the
    stored result): instruments, record keys, provenance, redo links and decisions come along,
    and the change journal, the record-key index and the append-only rule still hold."""
    from dataclasses import replace

    from processing.results import Check, to_json

    old = create_at_version(ledger_at, 6)
    # a calibration warning of the size a service visit leaves (common practice: the check's own wording)
    shifted = Check("calibration", "warn", "wavenumber calibration offset: offset +0.240 +- 0.005 cm-1", 0.24)
    old.execute(
        "INSERT INTO runs (path, sha256, version, status, verdict, species, result_json, received_at, processed_at,"
        " size_bytes, mtime_ns, analysis_version, library_hash, settings_hash, instrument, record_key)"
        " VALUES ('/exp/a.csv', 'ab', 1, 'processed', 'warn', 'H35Cl', ?, '2026-01-01T00:00:00Z',"
        " '2026-01-01T00:00:01Z', 10, 5, '0.1.0+abc', 'lib', 'set', 'ftir-1', 'key-1')",
        (to_json(replace(_result(), checks=(shifted,))),),
    )
    old.execute(
        "INSERT INTO runs (path, sha256, version, status, verdict, species, received_at, processed_at, settings_json,"
        " reprocessed_from, instrument) VALUES ('/exp/a.csv', 'ab', 2, 'failed', NULL, '', '2026-01-02T00:00:00Z',"
        " '2026-01-02T00:00:01Z', '{\"species\": [\"H35Cl\"]}', 1, 'ftir-1')"
    )
    old.execute("INSERT INTO decisions (run_id, action, reason, operator, at) VALUES (1, 'flag', 'odd', 'ana', '2026-01-01T00:01:00Z')")
    before = lg.change_cursor(old)
    assert before == 3  # two runs and a decision journalled at version 6
    old.close()
    conn = lg.open_ledger(ledger_at)
    assert lg.schema_version(conn) == lg.SCHEMA_VERSION == 7
    first, redo = lg.get_run(conn, 1), lg.get_run(conn, 2)
    assert first is not None and redo is not None
    assert (first.instrument, first.provenance, first.decision, first.superseded_by) == (
        "ftir-1", Provenance("0.1.0+abc", "lib", "set"), "flag", 2)
    assert first.reasons == ("calibration +0.24 cm-1",) and first.result is not None
    assert (redo.reprocessed_from, redo.settings, redo.reasons, redo.superseded_by) == (1, {"species": ["H35Cl"]}, (), None)
    assert tuple(conn.execute("SELECT size_bytes, mtime_ns FROM runs WHERE run_id = 1").fetchone()) == (10, 5)
    assert lg.latest_stat_by_path(conn, "ftir-1") == {}  # the newest version (the redo) has no stat of its own
    assert [(p.run_id, p.decision) for p in lg.trend(conn, "H35Cl", "origin", "1-0")] == []  # the newest version failed
    # the journal goes on from where it was; new ids follow the old; record keys stay unique
    assert lg.change_cursor(conn) == before
    again = lg.record_run(conn, "/exp/a.csv", "cd", "processed", result=_result(), instrument="ftir-1", record_key="key-1")
    assert again.run_id == 1  # the key already recorded: nothing written
    newer = lg.record_run(conn, "/exp/a.csv", "cd", "processed", result=_result(), instrument="ftir-1", record_key="key-3")
    assert (newer.run_id, newer.version) == (3, 3) and lg.get_run(conn, 3).reasons == newer.reasons  # type: ignore[union-attr]
    assert lg.changes_after(conn, before) == (before + 1, [1, 2, 3])  # version 3 replaces 1 and 2
    with pytest.raises(RULE_BROKEN, match="append-only"):
        conn.execute("UPDATE decisions SET reason = 'changed'")
    if lg.dialect(conn) == "sqlite":  # the stored result stays the last column (listings never read it)
        columns = [row[1] for row in conn.execute("PRAGMA table_info(runs)")]
        assert columns[-2:] == ["reasons_json", "result_json"]
        assert conn.execute("PRAGMA foreign_key_check").fetchall() == []
        assert conn.execute("SELECT seq FROM sqlite_sequence WHERE name = 'runs'").fetchone()[0] == 3


def test_ledger_from_a_newer_bandwatch_is_refused(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    set_schema_version(conn, lg.SCHEMA_VERSION + 1)
    conn.close()
    for read_only in (False, True):
        with pytest.raises(lg.LedgerError, match="newer") as refused:
            lg.open_ledger(ledger_at, read_only=read_only)
        assert "\n" not in str(refused.value) and str(lg.SCHEMA_VERSION + 1) in str(refused.value)


def test_reader_connection_reads_while_a_writer_writes(ledger_at: str | Path) -> None:
    writer_conn = lg.open_ledger(ledger_at)
    reader_conn = lg.open_ledger(ledger_at)
    stop = threading.Event()
    errors: list[BaseException] = []

    def write() -> None:
        conn = lg.open_ledger(ledger_at)  # each thread its own connection
        try:
            for index in range(200):
                lg.record_run(conn, f"/exp/{index}.csv", f"{index:064d}", "processed", result=_result())
        except BaseException as error:  # reported to the test thread below
            errors.append(error)
        finally:
            stop.set()

    thread = threading.Thread(target=write)
    thread.start()
    counts = []
    while not stop.is_set():
        counts.append(len(lg.list_runs(reader_conn, with_result=False)))
    thread.join()
    assert not errors
    assert counts == sorted(counts)  # a reader never sees rows vanish
    assert len(lg.list_runs(writer_conn)) == 200


def test_run_columns_hold_what_the_listed_records_hold(ledger_at: str | Path) -> None:
    """`list_run_columns` (what `bandwatch ledger list` prints, column by column) gives, run by
    run, the fields `list_runs` gives: ids, versions, decisions in effect (an undo reverts),
    the newer version that replaces a run, reasons, errors, an undecodable name; with and
    without a limit, for one instrument, and newest versions only."""
    conn = lg.open_ledger(ledger_at)
    first = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(), instrument="ftir-1")
    lg.record_run(conn, "/exp/b.csv", "2" * 64, "unreadable", error="empty", instrument="ftir-1")
    newest = lg.record_run(conn, "/exp/a.csv", "3" * 64, "processed", result=_result(), instrument="ftir-1")
    lg.record_run(conn, "/exp/a.csv", "4" * 64, "processed", result=_result(), instrument="ftir-2")
    odd = lg.record_run(conn, os.fsdecode(b"/exp/\xff.csv"), "5" * 64, "processed", result=_result(), instrument="ftir-2")
    lg.record_decision(conn, first.run_id, "flag", "odd", "ana")
    lg.record_decision(conn, newest.run_id, "accept", "", "bo")
    lg.record_decision(conn, odd.run_id, "accept", "", "bo")
    lg.undo_last_decision(conn, odd.run_id, "bo")
    fields = ("run_id", "instrument", "version", "status", "verdict", "decision", "superseded_by", "processed_at",
              "path", "reasons", "error")
    for options in ({}, {"limit": 3}, {"instrument": "ftir-1"}, {"latest_only": True}, {"limit": 2, "instrument": "ftir-2"}):
        records = lg.list_runs(conn, with_result=False, **options)  # type: ignore[arg-type]
        columns = lg.list_run_columns(conn, **options)  # type: ignore[arg-type]
        assert len(columns) == len(records) > 0, options
        for name in fields:
            assert list(getattr(columns, name)) == [getattr(r, name) for r in records], (options, name)
        assert list(columns.species) == [",".join(r.species) for r in records]
    columns = lg.list_run_columns(conn)
    by_id = dict(zip(columns.run_id, zip(columns.decision, columns.superseded_by)))
    assert by_id[first.run_id] == ("flag", newest.run_id)
    assert by_id[newest.run_id] == ("accept", None) and by_id[odd.run_id] == (None, None)
    assert os.fsencode(columns.path[columns.run_id.index(odd.run_id)]) == b"/exp/\xff.csv"


def test_numpy_values_in_a_result_are_stored_as_plain_json(ledger_at: str | Path) -> None:
    import json

    import numpy as np
    from dataclasses import replace

    conn = lg.open_ledger(ledger_at)
    result = replace(_result(), timing_ms={"fit": np.float64(1.5)}, species_found=("H35Cl",))
    run = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=result)
    stored = conn.execute("SELECT result_json FROM runs WHERE run_id = ?", (run.run_id,)).fetchone()[0]
    assert json.loads(stored)["timing_ms"] == {"fit": 1.5}
    assert lg.get_run(conn, run.run_id).result.timing_ms == {"fit": 1.5}


def test_listed_records_equal_the_ones_read_one_by_one(ledger_at: str | Path) -> None:
    """A listing builds its records field by field (speed); each must equal the record
    `get_run` builds for the same run: decisions, provenance, reasons, settings and which
    newer version replaces it, with and without a limit (two ways of finding that version)."""
    from dataclasses import fields, replace

    from processing.results import Check

    conn = lg.open_ledger(ledger_at)
    shifted = Check("calibration", "warn", "wavenumber calibration offset: offset +0.240 +- 0.005 cm-1", 0.24)
    made_with = Provenance("0.1.0+abc", "lib", "set")
    first = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=replace(_result(), checks=(shifted,)),
                          instrument="ftir-1", provenance=made_with)
    lg.record_run(conn, "/exp/b.csv", "2" * 64, "unreadable", error="empty", instrument="ftir-1")
    redo = lg.record_reprocessed(conn, first.run_id, _result(), {"species": ["H35Cl"]})
    newest = lg.record_run(conn, "/exp/a.csv", "3" * 64, "processed", result=_result(), instrument="ftir-1")
    lg.record_run(conn, "/exp/a.csv", "4" * 64, "processed", result=_result(), instrument="ftir-2")
    lg.record_decision(conn, first.run_id, "flag", "odd", "ana")
    lg.record_decision(conn, newest.run_id, "accept", "", "bo")
    names = [field.name for field in fields(lg.RunRecord)]
    for listing in (lg.list_runs(conn, with_result=False), lg.list_runs(conn, 10, with_result=False),
                    lg.list_runs(conn, with_result=False, instrument="ftir-1")):
        for record in listing:
            assert list(record.__dict__) == names or sorted(record.__dict__) == sorted(names)
            assert record == lg.get_run(conn, record.run_id, with_result=False), record.run_id
    by_id = {r.run_id: r for r in lg.list_runs(conn, with_result=False)}
    assert by_id[first.run_id].superseded_by == by_id[redo.run_id].superseded_by == newest.run_id
    assert by_id[newest.run_id].superseded_by is None  # the same path on another instrument is another file
    assert by_id[first.run_id].reasons == ("calibration +0.24 cm-1",) and by_id[first.run_id].provenance == made_with
    assert (by_id[first.run_id].decision, by_id[newest.run_id].operator) == ("flag", "bo")
    assert [r.superseded_by for r in lg.list_runs(conn, latest_only=True, with_result=False)] == [None, None, None]


def test_a_run_recorded_from_its_digest_is_stored_as_from_its_result(ledger_at: str | Path) -> None:
    """A station's worker sends a result's JSON and digest (`run_digest`); the station records
    from them without the result object. The ledger must hold the same row, reasons and
    quantities as when recorded from the result; a digest without the JSON is refused."""
    from dataclasses import replace

    from processing.results import Check, to_json
    from processing.run_digest import digest_of

    shifted = Check("calibration", "warn", "wavenumber calibration offset: offset +0.240 +- 0.005 cm-1", 0.24)
    result = replace(_result("warn"), checks=(shifted,))
    conn = lg.open_ledger(ledger_at)
    by_result = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=result, processed_at="2026-03-05T09:15:00.000Z")
    by_digest = lg.record_run(conn, "/exp/b.csv", "1" * 64, "processed", digest=digest_of(result),
                              result_json=to_json(result), processed_at="2026-03-05T09:15:00.000Z")
    columns = "status, verdict, species, reasons_json, result_json, error"
    rows = [tuple(conn.execute(f"SELECT {columns} FROM runs WHERE run_id = ?", (run.run_id,)).fetchone())
            for run in (by_result, by_digest)]
    assert rows[0] == rows[1] and rows[0][1] == "warn" and "calibration" in rows[0][3]
    quantities = [[tuple(row) for row in conn.execute(
        "SELECT isotopologue, band, quantity, value, sigma, unit FROM quantities WHERE run_id = ? ORDER BY isotopologue, band, quantity",
        (run.run_id,)).fetchall()] for run in (by_result, by_digest)]
    assert quantities[0] == quantities[1] and len(quantities[0]) >= 4  # origin, B', B'' of the band; B_e
    assert by_digest.reasons == by_result.reasons and by_digest.species == by_result.species
    with pytest.raises(ValueError):
        lg.record_run(conn, "/exp/c.csv", None, "processed", digest=digest_of(result))
