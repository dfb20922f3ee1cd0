"""A simulated instrument: copies finished spectrum files into an export folder, a few seconds apart.

Each file is written the way a real instrument software saves a scan: the final name appears at
once and its bytes arrive in several chunks with short pauses, so a watcher sees a growing file
before it settles. Used by `bandwatch demo` and by tests of the station; pure file I/O, no UI.
"""
from __future__ import annotations

import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

SAMPLE_SUFFIXES = (".jdx", ".dx", ".jcamp", ".csv", ".txt", ".tsv")


@dataclass(frozen=True)
class ReplayWrite:
    """One file the simulated instrument finished writing."""

    source: Path
    target: Path
    size_bytes: int
    index: int  # 0-based position in the replay


def sample_files(folder: str | Path) -> list[Path]:
    """The spectrum files of a sample folder, in name order (the scenario's order of the day)."""
    root = Path(folder)
    if not root.is_dir():
        return []
    return sorted(p for p in root.iterdir() if p.is_file() and p.suffix.lower() in SAMPLE_SUFFIXES)


def chunk_bounds(size: int, chunks: int) -> list[tuple[int, int]]:
    """Split `size` bytes into at most `chunks` contiguous (start, end) pieces, none empty."""
    chunks = max(1, min(chunks, size)) if size else 1
    edges = [round(size * k / chunks) for k in range(chunks + 1)]
    return [(a, b) for a, b in zip(edges[:-1], edges[1:]) if b > a] or [(0, 0)]


def write_in_chunks(data: bytes, target: Path, chunks: int, pause_seconds: float, stop: threading.Event | None = None) -> None:
    """Write `data` to `target` (final name) in pieces, flushing each and pausing between them."""
    with open(target, "wb") as handle:
        for number, (start, end) in enumerate(chunk_bounds(len(data), chunks)):
            if number and pause_seconds > 0:
                if stop is not None and stop.wait(pause_seconds):
                    # asked to stop mid-file: finish the file so nothing is left half written
                    pause_seconds = 0.0
                elif stop is None:
                    time.sleep(pause_seconds)
            handle.write(data[start:end])
            handle.flush()


def unused_name(folder: Path, name: str) -> Path:
    """`folder/name`, or `stem-2.ext`, `stem-3.ext`, ... when that exists already."""
    candidate = folder / name
    counter = 2
    while candidate.exists():
        candidate = folder / f"{Path(name).stem}-{counter}{Path(name).suffix}"
        counter += 1
    return candidate


class InstrumentReplay:
    """Writes `sources` into `target_folder` one by one, `interval_seconds` apart, in a thread."""

    def __init__(
        self,
        sources: Sequence[str | Path],
        target_folder: str | Path,
        *,
        interval_seconds: float = 4.0,
        first_delay_seconds: float = 1.0,
        chunks: int = 4,
        chunk_pause_seconds: float = 0.15,
        on_written: Callable[[ReplayWrite], None] | None = None,
        on_finished: Callable[[], None] | None = None,
    ) -> None:
        if interval_seconds < 0 or first_delay_seconds < 0 or chunk_pause_seconds < 0:
            raise ValueError("interval, first delay and chunk pause must not be negative")
        self.sources = [Path(s) for s in sources]
        self.target_folder = Path(target_folder)
        self.interval_seconds = interval_seconds
        self.first_delay_seconds = first_delay_seconds
        self.chunks = chunks
        self.chunk_pause_seconds = chunk_pause_seconds
        self.on_written = on_written
        self.on_finished = on_finished
        self.written: list[ReplayWrite] = []
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def run(self) -> list[ReplayWrite]:
        """Write every source (blocking); returns what was written. Stops early on `stop()`."""
        if self._stop.wait(self.first_delay_seconds):
            return self.written
        for index, source in enumerate(self.sources):
            if index and self._stop.wait(self.interval_seconds):
                break
            data = source.read_bytes()
            target = unused_name(self.target_folder, source.name)
            write_in_chunks(data, target, self.chunks, self.chunk_pause_seconds, self._stop)
            record = ReplayWrite(source, target, len(data), index)
            self.written.append(record)
            if self.on_written is not None:
                self.on_written(record)
        if self.on_finished is not None:
            self.on_finished()
        return self.written

    def start(self) -> None:
        """Run in a daemon thread."""
        self._thread = threading.Thread(target=self.run, name="instrument-replay", daemon=True)
        self._thread.start()

    def stop(self, timeout: float = 5.0) -> None:
        """Stop writing (a file half written stays so). Safe before `start` and after a start
        that was interrupted (a hang-up signal while the thread was being started)."""
        self._stop.set()
        if self._thread is not None and self._thread.is_alive():
            self._thread.join(timeout)

    @property
    def finished(self) -> bool:
        return self._thread is not None and not self._thread.is_alive()
