"""A damaged, empty, unreachable or read-only ledger or data folder: one clean line naming the
problem and what to do, never a traceback, and never a ledger replaced without a word."""
from __future__ import annotations

import os
import shutil
import sqlite3
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from station_files import HERE, spectrum_csv, write_file

from processing.results import RunResult
from processing.station import ledger

ROOT = HERE.parents[1]


def _bandwatch(args: list[str], tmp_path: Path) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, BANDWATCH_CONFIG=str(tmp_path / "none.toml"), PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "tui", *args], capture_output=True, text=True, env=env,
                          cwd=ROOT, timeout=60)


def _one_clean_line(result: subprocess.CompletedProcess[str]) -> str:
    assert result.returncode != 0
    assert "Traceback" not in result.stderr
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("bandwatch: ")
    return lines[0]


def _ledger_with_runs(data: Path, count: int = 40) -> Path:
    conn = ledger.open_ledger(data)
    try:
        for index in range(count):
            ledger.record_run(conn, f"/export/run{index}.csv", f"{index:064x}", "processed",
                              result=RunResult(f"/export/run{index}.csv", "processed", notes=("x" * 2000,)), verdict="pass")
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    finally:
        conn.close()
    return ledger.ledger_path(data)


def _zero_length(path: Path) -> None:
    path.write_bytes(b"")


def _garbage(path: Path) -> None:
    path.write_bytes(os.urandom(8192))


def _truncated(path: Path) -> None:
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 3])


def _text_file(path: Path) -> None:
    path.write_text("this is not a ledger\n")


def _bad_header_page_size(path: Path) -> None:
    data = bytearray(path.read_bytes())
    data[16:18] = b"\x00\x03"  # page size 3: not a power of two (SQLite file format, offset 16)
    path.write_bytes(bytes(data))


def _damaged_page(path: Path) -> None:
    data = bytearray(path.read_bytes())
    page = int.from_bytes(data[16:18], "big") or 65536
    start = 3 * page  # a table page in the middle, the header left intact
    data[start:start + page] = os.urandom(page)
    path.write_bytes(bytes(data))


def _folder_in_its_place(path: Path) -> None:
    path.unlink()
    path.mkdir()


def _newer_schema(path: Path) -> None:
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA user_version = 99")
    conn.commit()
    conn.close()


def _garbage_wal(path: Path) -> None:
    path.with_name(path.name + "-wal").write_bytes(os.urandom(4096))


DAMAGE: dict[str, Callable[[Path], None]] = {
    "zero-length": _zero_length,
    "random bytes": _garbage,
    "truncated": _truncated,
    "a text file": _text_file,
    "bad page size in the header": _bad_header_page_size,
    "a damaged page": _damaged_page,
    "a folder in its place": _folder_in_its_place,
    "a newer schema": _newer_schema,
}


@pytest.mark.parametrize("damage", list(DAMAGE))
def test_a_damaged_ledger_is_one_line_for_watch_and_for_ledger_list_and_is_kept(tmp_path: Path, damage: str) -> None:
    data, export = tmp_path / "data", tmp_path / "export"
    export.mkdir()
    path = _ledger_with_runs(data)
    DAMAGE[damage](path)
    before = path.read_bytes() if path.is_file() else None
    watch = _one_clean_line(_bandwatch(["watch", str(export), "--data", str(data), "--once", "--plain"], tmp_path))
    lines = [watch]
    listed = _bandwatch(["ledger", "list", "--data", str(data)], tmp_path)
    if damage == "a damaged page" and listed.returncode == 0:
        # the listing reads only the pages it needs; the station checks every page at start
        assert "Traceback" not in listed.stderr
    else:
        lines.append(_one_clean_line(listed))
    for line in lines:
        assert str(path) in line
        if damage in ("zero-length", "random bytes", "truncated", "a text file", "a damaged page"):
            assert "will not replace it" in line and "backup" in line
    if before is not None:
        assert path.read_bytes() == before  # never replaced or repaired behind the operator's back


def test_a_garbage_wal_beside_a_sound_ledger_is_ignored_by_sqlite(tmp_path: Path) -> None:
    """SQLite checks each WAL frame's checksum: a WAL of random bytes holds no frames."""
    data = tmp_path / "data"
    path = _ledger_with_runs(data, 3)
    _garbage_wal(path)
    listed = _bandwatch(["ledger", "list", "--data", str(data)], tmp_path)
    assert listed.returncode == 0 and listed.stdout.count(".csv") == 3


