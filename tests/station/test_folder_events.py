"""Native events of one folder from inotify on one thread (`folder_events`)."""
from __future__ import annotations

import queue
import struct
import time
from pathlib import Path

import pytest

from processing.station.folder_events import (
    IN_CLOSE_WRITE,
    IN_CREATE,
    IN_IGNORED,
    IN_Q_OVERFLOW,
    FolderEvents,
    parse_events,
)
from processing.station.watcher import observer_alive, start_observer

pytestmark = pytest.mark.skipif(not Path("/proc/sys/fs/inotify").exists(),
                                reason="inotify is Linux's")


def _event(wd: int, mask: int, name: bytes) -> bytes:
    """One event as the kernel writes it (inotify(7): struct inotify_event, the name NUL-padded
    to a multiple of the struct's alignment; common practice: 16 bytes of padding at most)."""
    padded = name + b"\0" * (16 - len(name) % 16) if name else b""
    return struct.pack("iIII", wd, mask, 0, len(padded)) + padded


def test_events_are_parsed_as_the_kernel_lays_them_out() -> None:
    # mask values from inotify(7) / <sys/inotify.h>: IN_CREATE 0x100, IN_CLOSE_WRITE 0x8
    assert (IN_CREATE, IN_CLOSE_WRITE, IN_Q_OVERFLOW, IN_IGNORED) == (0x100, 0x8, 0x4000, 0x8000)
    buffer = _event(1, IN_CREATE, b"scan 1.csv") + _event(1, IN_CLOSE_WRITE, b"a" * 16) + _event(-1, IN_Q_OVERFLOW, b"")
    assert parse_events(buffer) == [(IN_CREATE, b"scan 1.csv"), (IN_CLOSE_WRITE, b"a" * 16), (IN_Q_OVERFLOW, b"")]
    assert parse_events(buffer[:10]) == []  # a cut-off header is not an event


def _paths(found: queue.SimpleQueue[str], count: int, timeout: float = 5.0) -> list[str]:
    out = []
    deadline = time.monotonic() + timeout
    while len(out) < count and time.monotonic() < deadline:
        try:
            out.append(found.get(timeout=0.05))
        except queue.Empty:
            continue
    return out


def test_a_written_closed_renamed_and_deleted_file_is_named_and_reads_are_not(tmp_path: Path) -> None:
    found: queue.SimpleQueue[str] = queue.SimpleQueue()
    events = FolderEvents(str(tmp_path), found.put)
    events.start()
    try:
        target = tmp_path / "scan.csv"
        target.write_bytes(b"1,2\n")  # created, then closed after writing
        assert _paths(found, 2) == [str(target)] * 2
        target.read_bytes()  # reading is not a change (not asked of the kernel)
        (tmp_path / "sub").mkdir()  # a folder appearing is named too
        assert _paths(found, 1) == [str(tmp_path / "sub")]
        target.rename(tmp_path / "moved.csv")  # moved out under one name, in under the other
        assert _paths(found, 2) == [str(target), str(tmp_path / "moved.csv")]
        (tmp_path / "moved.csv").unlink()
        assert _paths(found, 1) == [str(tmp_path / "moved.csv")]
        assert _paths(found, 1, timeout=0.3) == []
    finally:
        events.stop()
        events.join(timeout=5)
    assert not events.is_alive()
    events.stop()  # twice is harmless


def test_the_thread_ends_when_its_folder_goes_and_the_station_can_tell(tmp_path: Path) -> None:
    folder = tmp_path / "export"
    folder.mkdir()
    observer, kind = start_observer(folder, False, False, lambda path: None)
    assert kind == "native" and isinstance(observer, FolderEvents)
    assert observer_alive(observer)
    folder.rmdir()
    observer.join(timeout=5)
    assert not observer_alive(observer)  # the station then watches again (or polls)
    observer.stop()


def test_a_missing_folder_is_refused_at_once(tmp_path: Path) -> None:
    with pytest.raises(OSError):
        FolderEvents(str(tmp_path / "absent"), lambda path: None)


def test_a_file_created_is_told_apart_and_a_folder_is_not(tmp_path: Path) -> None:
    """The station notes a created file without waking its loop (the close that follows wakes
    it); a folder appearing, or a file closed, moved in or deleted, goes to `notify`."""
    told: queue.SimpleQueue[str] = queue.SimpleQueue()
    created: queue.SimpleQueue[str] = queue.SimpleQueue()
    events = FolderEvents(str(tmp_path), told.put, created.put)
    events.start()
    try:
        (tmp_path / "scan.csv").write_bytes(b"1,2\n")
        (tmp_path / "sub").mkdir()
        assert _paths(created, 1) == [str(tmp_path / "scan.csv")]
        assert _paths(told, 2) == [str(tmp_path / "scan.csv"), str(tmp_path / "sub")]
        assert _paths(created, 1, timeout=0.3) == []
    finally:
        events.stop()
        events.join(timeout=5)
