"""What each version was made with, and the reads `bandwatch reprocess` makes of the ledger
(`latest_versions`, `quantity_changes`; the paged query is in tests/reprocess), on both
backends: keyed by instrument + path like every other read, the same answers from the file and
the server. The server's glob is checked against SQLite's GLOB, the reference it stands in for."""
from __future__ import annotations

import os
import sqlite3
from pathlib import Path

import pytest

from processing.estimate import Estimate
from processing.provenance import Provenance
from processing.results import Band, RunResult
from processing.station import ledger as lg
from processing.station import ledger_postgres

BEFORE = Provenance("0.1.0+before", "library-1", "settings-1")
TODAY = Provenance("0.1.0+today", "library-1", "settings-1")
REQUESTED = Provenance("0.1.0+today", "library-1", "settings-2")  # today's analysis with a redo request


def _result(origin: float) -> RunResult:
    # H35Cl 1-0 band origin and rotational constants of the right size (Huber & Herzberg 1979
    # via NIST WebBook, recalled from memory); the origin is what the tests move
    band = Band("H35Cl", 1, 0, 12, 0.003, Estimate(origin, 0.002), Estimate(10.1365, 0.0004), Estimate(10.4398, 0.0004))
    return RunResult("x.csv", "processed", "a" * 64, bands=(band,), verdict="pass")


def test_each_version_keeps_what_it_was_made_with(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    made = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(2885.98), instrument="i",
                         provenance=TODAY)
    unknown = lg.record_run(conn, "/exp/b.csv", None, "unreadable", error="bad", instrument="i")
    assert made.provenance == TODAY and unknown.provenance is None
    assert lg.get_run(conn, made.run_id).provenance == TODAY
    assert {r.run_id: r.provenance for r in lg.list_runs(conn)} == {made.run_id: TODAY, unknown.run_id: None}
    assert lg.latest_run_for_path(conn, "/exp/a.csv", "i").provenance == TODAY
    redo = lg.record_reprocessed(conn, made.run_id, _result(2885.97), {"species": ["H35Cl"]}, provenance=REQUESTED)
    assert (redo.instrument, redo.version, redo.provenance) == ("i", 2, REQUESTED)
    assert lg.get_run(conn, redo.run_id).provenance == REQUESTED


def test_latest_versions_are_those_of_one_instrument(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)
    odd = os.fsdecode(b"/exp/r\xe9sum\xe9.csv")  # Latin-1 bytes: not UTF-8
    a1 = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(2885.98), instrument="ftir-a",
                       size_bytes=100, mtime_ns=7, provenance=BEFORE)
    b1 = lg.record_run(conn, "/exp/a.csv", "2" * 64, "failed", error="timeout", instrument="ftir-b")
    a2 = lg.record_run(conn, "/exp/a.csv", "1" * 64, "processed", result=_result(2885.98), instrument="ftir-a",
                       reprocessed_from=a1.run_id, provenance=TODAY)
    lg.record_run(conn, odd, "3" * 64, "unreadable", error="bad", instrument="ftir-a")
    paths = ["/exp/a.csv", odd, "/exp/never.csv"]
    on_a = lg.latest_versions(conn, paths, "ftir-a")
    assert set(on_a) == {"/exp/a.csv", odd}
    newest = on_a["/exp/a.csv"]
    assert (newest.run_id, newest.instrument, newest.provenance, newest.sha256) == (a2.run_id, "ftir-a", TODAY, "1" * 64)
    assert (newest.status, newest.verdict, newest.request_json) == ("processed", "pass", None)
    on_b = lg.latest_versions(conn, paths, "ftir-b")
    assert list(on_b) == ["/exp/a.csv"] and (on_b["/exp/a.csv"].run_id, on_b["/exp/a.csv"].status) == (b1.run_id, "failed")
    assert lg.latest_versions(conn, paths) == {}  # instrument "": none recorded there
    many = [f"/exp/{index}.csv" for index in range(lg.LATEST_BATCH + 3)] + ["/exp/a.csv"]  # more than one query
    assert list(lg.latest_versions(conn, many, "ftir-a")) == ["/exp/a.csv"]


