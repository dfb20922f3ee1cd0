"""Settling: a file is taken only when stable and complete; vanished and incomplete files."""
from __future__ import annotations

import os
import time
from pathlib import Path

from processing.readers import incomplete_reason
from processing.station.settle import IncompleteFile, RefusedFile, SettledFile, Settler, VanishedFile, WaitingFile

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
    assert settled.sha256 is None  # a complete file is hashed by the worker that reads it, not here
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
    [waiting] = settler.tick()  # stable but no ##END=: still being written, said once
    assert waiting == WaitingFile(str(path), "JCAMP-DX file has no ##END= (still being written?)", 5.0, False)
    clock.now += 1
    assert settler.tick() == []  # the wait goes on without saying it again
    clock.now += 3.1
    [given_up] = settler.tick()
    assert isinstance(given_up, IncompleteFile)
    assert "no ##END=" in given_up.reason and "5 s" in given_up.reason
    assert (given_up.size_bytes, given_up.mtime_ns) == (path.stat().st_size, path.stat().st_mtime_ns)


def test_jcamp_completed_later_settles(tmp_path: Path) -> None:
    clock = Clock()
    settler = Settler(0.5, 30.0, 1_000_000, clock)
    path = tmp_path / "a.jdx"
    path.write_text(JCAMP_HEAD)
    settler.touch(str(path))
    clock.now += 1
    assert [type(outcome) for outcome in settler.tick()] == [WaitingFile]
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


def test_a_csv_cut_mid_line_waits_for_its_last_line(tmp_path: Path) -> None:
    """A buffered writer pausing longer than the settle time leaves a file cut mid-line (at a
    multiple of 512 bytes, or with a short last row): it once became a version 'processed' on
    partial data. Now it waits; a complete file without a final newline is taken as it is."""
    clock = Clock()
    settler = Settler(0.5, 30.0, 1_000_000, clock)
    rows = "wavenumber,absorbance\n" + "".join(f"{2850 + i * 0.1:.4f},{0.01 * (i % 7):.6f}\n" for i in range(200))
    cut = tmp_path / "cut.csv"
    cut.write_text(rows[:1024])  # two of a writer's 512-byte blocks, ending mid-row
    short = tmp_path / "short.csv"
    short.write_text(rows[: rows.index("\n", 300) + 6])  # the last row holds one field so far
    whole = tmp_path / "whole.csv"
    whole.write_text(rows.rstrip("\n"))  # complete, no newline after the last row
    for path in (cut, short, whole):
        settler.touch(str(path))
    clock.now += 1
    outcomes = settler.tick()
    [settled] = [o for o in outcomes if isinstance(o, SettledFile)]
    assert settled.path == str(whole)
    waiting = [o for o in outcomes if not isinstance(o, SettledFile)]
    assert sorted(w.path for w in waiting) == [str(cut), str(short)]
    assert all(isinstance(w, WaitingFile) and w.taken_then for w in waiting)
    assert incomplete_reason(cut.read_bytes()) == incomplete_reason(short.read_bytes()) == (
        "last line looks cut off (still being written?)"
    )
    cut.write_text(rows)  # the writer goes on: the complete file is taken once
    _bump_mtime(cut, 1)
    clock.now += 1
    assert settler.tick() == []  # changed: the settle time starts again
    clock.now += 1
    [settled] = settler.tick()
    assert settled.path == str(cut) and settled.size_bytes == len(rows)
    clock.now += 30  # a last line that never gets finished is taken after the longest wait
    [taken] = settler.tick()
    assert isinstance(taken, SettledFile) and taken.path == str(short)


def test_settling_reads_only_regular_files(tmp_path: Path) -> None:
    clock = Clock()
    settler = Settler(0.1, 10.0, 1_000_000, clock)
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    settler.touch(str(fifo))
    clock.now += 1
    started = time.monotonic()
    [refused] = settler.tick()
    assert time.monotonic() - started < 1  # not blocked in open()
    assert isinstance(refused, RefusedFile) and "FIFO" in refused.reason


