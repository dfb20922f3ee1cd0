"""`bandwatch ledger list` made in two processes (`processing.listing_halves`) must print exactly
the table one process prints: same widths, same order, decisions, replaced versions whose newer
version is in the other half, errors, outside text escaped; and nothing may be lost when the
second process fails."""
from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path

import pytest

from processing import listing_halves
from processing.listing_table import listing_table
from processing.results import Check
from processing.station import ledger as lg

from test_station_ledger import _result


def _fill(conn: lg.Connection, instruments: tuple[str, str]) -> None:
    """60 runs: files with versions far apart in run id (so a run's newer version is in the
    other half), decisions with an undo, failed and unreadable runs, a reason with a non-ASCII
    sign, a hostile file name, runs of two instruments."""
    shifted = Check("calibration", "warn", "wavenumber calibration offset: offset +0.240 +- 0.005 cm-1", 0.24)
    warned = replace(_result("warn"), checks=(shifted,))
    for i in range(60):
        instrument = instruments[i % 3 == 0]
        path = f"/exp/day1/run{i % 25:03d}.csv" if i % 5 else f"/exp/odd\x1b[2J{i}.csv"
        if i % 11 == 4:
            lg.record_run(conn, path, f"{i:064x}", "failed", error=f"{path}: no spectrum in it", instrument=instrument)
        elif i % 13 == 6:
            lg.record_run(conn, path, None, "unreadable", error="file is empty", instrument=instrument)
        else:
            lg.record_run(conn, path, f"{i:064x}", "processed", result=warned if i % 4 else _result(),
                          instrument=instrument, processed_at=f"2026-03-{1 + i % 28:02d}T{i % 24:02d}:{i:02d}:07.250Z")
    runs = lg.list_runs(conn, with_result=False)
    lg.record_decision(conn, runs[3].run_id, "accept", "", "ana")
    lg.record_decision(conn, runs[40].run_id, "flag", "odd baseline", "bo")
    lg.record_decision(conn, runs[41].run_id, "accept", "", "bo")
    lg.undo_last_decision(conn, runs[41].run_id, "bo")
    lg.record_decision(conn, runs[50].run_id, "flag", "x", "bo")
    lg.record_decision(conn, runs[50].run_id, "accept", "", "bo")
    lg.undo_last_decision(conn, runs[50].run_id, "bo")


def _in_halves(where: str | Path, conn: lg.Connection, tmp_path: Path, by_two: bool = True, **options: object) -> str:
    out_path = tmp_path / "listing.txt"
    with open(out_path, "w", encoding="utf-8") as out:  # a real file: the child writes to it too
        span = listing_halves.can_split(conn, options.get("instrument"), out)  # type: ignore[arg-type]
        assert span is not None
        assert listing_halves.write_in_halves(str(where), conn, span, out, **options) == by_two  # type: ignore[arg-type]
    return out_path.read_text(encoding="utf-8")


@pytest.mark.parametrize("instruments", [("ftir-1", "ftir-2"), ("", "")])
def test_two_halves_print_the_table_one_process_prints(ledger_at: str | Path, tmp_path: Path,
                                                        monkeypatch: pytest.MonkeyPatch, instruments: tuple[str, str]) -> None:
    monkeypatch.setattr(listing_halves, "SPLIT_FROM_RUNS", 2)
    conn = lg.open_ledger(ledger_at)
    _fill(conn, instruments)
    runs = lg.list_run_columns(conn)
    assert len(runs.replaced) > 10 and runs.decided  # versions replaced across the halves; decisions
    middle = (min(runs.run_id) + max(runs.run_id)) // 2
    assert any(run <= middle < newer for run, newer in runs.replaced.items())
    for options in ({}, {"latest_only": True}, {"instrument": instruments[0]}):
        one = listing_table(lg.list_run_columns(conn, **options), width=None) + "\n"  # type: ignore[arg-type]
        assert _in_halves(ledger_at, conn, tmp_path, **options) == one, options
        assert one.count("\n") == 2 + len(lg.list_runs(conn, with_result=False, **options))  # type: ignore[arg-type]
    assert "\\x1b[2J" in one and "\x1b" not in one  # the hostile name escaped in both
    assert ("instrument" in one.splitlines()[0]) == bool(instruments[0])