def test_quantity_changes_compare_a_reprocessed_version_with_the_one_it_came_from(ledger_at: str | Path) -> None:
    conn = lg.open_ledger(ledger_at)

    def version(path: str, origin: float, made: Provenance, instrument: str = "ftir-a", came_from: int | None = None,
                request: dict[str, object] | None = None) -> int:
        return lg.record_run(conn, path, "1" * 64, "processed", result=_result(origin), instrument=instrument,
                             provenance=made, reprocessed_from=came_from, settings=request).run_id

    # the same file name on two instruments: two files, each compared with its own old version
    version("/exp/a.csv", 2885.98, TODAY, came_from=version("/exp/a.csv", 2885.97, BEFORE))
    version("/exp/a.csv", 2885.95, TODAY, "ftir-b", came_from=version("/exp/a.csv", 2885.90, BEFORE, "ftir-b"))
    # an operator's redo request carried over: compared with the version made with that request
    request = {"species": ["H35Cl"]}
    version("/exp/b.csv", 2886.00, REQUESTED, came_from=version("/exp/b.csv", 2885.98, BEFORE, request=request),
            request=request)
    # not compared: a request the old version did not have, another analysis, not the newest version
    version("/exp/c.csv", 2886.50, REQUESTED, came_from=version("/exp/c.csv", 2885.00, BEFORE), request=request)
    version("/exp/d.csv", 2886.50, Provenance("0.0.9+other", "library-1", "settings-1"),
            came_from=version("/exp/d.csv", 2885.00, BEFORE))
    superseded = version("/exp/e.csv", 2886.50, TODAY, came_from=version("/exp/e.csv", 2885.00, BEFORE))
    version("/exp/e.csv", 2886.50, BEFORE, came_from=superseded)
    changes = list(lg.quantity_changes(conn, TODAY))
    origins = sorted(change[4] for change in changes if change[2] == "origin")
    assert origins == pytest.approx([0.01, 0.02, 0.05], abs=1e-9)
    assert {change[:2] for change in changes} == {("H35Cl", "1-0")}
    assert {change[3] for change in changes if change[2] == "origin"} == {"cm-1"}
    # ordered by isotopologue, band and quantity (byte order) on both backends
    assert [change[:3] for change in changes] == sorted(change[:3] for change in changes)
    assert list(lg.quantity_changes(conn, Provenance("9.9.9+none", "x", "y"))) == []


# SQLite's GLOB is the reference; names and patterns cover every special character of both
NAMES = (
    "/data/ftir-2/run1.csv", "/data/ftir-2/sub/run2.JDX", "/data/ftir-12/run3.csv", "/data/a.b+c(d)|e$^{1}.csv",
    "/data/[x].csv", "/data/x.csv", "/data/-.csv", "/data/\\back.csv", "/data/ümlaut.csv", "/data/Run1.csv",
    "/data/ ", "/data/]", "/data/^",
)
PATTERNS = (
    "/data/ftir-2/*", "*.csv", "/data/ftir-?/*", "/data/ftir-[12]/*", "/data/ftir-[^2]*", "/data/*/run?.*",
    "/data/a.b+c(d)|e$^{1}.csv", "/data/a?b?c?d??e???1?.csv", "/data/[[]x].csv", "/data/[]x]*", "/data/[a-z].csv",
    "/data/[^a-z].csv", "/data/\\back.csv", "/data/[\\]back.csv", "/data/ü*", "/data/run1.csv", "/data/ ", "/data/[",
    "/data/[]]", "/data/[-].csv", "/data/[x-].csv", "/data/^", "/data/.*", "*", "",
)


def test_the_servers_glob_matches_what_sqlites_glob_matches(pg_url: str) -> None:
    reference = sqlite3.connect(":memory:")
    server = ledger_postgres.connect(pg_url)
    try:
        for pattern in PATTERNS:
            regex = lg.glob_regex(pattern)
            for name in NAMES:
                expected = bool(reference.execute("SELECT ? GLOB ?", (name, pattern)).fetchone()[0])
                if regex is None:
                    found = False
                else:
                    found = bool(server.execute("SELECT CAST(? AS TEXT) ~ CAST(? AS TEXT)", (name, regex)).fetchone()[0])
                assert found == expected, (pattern, name, regex)
    finally:
        server.close()
        reference.close()