def test_a_close_event_on_a_pending_file_restarts_its_wait_and_no_stat_is_made_before_it_is_due(
    tmp_path: Path, monkeypatch
) -> None:  # type: ignore[no-untyped-def]
    """The station asks the kernel for close events, not each write: a pending file touched
    after more was written waits the settle time from then; a file not yet due is not even
    looked at (a burst of hundreds pending costs nothing per tick)."""
    clock = Clock()
    settler = Settler(0.5, 10.0, 1_000_000, clock)
    path = tmp_path / "a.csv"
    path.write_text("1,2\n")
    assert settler.touch(str(path))
    looked: list[str] = []
    real = settler.change_stat
    monkeypatch.setattr(settler, "change_stat", lambda p, found=None: looked.append(p) or real(p, found))
    clock.now += 0.3
    assert settler.tick() == [] and looked == []  # not due: no system call
    path.write_text("1,2\n3,4\n")
    _bump_mtime(path, 1)
    assert settler.touch(str(path))  # the writer closed it: the wait starts again now (0.3)
    looked.clear()
    clock.now += 0.3
    assert settler.tick() == [] and looked == []  # 0.6 s since the start but 0.3 s since the close
    clock.now += 0.21
    [settled] = settler.tick()
    assert isinstance(settled, SettledFile) and settled.size_bytes == 8


def test_a_text_file_is_judged_whole_by_its_ends_as_by_all_of_it() -> None:
    """Text is judged by its first and last 4 KB and its size, with the same answer as from
    all its bytes, at every cut of a long export (mid-row, at 512-byte blocks, after a whole
    row, without a final newline); JCAMP-DX is never judged by its ends (it counts blocks)."""
    from processing.readers.registry import ENDS_BYTES, incomplete, looks_whole_by_ends

    rows = "wavenumber,absorbance\n" + "".join(f"{2850 + i * 0.01:.4f},{0.01 * (i % 7):.6f}\n" for i in range(2000))
    data = rows.encode()
    cuts = sorted({*range(0, len(data), 97), *range(512, len(data), 512), len(data) - 1, len(data)})
    judged = 0
    for cut in cuts:
        part = data[:cut]
        by_ends = looks_whole_by_ends(part[:ENDS_BYTES], part[-ENDS_BYTES:] if part else b"", len(part))
        assert by_ends == (incomplete(part) is None), cut
        judged += by_ends
    assert 0 < judged < len(cuts)  # both answers were seen
    jcamp = (JCAMP_HEAD + "##END=\n").encode()
    assert incomplete(jcamp) is None and not looks_whole_by_ends(jcamp, jcamp, len(jcamp))


def test_a_whole_text_file_is_read_only_at_its_ends_while_it_settles(tmp_path: Path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    import processing.station.settle as settle_module

    def no_whole_read(*args: object, **kwargs: object) -> bytes:
        raise AssertionError("a whole text file was read to settle it")

    clock = Clock()
    settler = Settler(0.5, 10.0, 10_000_000, clock)
    path = tmp_path / "long.csv"
    path.write_text("wavenumber,absorbance\n" + "".join(f"{2850 + i * 0.01:.4f},0.001\n" for i in range(50_000)))
    monkeypatch.setattr(settle_module, "read_regular", no_whole_read)
    settler.touch(str(path))
    clock.now += 0.6
    [settled] = settler.tick()
    assert isinstance(settled, SettledFile) and settled.size_bytes == path.stat().st_size
    monkeypatch.undo()
    cut = tmp_path / "cut.csv"  # cut mid-row: the whole file is read, and it waits
    cut.write_bytes(path.read_bytes()[:40_000 * 19 + 7])
    settler.touch(str(cut))
    clock.now += 0.6
    assert [type(outcome) for outcome in settler.tick()] == [WaitingFile]
