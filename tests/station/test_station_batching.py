"""Several runs recorded in one ledger transaction (a burst's backlog): all or none are in the
ledger, and each run is announced only once it is there."""
from __future__ import annotations

from pathlib import Path

import pytest

from station_files import spectrum_csv, write_file

import processing.station.station as station_module
from processing.station import ledger as lg
from processing.station.config import StationConfig
from processing.station.events import RunProcessed, StationEvent, StationProblem
from processing.station.station import Station
from processing.station.station_ledger import FileLedger

SHA = "0" * 64


def test_runs_recorded_in_one_transaction_are_all_in_or_none(tmp_path: Path) -> None:
    conn = lg.open_ledger(tmp_path)
    other = lg.open_ledger(tmp_path)  # another connection, as the app's
    claims = [lg.claim_file(conn, f"/export/{name}.csv", None, 1, "lab") for name in "abc"]
    with lg.one_transaction(conn):
        for claim in claims[:2]:
            lg.record_run(conn, claim.path, SHA, "unreadable", error="cut off", claim_id=claim.claim_id, instrument="lab")
        assert lg.list_runs(other, with_result=False) == []  # nothing before the commit
    assert sorted(run.name for run in lg.list_runs(other, with_result=False)) == ["a.csv", "b.csv"]
    assert [claim.path for claim in lg.list_claims(other)] == ["/export/c.csv"]  # theirs went with them

    with pytest.raises(ValueError):
        with lg.one_transaction(conn):
            lg.record_run(conn, claims[2].path, SHA, "unreadable", error="x", claim_id=claims[2].claim_id, instrument="lab")
            lg.record_run(conn, "/export/d.csv", SHA, "no such status", instrument="lab")
    assert len(lg.list_runs(other, with_result=False)) == 2  # c rolled back with d's error
    assert [claim.path for claim in lg.list_claims(other)] == ["/export/c.csv"]

    record = lg.record_run(conn, claims[2].path, SHA, "unreadable", error="x", claim_id=claims[2].claim_id, instrument="lab")
    assert lg.get_run(other, record.run_id, with_result=False) is not None  # the connection goes on as before
    assert lg.list_claims(other) == []


def _run_station(folders: tuple[Path, Path]) -> tuple[list[StationEvent], dict[int, bool], lg.Connection]:
    """Run a station on the files already there until it is idle: its events, whether each run
    was readable by another connection when announced, and a connection to read the ledger."""
    export, data = folders
    events: list[StationEvent] = []
    seen: dict[int, bool] = {}

    def on_event(event: StationEvent) -> None:
        events.append(event)
        if isinstance(event, RunProcessed):
            reader = lg.open_ledger(data, read_only=True)
            try:
                seen[event.run_id] = lg.get_run(reader, event.run_id, with_result=False) is not None
            finally:
                reader.close()

    config = StationConfig(export_folder=export, data_folder=data, settle_seconds=0.1, workers=1,
                           rescan_seconds=5.0, timeout_seconds=20.0)
    station = Station(config, on_event=on_event)
    station.start()
    try:
        assert station.wait_idle(60)
    finally:
        station.stop()
    return events, seen, lg.open_ledger(data, read_only=True)


def _count_batches(monkeypatch: pytest.MonkeyPatch) -> list[int]:
    batches: list[int] = []
    original = FileLedger.batch

    def counted(self: FileLedger):  # type: ignore[no-untyped-def]
        batches.append(1)
        return original(self)

    monkeypatch.setattr(FileLedger, "batch", counted)
    monkeypatch.setattr(station_module, "BATCH_WAIT_SECONDS", 1.0)  # the backlog surely shares commits
    return batches


def test_a_backlog_shares_commits_and_each_run_is_in_the_ledger_when_announced(folders, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    batches = _count_batches(monkeypatch)
    export, data = folders
    for index in range(6):  # found at the start: six jobs at once for one worker, a backlog
        write_file(export / f"scan{index}.csv", spectrum_csv(300, centre_cm1=2900.0 + index))
    events, seen, conn = _run_station(folders)
    assert batches, "no outcomes recorded together"
    assert len(seen) == 6 and all(seen.values())
    runs = lg.list_runs(conn, with_result=False)
    assert sorted(run.name for run in runs) == [f"scan{index}.csv" for index in range(6)]
    assert {run.status for run in runs} == {"processed"} and lg.list_claims(conn) == []
    reports = sorted(path.name for path in (data / "reports").iterdir())
    assert reports == sorted(f"{run.run_id}-{Path(run.name).stem}" for run in runs)


def test_an_error_in_a_shared_commit_records_the_others_one_by_one(folders, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    batches = _count_batches(monkeypatch)
    original = FileLedger.record

    def record(self: FileLedger, path: str, *args, **kwargs):  # type: ignore[no-untyped-def]
        if Path(path).name == "bad.csv":
            raise RuntimeError("deliberate failure while recording")
        return original(self, path, *args, **kwargs)

    monkeypatch.setattr(FileLedger, "record", record)
    export, data = folders
    names = ["a.csv", "bad.csv", "c.csv", "d.csv"]
    for index, name in enumerate(names):
        write_file(export / name, spectrum_csv(300, centre_cm1=2900.0 + index))
    events, seen, conn = _run_station(folders)
    assert batches
    assert sorted(run.name for run in lg.list_runs(conn, with_result=False)) == ["a.csv", "c.csv", "d.csv"]
    assert [Path(claim.path).name for claim in lg.list_claims(conn)] == ["bad.csv"]  # redone at the next start
    problems = [event.message for event in events if isinstance(event, StationProblem)]
    assert any("bad.csv" in message and "deliberate failure" in message for message in problems)
    assert len(seen) == 3 and all(seen.values())