def test_a_ledger_in_a_read_only_data_folder_can_be_listed_but_not_watched(tmp_path: Path) -> None:
    data, export = tmp_path / "data", tmp_path / "export"
    export.mkdir()
    _ledger_with_runs(data, 3)
    made = subprocess.run(["mount", "--bind", str(data), str(data)], capture_output=True, text=True)
    if made.returncode != 0:
        pytest.skip(f"cannot bind-mount here: {made.stderr.strip()}")
    try:
        made = subprocess.run(["mount", "-o", "remount,ro,bind", str(data)], capture_output=True, text=True)
        assert made.returncode == 0, made.stderr
        listed = _bandwatch(["ledger", "list", "--data", str(data)], tmp_path)
        assert listed.returncode == 0, listed.stderr
        assert listed.stdout.count(".csv") == 3
        shown = _bandwatch(["ledger", "show", "1", "--data", str(data)], tmp_path)
        assert shown.returncode == 0 and "run 1 v1" in shown.stdout
        line = _one_clean_line(_bandwatch(["watch", str(export), "--data", str(data), "--once", "--plain"], tmp_path))
        assert "cannot be written" in line and "Read-only file system" in line
        line = _one_clean_line(_bandwatch(["ledger", "accept", "1", "--data", str(data)], tmp_path))
        assert str(data) in line
    finally:
        subprocess.run(["umount", "-l", str(data)], capture_output=True)


def test_a_full_disk_at_start_is_one_line(tmp_path: Path) -> None:
    mount_point = tmp_path / "full"
    mount_point.mkdir()
    made = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(mount_point)], capture_output=True, text=True)
    if made.returncode != 0:
        pytest.skip(f"cannot mount a small tmpfs here: {made.stderr.strip()}")
    try:
        with open(mount_point / "filler", "wb", buffering=0) as handle:
            try:
                while True:
                    handle.write(b"\0" * 1024)
            except OSError:
                pass
        export = tmp_path / "export"
        export.mkdir()
        line = _one_clean_line(_bandwatch(["watch", str(export), "--data", str(mount_point / "data"), "--once", "--plain"], tmp_path))
        assert "No space left on device" in line or "disk is full" in line
    finally:
        subprocess.run(["umount", "-l", str(mount_point)], capture_output=True)


def test_no_ledger_yet_is_one_line_for_reading_commands(tmp_path: Path) -> None:
    for action in (["list"], ["show", "1"], ["export"], ["accept", "1"]):
        line = _one_clean_line(_bandwatch(["ledger", *action, "--data", str(tmp_path / "none")], tmp_path))
        assert "no ledger here yet" in line
    assert not (tmp_path / "none").exists()  # reading never creates a data folder


def test_deleting_the_data_folder_under_a_running_station_stops_it(make_station, folders) -> None:
    """Its ledger would otherwise live on in deleted files while a second station starts on a
    fresh folder: runs recorded by the first would be lost."""
    export, data = folders
    station, events = make_station()
    station.start()
    write_file(export / "a.csv", spectrum_csv(200))
    assert station.wait_idle(20)
    shutil.rmtree(data)
    deadline = time.monotonic() + 10
    while station.halted is None and time.monotonic() < deadline:
        time.sleep(0.05)
    assert station.halted is not None and "deleted or replaced" in station.halted
    write_file(export / "b.csv", spectrum_csv(200))
    time.sleep(0.5)
    assert not data.exists()  # nothing written after the halt


def test_watch_exits_non_zero_when_its_data_folder_is_deleted(tmp_path: Path) -> None:
    export, data = tmp_path / "export", tmp_path / "data"
    export.mkdir()
    env = dict(os.environ, BANDWATCH_CONFIG=str(tmp_path / "none.toml"), PYTHONPATH=str(ROOT))
    child = subprocess.Popen([sys.executable, "-m", "tui", "watch", str(export), "--data", str(data), "--plain"],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=ROOT)
    try:
        deadline = time.monotonic() + 20
        while not (data / ledger.LEDGER_FILE).exists() and time.monotonic() < deadline:
            time.sleep(0.05)
        time.sleep(0.3)
        shutil.rmtree(data)
        out, err = child.communicate(timeout=20)
    finally:
        if child.poll() is None:
            child.kill()
    assert child.returncode == 1
    assert "deleted or replaced" in out and "Traceback" not in err
