"""Transient ledger trouble (a lock held by another writer, a full disk) loses nothing: claims
and records are retried with backoff until they succeed, without a restart; what cannot be
recorded makes `watch --once` fail."""
from __future__ import annotations

import subprocess
import sys
import textwrap
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
from station_files import spectrum_csv, write_file

from processing.station import ledger
from processing.station.events import RunProcessed, StationProblem


def _runs(data: Path) -> list[ledger.RunRecord]:
    conn = ledger.open_ledger(data, read_only=True)
    try:
        return list(reversed(ledger.list_runs(conn)))
    finally:
        conn.close()


def _hold_lock(data: Path, seconds: float) -> subprocess.Popen[str]:
    """Another process holding the ledger's write lock (BEGIN EXCLUSIVE) for `seconds`; returns
    once the lock is taken."""
    script = textwrap.dedent(
        f"""
        import sqlite3, sys, time
        conn = sqlite3.connect({str(ledger.ledger_path(data))!r}, isolation_level=None, timeout=30)
        conn.execute("BEGIN EXCLUSIVE")
        print("locked", flush=True)
        time.sleep({seconds})
        conn.execute("COMMIT")
        """
    )
    holder = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    assert holder.stdout is not None and holder.stdout.readline().strip() == "locked"
    return holder


def _recorded_names(events: list[object]) -> list[str]:
    return sorted(Path(e.path).name for e in events if isinstance(e, RunProcessed))


@pytest.mark.parametrize("busy_timeout_ms, held_seconds", [(500, 3.0)])
def test_files_arriving_while_the_ledger_is_locked_are_recorded_after_release(
    make_station, folders, monkeypatch: pytest.MonkeyPatch, busy_timeout_ms: int, held_seconds: float
) -> None:
    """The lock outlasts the busy timeout (here 0.5 s against 3 s; the same as 10 s against
    15 s in production): claims fail, are retried, and succeed once the lock is gone."""
    monkeypatch.setattr(ledger, "BUSY_TIMEOUT_MS", busy_timeout_ms)
    export, data = folders
    station, events = make_station()
    station.start()
    write_file(export / "before.csv", spectrum_csv(200))
    assert station.wait_idle(20)
    holder = _hold_lock(data, held_seconds)
    try:
        for index in range(3):
            write_file(export / f"during{index}.csv", spectrum_csv(200, centre_cm1=2890.0 + index))
        time.sleep(held_seconds / 2)
        assert _recorded_names(events) == ["before.csv"]  # nothing recorded while locked
        assert any(isinstance(e, StationProblem) and "locked" in e.message for e in events)
    finally:
        holder.wait(timeout=30)
    assert station.wait_idle(30)
    assert _recorded_names(events) == ["before.csv", "during0.csv", "during1.csv", "during2.csv"]
    assert sorted(run.name for run in _runs(data)) == ["before.csv", "during0.csv", "during1.csv", "during2.csv"]


@pytest.mark.slow
def test_a_lock_held_15_s_against_the_real_busy_timeout_loses_nothing(make_station, folders) -> None:
    export, data = folders
    station, events = make_station()
    station.start()
    assert station.wait_idle(20)
    holder = _hold_lock(data, 15.0)
    try:
        write_file(export / "during.csv", spectrum_csv(200))
    finally:
        holder.wait(timeout=30)
    assert station.wait_idle(40)
    assert [run.name for run in _runs(data)] == ["during.csv"]


@pytest.fixture()
def small_disk(tmp_path: Path) -> Iterator[Path]:
    """A 2 MB tmpfs (root only; skipped where mounting is not allowed)."""
    mount_point = tmp_path / "small-disk"
    mount_point.mkdir()
    made = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=2m", "tmpfs", str(mount_point)],
                          capture_output=True, text=True)
    if made.returncode != 0:
        pytest.skip(f"cannot mount a small tmpfs here: {made.stderr.strip()}")
    try:
        yield mount_point
    finally:
        subprocess.run(["umount", "-l", str(mount_point)], capture_output=True)


def _fill(folder: Path) -> Path:
    """Fill the disk holding `folder` to the last byte; returns the filler file."""
    filler = folder / "filler"
    with open(filler, "wb", buffering=0) as handle:
        try:
            while True:
                handle.write(b"\0" * 4096)
        except OSError:
            pass
    return filler


def test_files_arriving_while_the_disk_is_full_are_recorded_once_space_is_freed(
    make_station, tmp_path: Path, small_disk: Path
) -> None:
    export = tmp_path / "export-on-big-disk"
    export.mkdir()
    data = small_disk / "data"
    station, events = make_station(export_folder=export, data_folder=data)
    station.start()
    write_file(export / "before.csv", spectrum_csv(200))
    assert station.wait_idle(20)
    filler = _fill(small_disk)
    for index in range(3):
        write_file(export / f"during{index}.csv", spectrum_csv(200, centre_cm1=2890.0 + index))
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline and not any(isinstance(e, StationProblem) and "full" in e.message for e in events):
        time.sleep(0.1)
    assert any(isinstance(e, StationProblem) and "full" in e.message for e in events)
    filler.unlink()
    assert station.wait_idle(60)
    assert sorted(run.name for run in _runs(data)) == ["before.csv", "during0.csv", "during1.csv", "during2.csv"]
    for run in _runs(data):
        if run.status == "processed":
            assert (data / "reports").exists()


def test_watch_once_exits_non_zero_when_a_file_could_not_be_recorded(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    from tui.cli import main
    from tui.commands import watch

    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "none.toml"))
    monkeypatch.setattr(ledger, "BUSY_TIMEOUT_MS", 200)
    monkeypatch.setattr(watch, "ONCE_PATIENCE_SECONDS", 2.0)
    export, data = tmp_path / "export", tmp_path / "data"
    export.mkdir()
    conn = ledger.open_ledger(data)  # a ledger to lock
    conn.close()
    write_file(export / "a.csv", spectrum_csv(200))
    holder = _hold_lock(data, 30.0)
    try:
        code = main(["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"])
    finally:
        holder.kill()
        holder.wait()
    out = capsys.readouterr().out
    assert code == 1
    assert "not recorded" in out
    assert _runs(data) == []
