"""`bandwatch demo` headless, and the interface fed by a real in-process station."""
from __future__ import annotations

import asyncio
import shutil
import subprocess
import sys
import time
from pathlib import Path

from processing.station.config import StationConfig
from processing.station.station import Station
from tui.app import BandwatchApp
from tui.widgets.run_tables import RunList

from tui_support import quiet

SAMPLES = Path(__file__).resolve().parents[2] / "sample_runs"
TWO_RUNS = ("0905_hcl_cell.jdx", "1150_empty_cell_export.csv")


def two_samples(folder: Path) -> Path:
    folder.mkdir()
    for name in TWO_RUNS:
        shutil.copy(SAMPLES / name, folder / name)
    return folder


def test_demo_without_a_terminal_prints_events_and_ends_when_all_runs_are_handled(tmp_path: Path) -> None:
    samples = two_samples(tmp_path / "samples")
    completed = subprocess.run(  # no --plain, no --once: no terminal implies both
        [sys.executable, "-m", "tui", "demo", "--interval", "0.2", "--samples", str(samples)],
        capture_output=True, text=True, timeout=120, stdin=subprocess.DEVNULL,
    )
    assert completed.returncode == 0, completed.stderr
    assert "as --plain --once" in completed.stderr
    out = completed.stdout
    assert "demo: 2 run(s) in the ledger" in out
    assert all(name in out for name in TWO_RUNS)
    assert "settled 0905_hcl_cell.jdx" in out  # the station saw it settle after the chunked write
    folder = next(line.split()[-1] for line in out.splitlines() if line.startswith("demo: export folder"))
    assert not Path(folder).exists()  # temporary folders removed without --keep
    assert sorted(p.name for p in samples.iterdir()) == sorted(TWO_RUNS)  # samples untouched


def test_demo_without_samples_is_one_clear_error(tmp_path: Path) -> None:
    completed = subprocess.run(
        [sys.executable, "-m", "tui", "demo", "--plain", "--samples", str(tmp_path)],
        capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL,
    )
    assert completed.returncode == 1
    assert "Traceback" not in completed.stderr
    assert str(tmp_path) in completed.stderr and "no spectrum files" in completed.stderr


async def test_station_events_reach_the_run_list(tmp_path: Path) -> None:
    export, data = tmp_path / "export", tmp_path / "data"
    export.mkdir()
    config = StationConfig(export_folder=export, data_folder=data, settle_seconds=0.2, workers=1)
    app = BandwatchApp(data, export, operator="tester",
                       station_factory=lambda on_event: Station(config, on_event=on_event))
    async with app.run_test(size=(80, 24)) as pilot:
        shutil.copy(SAMPLES / TWO_RUNS[0], export / TWO_RUNS[0])
        table = app.screen.query_one(RunList)
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not table.run_ids:
            await asyncio.sleep(0.2)  # the station works in its own threads and processes
        await quiet(pilot)
        await pilot.pause()
        assert len(table.run_ids) == 1
        assert str(table.get_cell_at((0, table.get_column_index("file")))) == TWO_RUNS[0]
        assert "station running" in str(app.screen.query_one("#title-bar").render())
