"""The simulated instrument: files appear under their final name and grow in chunks."""
from __future__ import annotations

import os
import threading
import time
from pathlib import Path

from processing.instrument_replay import InstrumentReplay, chunk_bounds, sample_files, unused_name


def test_chunks_cover_the_file_exactly_once() -> None:
    for size, chunks in ((0, 4), (1, 4), (10, 3), (1000, 7)):
        bounds = chunk_bounds(size, chunks)
        assert bounds[0][0] == 0 and bounds[-1][1] == size
        assert all(a < b for a, b in bounds) or size == 0
        assert all(bounds[i][1] == bounds[i + 1][0] for i in range(len(bounds) - 1))
        assert len(bounds) <= max(1, chunks)


def test_replay_writes_copies_in_order_and_never_touches_the_sources(tmp_path: Path) -> None:
    samples, export = tmp_path / "samples", tmp_path / "export"
    samples.mkdir()
    export.mkdir()
    for name in ("b_second.csv", "a_first.jdx", "a_first.truth.json"):
        (samples / name).write_bytes(os.urandom(5000))
    sources = sample_files(samples)
    assert [p.name for p in sources] == ["a_first.jdx", "b_second.csv"]  # sidecars are not runs
    before = {p.name: p.read_bytes() for p in samples.iterdir()}
    sizes_seen: list[int] = []
    target = export / "a_first.jdx"

    def watch_growth() -> None:
        deadline = time.monotonic() + 5
        while time.monotonic() < deadline and len(set(sizes_seen)) < 3:
            if target.exists():
                sizes_seen.append(target.stat().st_size)
            time.sleep(0.005)

    watcher = threading.Thread(target=watch_growth)
    watcher.start()
    replay = InstrumentReplay(sources, export, interval_seconds=0.05, first_delay_seconds=0.05,
                              chunks=4, chunk_pause_seconds=0.1)
    written = replay.run()
    watcher.join()
    assert [w.target.name for w in written] == ["a_first.jdx", "b_second.csv"]
    assert all(w.target.read_bytes() == w.source.read_bytes() for w in written)
    # the file was seen part-written under its final name (as instrument software saves)
    assert any(0 < size < 5000 for size in sizes_seen)
    assert {p.name: p.read_bytes() for p in samples.iterdir()} == before


def test_a_second_copy_gets_a_new_name(tmp_path: Path) -> None:
    (tmp_path / "run.csv").write_text("x")
    assert unused_name(tmp_path, "run.csv").name == "run-2.csv"
    assert unused_name(tmp_path, "other.csv").name == "other.csv"


def test_stop_ends_the_replay_early(tmp_path: Path) -> None:
    (tmp_path / "s").mkdir()
    (tmp_path / "e").mkdir()
    for index in range(3):
        (tmp_path / "s" / f"{index}.csv").write_text("1,2\n3,4\n")
    replay = InstrumentReplay(sample_files(tmp_path / "s"), tmp_path / "e", interval_seconds=30,
                              first_delay_seconds=0.0, chunk_pause_seconds=0.0)
    replay.start()
    time.sleep(0.2)
    started = time.monotonic()
    replay.stop()
    assert time.monotonic() - started < 2  # does not sit out the 30 s interval
    assert [w.target.name for w in replay.written] == ["0.csv"]


def test_stopping_a_replay_never_started_or_whose_start_was_interrupted_is_quiet(tmp_path: Path) -> None:
    """A hang-up can reach the demo before the replay's thread exists, or while it is being
    started: `stop` must not raise then (it did: "cannot join thread before it is started",
    and the demo's folders were left behind)."""
    source = tmp_path / "a.csv"
    source.write_text("2000,0.1\n2001,0.2\n")
    target = tmp_path / "export"
    target.mkdir()
    replay = InstrumentReplay([source], target, interval_seconds=0.0)
    replay.stop()  # never started
    replay = InstrumentReplay([source], target, interval_seconds=0.0)
    replay._thread = threading.Thread(target=replay.run)  # created, interrupted before it started
    replay.stop()
    assert list(target.iterdir()) == []
