"""The local spool of a station whose ledger is on a server: an answer lost after the server
committed is still one run; a station whose server is away starts, keeps its outcomes and says so."""
from __future__ import annotations

import socket
import time
from pathlib import Path

import pytest

from processing.provenance import Provenance
from processing.results import RunResult
from processing.station import ledger as lg
from processing.station import station_ledger
from processing.station.events import LedgerOffline, LedgerOnline, RunProcessed, RunSpooled, StationEvent
from processing.station.spool import Spool

from station_files import spectrum_csv, write_file


def _result(name: str) -> RunResult:
    return RunResult(name, "processed", "ab" * 32, verdict="pass")


def test_an_answer_lost_after_the_commit_is_replayed_into_the_same_run(
    tmp_path: Path, pg_url: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    events: list[StationEvent] = []
    announced: list[int] = []
    store = station_ledger.ServerLedger(pg_url, tmp_path, "ftir-1", events.append)
    store.open()
    store.start(lambda record, result, text: announced.append(record.run_id))
    real = lg.record_run
    lost = {"once": True}

    def commit_then_lose_the_answer(*args: object, **kwargs: object) -> lg.RunRecord:
        record = real(*args, **kwargs)  # type: ignore[arg-type]
        if lost.pop("once", False):
            raise lg.LedgerUnavailable("ledger test: server closed the connection unexpectedly")
        return record

    monkeypatch.setattr(station_ledger.ledger, "record_run", commit_then_lose_the_answer)
    try:
        claim = store.claim("/e/a.csv", "ab" * 32)
        made = Provenance("0.1.0+test", "lib-hash", "settings-hash")
        assert store.record(
            "/e/a.csv", "ab" * 32, "processed", result=_result("a.csv"), claim_id=claim.claim_id, provenance=made,
        ) is None
        assert any(isinstance(e, RunSpooled) for e in events) and any(isinstance(e, LedgerOffline) for e in events)
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline and not any(isinstance(e, LedgerOnline) for e in events):
            time.sleep(0.05)
    finally:
        store.stop()
    conn = lg.open_ledger(pg_url, read_only=True)
    runs = lg.list_runs(conn, with_result=False)
    assert [(r.path, r.version, r.instrument) for r in runs] == [("/e/a.csv", 1, "ftir-1")]  # one run, not two
    assert runs[0].provenance == made  # what it was made with came through the spool
    assert announced == [runs[0].run_id]  # announced once, when the replay settled it
    spool = Spool(tmp_path)
    assert spool.waiting() == 0 and spool.claims() == []
    assert spool.known_for("/e/a.csv") == ("ab" * 32, runs[0].run_id)


def test_a_station_whose_server_is_away_starts_and_keeps_its_outcomes(
    make_station: object, folders: tuple[Path, Path], monkeypatch: pytest.MonkeyPatch
) -> None:
    pytest.importorskip("psycopg")
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    export, data = folders
    station, events = make_station(  # type: ignore[operator]
        ledger_url=f"postgresql://station@127.0.0.1:{port}/bandwatch", instrument="ftir-3",
        process_function="station_hooks:quick",
    )
    write_file(export / "a.csv", spectrum_csv(60))
    write_file(export / "b.csv", spectrum_csv(60, centre_cm1=2890.0))
    station.start()
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and sum(isinstance(e, RunSpooled) for e in events) < 2:
        time.sleep(0.05)
    assert sum(isinstance(e, RunSpooled) for e in events) == 2
    assert not any(isinstance(e, RunProcessed) for e in events)
    offline = [e for e in events if isinstance(e, LedgerOffline)]
    assert len(offline) == 1 and "unreachable" in offline[0].reason
    assert offline[0].plain().startswith("ledger offline: ")
    assert station.spooled == 2 and not station.idle and station.trouble_seconds > 0
    station.stop()
    assert "wait in the local spool" in events[-2].plain()  # said at stop; replayed at the next start
    assert Spool(data).waiting() == 2
    assert not (data / lg.LEDGER_FILE).exists()  # no file ledger made behind the server's back
