"""Ledger: runs, versions, claims, append-only decisions, trends, migrations, WAL readers."""
from __future__ import annotations

import sqlite3
import threading
from pathlib import Path

import pytest

from processing.estimate import Estimate
from processing.results import Band, IsotopologueConstants, RunResult
from processing.station import ledger as lg


def _result(verdict: str = "pass", origin: float = 2885.98, b_e: float = 10.5934, v_upper: int = 1) -> RunResult:
    # H35Cl 1-0 origin and B_e of the right size (Huber & Herzberg 1979 via NIST WebBook, recalled)
    band = Band("H35Cl", v_upper, 0, 12, 0.003, Estimate(origin, 0.002), Estimate(10.1365, 0.0004), Estimate(10.4398, 0.0004))
    constants = IsotopologueConstants("H35Cl", 12, (0, 1), 0.003, {"B_e": Estimate(b_e, None)}, {}, {}, {}, (), {}, {}, ())
    return RunResult("x.csv", "processed", "a" * 64, bands=(band,), constants=(constants,), verdict=verdict)


def test_open_creates_wal_ledger_at_current_schema(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path / "data")
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert lg.schema_version(conn) == lg.SCHEMA_VERSION == 5
    assert lg.list_runs(conn) == []


def test_record_run_versions_per_path_and_lists_newest_first(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path)
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


def test_claim_is_dropped_in_the_same_transaction_as_the_run(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path)
    claim = lg.claim_file(conn, "/exp/a.csv", "1" * 64, owner_pid=123)
    assert [c.path for c in lg.list_claims(conn)] == ["/exp/a.csv"]
    lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(), claim_id=claim.claim_id)
    assert lg.list_claims(conn) == []
    assert lg.latest_stat_by_path(conn) == {}  # old runs have no stat: re-read once, then known


def test_decisions_are_append_only_with_undo(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path)
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
    # the trail cannot be rewritten, even with raw SQL
    with pytest.raises(sqlite3.IntegrityError, match="append-only"):
        conn.execute("UPDATE decisions SET action = 'accept'")
    with pytest.raises(sqlite3.IntegrityError, match="append-only"):
        conn.execute("DELETE FROM decisions")
    with pytest.raises(ValueError):
        lg.record_decision(conn, run.run_id, "undo", "", "ana")
    with pytest.raises(lg.LedgerError):
        lg.record_decision(conn, 999, "accept", "", "ana")


def test_current_decision_listed_per_run(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path)
    a = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result())
    b = lg.record_run(conn, "/exp/b.csv", "2" * 64, "processed", result=_result())
    lg.record_decision(conn, a.run_id, "flag", "odd", "ana")
    lg.record_decision(conn, b.run_id, "accept", "", "ana")
    decisions = {r.run_id: r.decision for r in lg.list_runs(conn)}
    assert decisions == {a.run_id: "flag", b.run_id: "accept"}
    assert {r.run_id: r.decision for r in lg.list_runs(conn, limit=1)} == {b.run_id: "accept"}


def test_reprocessed_is_a_new_version_with_its_settings(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path)
    run = lg.record_run(conn, "/exp/a.csv", "a" * 64, "processed", result=_result())
    again = lg.record_reprocessed(conn, run.run_id, _result("warn"), {"species": ["H35Cl"]})
    # the sha256 is the one the reprocessing read (same file content here)
    assert (again.path, again.version, again.sha256) == ("/exp/a.csv", 2, "a" * 64)
    assert again.settings == {"species": ["H35Cl"]} and again.reprocessed_from == run.run_id
    assert again.verdict == "warn"


def test_trend_reads_band_and_molecular_constants_oldest_first(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path)
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


def test_migration_fills_the_quantities_of_runs_recorded_before(tmp_path: Path) -> None:
    from processing.results import to_json

    path = tmp_path / lg.LEDGER_FILE
    old = sqlite3.connect(path, isolation_level=None)
    for script in lg.MIGRATIONS[:3]:
        for statement in lg._statements(script):
            old.execute(statement)
    old.execute("PRAGMA user_version = 3")
    for index, origin in enumerate((2885.97, 2885.99)):
        old.execute(
            "INSERT INTO runs (path, sha256, version, status, verdict, species, result_json, error, received_at, processed_at)"
            " VALUES (?, 'ab', 1, 'processed', 'pass', 'H35Cl', ?, NULL, ?, ?)",
            (f"/exp/{index}.csv", to_json(_result(origin=origin)), f"2026-01-0{index + 1}T00:00:00Z", f"2026-01-0{index + 1}T00:00:01Z"),
        )
    old.execute(
        "INSERT INTO runs (path, sha256, version, status, verdict, species, result_json, error, received_at, processed_at)"
        " VALUES ('/exp/bad.csv', 'cd', 1, 'processed', 'pass', '', '{\"schema\": 7}', NULL, '2026-01-03T00:00:00Z', NULL)"
    )
    old.close()
    conn = lg.open_ledger(tmp_path)
    assert lg.schema_version(conn) == lg.SCHEMA_VERSION
    assert [p.value for p in lg.trend(conn, "H35Cl", "origin", "1-0")] == [2885.97, 2885.99]


@pytest.mark.parametrize("old_version", [1, 2, 3])
def test_migration_from_an_older_schema_keeps_runs_and_decisions(tmp_path: Path, old_version: int) -> None:
    path = tmp_path / lg.LEDGER_FILE
    old = sqlite3.connect(path, isolation_level=None)
    for script in lg.MIGRATIONS[:old_version]:
        for statement in lg._statements(script):
            old.execute(statement)
    old.execute(f"PRAGMA user_version = {old_version}")
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
    conn = lg.open_ledger(tmp_path)
    assert lg.schema_version(conn) == lg.SCHEMA_VERSION
    run = lg.get_run(conn, 1)
    assert (run.path, run.verdict, run.decision, run.species, run.settings) == (
        "/exp/a.csv", "pass", "accept", ("H35Cl",), None,
    )
    assert lg.list_claims(conn) == []


def test_ledger_from_a_newer_bandwatch_is_refused(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path)
    conn.execute(f"PRAGMA user_version = {lg.SCHEMA_VERSION + 1}")
    conn.close()
    with pytest.raises(lg.LedgerError, match="newer"):
        lg.open_ledger(tmp_path)


def test_reader_connection_reads_while_a_writer_writes(tmp_path: Path) -> None:
    writer_conn = lg.open_ledger(tmp_path)
    reader_conn = lg.open_ledger(tmp_path)
    stop = threading.Event()
    errors: list[BaseException] = []

    def write() -> None:
        conn = lg.open_ledger(tmp_path)  # each thread its own connection
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


def test_numpy_values_in_a_result_are_stored_as_plain_json(tmp_path: Path) -> None:
    import json

    import numpy as np
    from dataclasses import replace

    conn = lg.open_ledger(tmp_path)
    result = replace(_result(), timing_ms={"fit": np.float64(1.5)}, species_found=("H35Cl",))
    run = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=result)
    stored = conn.execute("SELECT result_json FROM runs WHERE run_id = ?", (run.run_id,)).fetchone()[0]
    assert json.loads(stored)["timing_ms"] == {"fit": 1.5}
    assert lg.get_run(conn, run.run_id).result.timing_ms == {"fit": 1.5}
