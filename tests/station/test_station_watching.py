"""How files reach the station: native events, polling, the periodic rescan; reprocessing."""
from __future__ import annotations

import time
from pathlib import Path

import pytest
from station_files import spectrum_csv, write_file

from processing.station import ledger
from processing.station.redo import RedoRequest
from processing.station import station as station_module
from processing.station.events import RunProcessed


def _names(data: Path) -> list[str]:
    conn = ledger.open_ledger(data)
    try:
        return sorted(Path(r.path).name for r in ledger.list_runs(conn))
    finally:
        conn.close()


class _DeafObserver:
    """An observer whose events never arrive (as on a share without notifications)."""

    emitters = ()

    def is_alive(self) -> bool:
        return True

    def stop(self) -> None:
        pass

    def join(self, timeout: float | None = None) -> None:
        pass


def test_rescan_catches_files_whose_events_never_arrive(make_station, folders, monkeypatch) -> None:
    export, data = folders
    monkeypatch.setattr(station_module, "start_observer", lambda *args, **kwargs: (_DeafObserver(), "native"))
    station, _ = make_station(rescan_seconds=0.3)
    station.start()
    assert station.wait_idle(10)
    write_file(export / "missed.csv", spectrum_csv(150))
    deadline = time.monotonic() + 10
    while not _names(data) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert _names(data) == ["missed.csv"]


def test_polling_observer_when_asked(make_station, folders) -> None:
    export, data = folders
    station, events = make_station(poll=True, rescan_seconds=60.0)  # only the poller can see it
    station.start()
    assert station.observer_kind == "polling"
    time.sleep(0.2)
    write_file(export / "polled.csv", spectrum_csv(150))
    deadline = time.monotonic() + 10
    while not any(isinstance(e, RunProcessed) for e in events) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert _names(data) == ["polled.csv"]


def test_folder_moved_in_is_taken_when_recursive(make_station, folders, tmp_path: Path) -> None:
    export, data = folders
    station, _ = make_station(recursive=True, rescan_seconds=60.0)
    station.start()
    assert station.wait_idle(10)
    outside = tmp_path / "batch"
    outside.mkdir()
    write_file(outside / "one.csv", spectrum_csv(120))
    write_file(outside / "two.csv", spectrum_csv(130))
    outside.rename(export / "batch")  # one "moved" event for the folder, none for its files
    time.sleep(0.1)
    assert station.wait_idle(10)
    assert _names(data) == ["one.csv", "two.csv"]


def test_reprocess_through_the_pool_records_a_new_version_with_its_settings(make_station, folders) -> None:
    export, data = folders
    station, _ = make_station()
    station.start()
    write_file(export / "a.csv", spectrum_csv(200))
    assert station.wait_idle(10)
    conn = ledger.open_ledger(data)
    [first] = ledger.list_runs(conn)
    new_run_id = station.reprocess(first.run_id, RedoRequest(threshold_sigma=8.0), timeout=20)
    assert new_run_id is not None and new_run_id != first.run_id
    again = ledger.get_run(conn, new_run_id)
    assert (again.path, again.version, again.reprocessed_from) == (first.path, 2, first.run_id)
    assert again.settings == {"threshold_sigma": 8.0} and again.status == "processed"
    assert (data / "reports" / f"{new_run_id}-a" / "result.json").exists()
    with pytest.raises(ledger.LedgerError, match="no run 999"):
        station.reprocess(999, RedoRequest())
