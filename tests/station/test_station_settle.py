"""Settling: a file is taken only when stable and complete; vanished and incomplete files."""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

from processing.station.settle import IncompleteFile, SettledFile, Settler, VanishedFile, incomplete_reason

JCAMP_HEAD = "##TITLE=test\n##JCAMP-DX=4.24\n##XYDATA=(X++(Y..Y))\n2900 1 2 3\n"


class Clock:
    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def _bump_mtime(path: Path, seconds: float) -> None:
    stat = path.stat()
    os.utime(path, ns=(stat.st_atime_ns, stat.st_mtime_ns + int(seconds * 1e9)))


def test_file_settles_only_after_the_settle_time_unchanged(tmp_path: Path) -> None:
    clock = Clock()
    settler = Settler(0.5, 10.0, 1_000_000, clock)
    path = tmp_path / "a.csv"
    path.write_text("1,2\n")
    assert settler.touch(str(path))
    clock.now += 0.4
    assert settler.tick() == []
    path.write_text("1,2\n3,4\n")  # grows: the wait starts again
    _bump_mtime(path, 1)
    clock.now += 0.2
    assert settler.tick() == []
    clock.now += 0.4
    assert settler.tick() == []  # 0.4 s since the change
    clock.now += 0.11
    [settled] = settler.tick()
    assert isinstance(settled, SettledFile)
    assert settled.sha256 == hashlib.sha256(b"1,2\n3,4\n").hexdigest()  # the complete content
    assert settled.size_bytes == 8
    # the same unchanged file touched again is not pending again
    assert not settler.touch(str(path))
    assert settler.pending == {}


def test_deleted_before_settling_is_reported_vanished(tmp_path: Path) -> None:
    clock = Clock()
    settler = Settler(0.5, 10.0, 1_000_000, clock)
    path = tmp_path / "a.csv"
    path.write_text("1,2\n")
    settler.touch(str(path))
    path.unlink()
    clock.now += 1
    assert settler.tick() == [VanishedFile(str(path))]
    assert settler.pending == {} and str(path) not in settler.known


def test_held_file_waits(tmp_path: Path) -> None:
    clock = Clock()
    settler = Settler(0.1, 10.0, 1_000_000, clock)
    path = tmp_path / "a.csv"
    path.write_text("1,2\n")
    settler.touch(str(path))
    clock.now += 1
    assert settler.tick(hold=lambda p: True) == []
    assert len(settler.tick()) == 1


def test_jcamp_without_end_waits_then_is_given_up(tmp_path: Path) -> None:
    clock = Clock()
    settler = Settler(0.5, 5.0, 1_000_000, clock)
    path = tmp_path / "a.jdx"
    path.write_text(JCAMP_HEAD)
    settler.touch(str(path))
    clock.now += 1
    assert settler.tick() == []  # stable but no ##END=: still being written
    clock.now += 4.1
    [given_up] = settler.tick()
    assert isinstance(given_up, IncompleteFile)
    assert "no ##END=" in given_up.reason and "5 s" in given_up.reason


def test_jcamp_completed_later_settles(tmp_path: Path) -> None:
    clock = Clock()
    settler = Settler(0.5, 30.0, 1_000_000, clock)
    path = tmp_path / "a.jdx"
    path.write_text(JCAMP_HEAD)
    settler.touch(str(path))
    clock.now += 1
    assert settler.tick() == []
    with open(path, "a") as handle:
        handle.write("##END=\n")
    _bump_mtime(path, 1)
    clock.now += 0.1
    assert settler.tick() == []  # changed: wait again
    clock.now += 0.6
    [settled] = settler.tick()
    assert isinstance(settled, SettledFile)


def test_incomplete_reason_counts_blocks() -> None:
    assert incomplete_reason(b"wavenumber,absorbance\n1,2\n") is None
    assert incomplete_reason(JCAMP_HEAD.encode()) is not None
    assert incomplete_reason((JCAMP_HEAD + "##END=\n").encode()) is None
    # a linked file: an outer block around two inner ones needs three ##END=
    linked = "##TITLE=outer\n##BLOCKS=2\n" + JCAMP_HEAD + "##END=\n" + JCAMP_HEAD + "##END=\n"
    assert "3 ##TITLE=" in (incomplete_reason(linked.encode()) or "")
    assert incomplete_reason((linked + "##END=\n").encode()) is None
    # labels are case-insensitive and may carry spaces (JCAMP-DX 4.24 label rules)
    assert incomplete_reason(b"##title= x\n## end =\n") is None
