"""Shared helpers for the station tests: folders, small spectra written with plain Python."""
from __future__ import annotations

import math
import os
import sys
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

from processing.station.config import StationConfig
from processing.station.events import StationEvent
from processing.station.station import Station

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:  # the hooks module, for in-process and worker imports
    sys.path.insert(0, str(HERE))


def spectrum_csv(points: int = 400, centre_cm1: float = 2906.0, first_cm1: float = 2850.0,
                 last_cm1: float = 2950.0) -> str:
    """A small delimited-text spectrum: flat baseline and one Gaussian absorption line."""
    rows = ["wavenumber,absorbance"]
    step = (last_cm1 - first_cm1) / (points - 1)
    for index in range(points):
        x = first_cm1 + index * step
        y = 0.01 + 0.3 * math.exp(-(((x - centre_cm1) / 0.3) ** 2))
        rows.append(f"{x:.5f},{y:.6f}")
    return "\n".join(rows) + "\n"


def write_file(path: Path, text: str, mtime: float | None = None) -> Path:
    path.write_text(text, encoding="utf-8")
    if mtime is not None:
        os.utime(path, (mtime, mtime))
    return path


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