def test_when_the_second_process_fails_the_first_makes_its_half(ledger_at: str | Path, tmp_path: Path,
                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(listing_halves, "SPLIT_FROM_RUNS", 2)
    conn = lg.open_ledger(ledger_at)
    _fill(conn, ("ftir-1", "ftir-2"))
    one = listing_table(lg.list_run_columns(conn), width=None) + "\n"

    def unreachable(*args: object, **kwargs: object) -> lg.Connection:
        raise lg.LedgerUnavailable("ledger server unreachable")

    monkeypatch.setattr(lg, "open_ledger", unreachable)  # the child's own connection fails
    assert _in_halves(ledger_at, conn, tmp_path, by_two=False) == one


def test_a_short_or_empty_ledger_or_a_capture_is_listed_by_one_process(ledger_at: str | Path, tmp_path: Path,
                                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    import io

    conn = lg.open_ledger(ledger_at)
    with open(tmp_path / "out.txt", "w") as out:
        assert listing_halves.can_split(conn, None, out) is None  # empty
        _fill(conn, ("ftir-1", "ftir-2"))
        assert listing_halves.can_split(conn, None, out) is None  # 60 runs: below SPLIT_FROM_RUNS
        monkeypatch.setattr(listing_halves, "SPLIT_FROM_RUNS", 2)
        assert listing_halves.can_split(conn, None, out) is not None
        assert listing_halves.can_split(conn, "no-such-instrument", out) is None
        monkeypatch.setenv(listing_halves.ONE_PROCESS_VARIABLE, "1")
        assert listing_halves.can_split(conn, None, out) is None  # asked for one process
    assert listing_halves.can_split(conn, None, io.StringIO()) is None  # a child could not write into it


def test_parts_of_a_listing_hold_the_whole_listings_runs(ledger_at: str | Path) -> None:
    """`list_run_columns` of two run-id ranges with `whole_listing`, put together, holds what
    the whole listing holds: a part's replaced runs and decisions come from the whole."""
    conn = lg.open_ledger(ledger_at)
    _fill(conn, ("ftir-1", "ftir-2"))
    for options in ({}, {"latest_only": True}, {"instrument": "ftir-2"}):
        whole = lg.list_run_columns(conn, **options)  # type: ignore[arg-type]
        facts = lg.whole_listing(conn, **options)  # type: ignore[arg-type]
        middle = (min(whole.run_id) + max(whole.run_id)) // 2
        newer = lg.list_run_columns(conn, part=((middle + 1, 10**9), facts), **options)  # type: ignore[arg-type]
        older = lg.list_run_columns(conn, part=((0, middle), facts), **options)  # type: ignore[arg-type]
        for name in ("run_id", "instrument", "version", "status", "verdict", "decision", "superseded_by", "species",
                     "processed_at", "path", "reasons", "error"):
            assert getattr(newer, name) + getattr(older, name) == getattr(whole, name), (options, name)


def test_a_reader_that_goes_away_ends_the_listing_quietly(tmp_path: Path) -> None:
    """`bandwatch ledger list | head -1`: the child finds the pipe closed when its turn comes;
    the command ends without a message, as a listing by one process does."""
    import subprocess
    import sys

    data = tmp_path / "data"
    conn = lg.open_ledger(data)
    _fill(conn, ("ftir-1", "ftir-2"))
    conn.execute("UPDATE sqlite_sequence SET seq = 40000 WHERE name = 'runs'")  # run ids that span a split
    conn.commit()
    _fill(conn, ("ftir-1", "ftir-2"))
    conn.close()
    command = [sys.executable, "-m", "tui", "ledger", "list", "--data", str(data)]
    env = dict(os.environ, BANDWATCH_CONFIG=str(tmp_path / "none.toml"))
    env.pop("COLUMNS", None)
    whole = subprocess.run(command, capture_output=True, text=True, env=env, check=True).stdout
    assert whole.count("\n") == 122 and "\n40001 " in whole and "\n1 " in whole  # both halves, in order
    with subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env) as process:
        assert process.stdout is not None and process.stderr is not None
        assert process.stdout.readline().startswith(b"run ")
        process.stdout.close()
        assert process.wait(timeout=60) == 0
        assert process.stderr.read() == b""
