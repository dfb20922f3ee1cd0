"""Shared helpers for the station tests: folders, small spectra written with plain Python."""
from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

from processing.station.config import StationConfig
from processing.station.events import StationEvent
from processing.station.station import Station

from station_files import HERE, spectrum_csv, write_file  # noqa: F401  (re-exported for fixtures)


@pytest.fixture()
def folders(tmp_path: Path) -> tuple[Path, Path]:
    export = tmp_path / "export"
    data = tmp_path / "data"
    export.mkdir()
    return export, data


@pytest.fixture()
def make_station(folders: tuple[Path, Path]) -> Iterator[Callable[..., tuple[Station, list[StationEvent]]]]:
    """Build a station on the test folders with short settle times; stopped at the end."""
    started: list[Station] = []

    def build(**overrides: object) -> tuple[Station, list[StationEvent]]:
        export, data = folders
        values: dict[str, object] = dict(
            export_folder=export, data_folder=data, settle_seconds=0.1, workers=1,
            rescan_seconds=5.0, timeout_seconds=20.0,
        )
        values.update(overrides)
        events: list[StationEvent] = []
        station = Station(StationConfig(**values), on_event=events.append)  # type: ignore[arg-type]
        started.append(station)
        return station, events

    yield build
    for station in started:
        station.stop()

