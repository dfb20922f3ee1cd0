"""The reprocess job: files in, today's analysis, each outcome a new version in the ledger.

    job = ReprocessJob(conn, JobOptions(data_dir, settings), backend, stop=stop_event)
    summary = job.run(selection.candidates(), count=selection.count)

Streams: candidates are read a chunk at a time, each chunk is checked against the ledger in one
query (`plan`), and at most `backend.capacity()` files are out at once; the client (this
thread) is the only writer of the ledger. A file is recorded once: the ledger is asked again
just before recording, and an outcome identical to a version made the same way is not written
twice. Stopping (`stop` set, e.g. by Ctrl-C) abandons the files out, records nothing half, and
a second run takes up where this one stopped (what is recorded is skipped).
"""
from __future__ import annotations

import fcntl
import itertools
import sqlite3
import threading
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import IO, TypeVar

from processing.errors import BandwatchError
from processing.pipeline import ProcessSettings
from processing.provenance import Provenance
from processing.reprocess.changes import QuantityShift, quantity_shifts
from processing.reprocess.outcome import Backend, Outcome
from processing.reprocess.plan import Planner, Task
from processing.reprocess.selection import Candidate
from processing.reprocess.summary import Progress, ReprocessSummary, Tally
from processing.station import ledger
from processing.station.reports import write_reports
from processing.station.retry import LEDGER_TROUBLE, Backoff, describe

CHUNK_FILES = 256  # candidates checked against the ledger per query
TAKE_SECONDS = 0.2  # longest wait for outcomes before looking at `stop` again
LOCK_FILE = "reprocess.lock"
EXAMPLES_WOULD_ANALYSE = 20
T = TypeVar("T")


class ReprocessError(BandwatchError):
    """A reprocess that cannot go on (another one running, workers with another analysis)."""


@dataclass(frozen=True)
class JobOptions:
    data_dir: Path
    settings: ProcessSettings
    write_reports: bool = False
    chunk_files: int = CHUNK_FILES
    ledger_location: str | Path | None = None  # for messages: a server URL, or None for the data folder's file


@contextmanager
def reprocess_lock(data_dir: Path) -> Iterator[None]:
    """One reprocess per data folder at a time (two would analyse the same files twice)."""
    data_dir.mkdir(parents=True, exist_ok=True)
    handle: IO[str] = open(data_dir / LOCK_FILE, "a+", encoding="utf-8")
    try:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise ReprocessError(f"{data_dir}: another reprocess is running on this data folder") from None
        yield
    finally:
        handle.close()


class ReprocessJob:
    """One reprocess (or, without a backend, a dry run that only says what it would do)."""

    def __init__(
        self,
        conn: ledger.Connection | None,
        options: JobOptions,
        backend: Backend | None,
        *,
        stop: threading.Event | None = None,
        on_progress: Callable[[Progress], None] | None = None,
        on_problem: Callable[[str], None] | None = None,
    ) -> None:
        self.conn = conn
        self.options = options
        self.backend = backend
        self.stop = stop or threading.Event()
        self.on_progress = on_progress or (lambda progress: None)
        self.on_problem = on_problem or (lambda message: None)
        self.planner = Planner(options.settings, self._latest_of)
        self.tally = Tally(self.planner.provenance, backend.name if backend is not None else "dry-run")

    @property
    def provenance(self) -> Provenance:
        return self.planner.provenance

    def _latest_of(self, instrument: str, paths: list[str]) -> dict[str, ledger.LatestVersion]:
        return ledger.latest_versions(self.conn, paths, instrument) if self.conn is not None else {}

    # ---------------------------------------------------------------- the loop

    def run(self, candidates: Iterable[Candidate], count: Callable[[threading.Event], int] | None = None) -> ReprocessSummary:
        """Go through `candidates`; `count` (run in a thread) gives the total for the progress."""
        counting_done = threading.Event()
        if count is not None:
            threading.Thread(target=self._count, args=(count, counting_done), name="bandwatch-reprocess-count", daemon=True).start()
        stopped: str | None = None
        try:
            if self.backend is None:
                self._dry_run(iter(candidates))
            else:
                stopped = self._run(iter(candidates), self.backend)
        except _Stopped:
            pass  # stopped while the ledger was in trouble: `interrupted` says so
        finally:
            counting_done.set()
        interrupted = self.stop.is_set()
        if not interrupted and stopped is None:
            self.tally.total = self.tally.selected  # every candidate was seen: the count is known
        shifts: list[QuantityShift] = []
        if self.conn is not None and self.backend is not None:
            shifts = quantity_shifts(self.conn, self.provenance)
        self.on_progress(self.tally.progress())
        return self.tally.finish(interrupted=interrupted, stopped=stopped, shifts=shifts)

    def _count(self, count: Callable[[threading.Event], int], done: threading.Event) -> None:
        try:
            total = count(done)
        except (OSError, sqlite3.Error, BandwatchError) as error:
            self.on_problem(f"could not count the files ({error}); no total or time left shown")
            return
        if not done.is_set():
            self.tally.total = total

    def _dry_run(self, source: Iterator[Candidate]) -> None:
        """Plan only: how many files would be analysed and why (`reasons`), a few by name."""
        while not self.stop.is_set():
            tasks, exhausted = self._plan_chunk(source)
            room = EXAMPLES_WOULD_ANALYSE - len(self.tally.would_analyse)
            self.tally.would_analyse.extend(task.path for task in tasks[:max(0, room)])
            self.tally.planned += len(tasks)
            self.on_progress(self.tally.progress())
            if exhausted:
                return

    def _run(self, source: Iterator[Candidate], backend: Backend) -> str | None:
        ready: deque[Task] = deque()
        inflight: dict[int, Task] = {}
        inflight_files: set[tuple[str, str]] = set()  # (instrument, path)
        exhausted = False
        while not self.stop.is_set():
            broken = backend.broken
            if broken is not None:
                return broken
            capacity = backend.capacity()
            while len(inflight) < capacity and not self.stop.is_set():
                if not ready:
                    if exhausted:
                        break
                    tasks, exhausted = self._plan_chunk(source)
                    ready.extend(tasks)
                    continue
                batch: list[Task] = []
                while ready and len(inflight) < capacity:
                    task = ready.popleft()
                    if task.key in inflight_files:
                        self.tally.skipped += 1  # named twice (a folder and a glob): once is enough
                        self.tally.reasons[task.reason] -= 1
                        continue
                    batch.append(task)
                    inflight[task.seq] = task
                    inflight_files.add(task.key)
                if batch:
                    backend.submit(batch)
            if not inflight and not ready and exhausted:
                return None
            try:
                for outcome in backend.take(TAKE_SECONDS):
                    task = inflight.pop(outcome.seq, None)
                    if task is None:
                        continue
                    inflight_files.discard(task.key)
                    self._record(task, outcome)
            except ReprocessError as error:
                return str(error)
            self.on_progress(self.tally.progress())
        # Stopped: what has already come back is recorded; the rest is abandoned.
        try:
            for outcome in backend.take(0.0):
                task = inflight.pop(outcome.seq, None)
                if task is not None:
                    self._record(task, outcome)
        except ReprocessError as error:
            return str(error)
        return None

    def _plan_chunk(self, source: Iterator[Candidate]) -> tuple[list[Task], bool]:
        """Plan the next chunk of candidates: (tasks, whether the candidates ran out)."""
        chunk = list(itertools.islice(source, self.options.chunk_files))
        self.tally.selected += len(chunk)
        if not chunk:
            return [], True
        tasks, skipped = self._retrying("read the ledger", lambda: self.planner.plan(chunk))
        self.tally.skipped += len(skipped)
        for task in tasks:
            self.tally.note_reason(task.reason)
        return tasks, len(chunk) < self.options.chunk_files

    # ---------------------------------------------------------------- recording

    def _record(self, task: Task, outcome: Outcome) -> None:
        if outcome.lost is not None:
            self.tally.note_lost(task.path, outcome.lost)
            return
        self.tally.analysed += 1
        expected = (task.provenance.analysis_version, task.provenance.library_hash)
        if outcome.made_with is not None and outcome.made_with != expected:
            self.tally.note_lost(task.path, "analysed with another analysis version or library")
            raise ReprocessError(
                f"a cluster worker runs analysis {outcome.made_with[0]} with library {outcome.made_with[1]}, this client "
                f"{expected[0]} with {expected[1]}: install the same bandwatch (and library) on the client and every worker"
            )
        try:
            self._retrying(f"record {Path(task.path).name}", lambda: self._write(task, outcome))
        except _Stopped:
            self.tally.note_lost(task.path, "stopped while the ledger could not be written")

    def _write(self, task: Task, outcome: Outcome) -> None:
        assert self.conn is not None
        result = outcome.result
        if outcome.failure is not None or result is None:
            status, sha, error = "failed", None, outcome.failure or "no result"
        else:
            status = result.status if result.status in ("processed", "unreadable") else "failed"
            sha, error = result.sha256, result.error
        instrument = task.candidate.instrument
        now = ledger.latest_versions(self.conn, [task.path], instrument).get(task.path) or task.previous
        if (
            now is not None and status != "failed" and now.status == status and now.sha256 == sha
            and now.provenance == task.provenance
        ):
            self.tally.unchanged += 1  # the same file, made the same way, is already recorded
            return
        same_file = now is not None and (sha is None or sha == now.sha256)
        record = ledger.record_run(
            self.conn, task.path, sha, status,
            result=result if status != "failed" else None,
            result_json=outcome.result_json if status != "failed" else None,
            error=error,
            received_at=now.received_at if now is not None and same_file else None,
            settings=task.request,
            reprocessed_from=now.run_id if now is not None and same_file else None,
            size_bytes=task.candidate.size_bytes, mtime_ns=task.candidate.mtime_ns,
            provenance=task.provenance,
            instrument=instrument,
        )
        previous = (now.run_id, now.status, now.verdict) if now is not None else None
        self.tally.note_recorded(task.path, record.status, record.verdict, record.run_id, previous)
        if status == "failed":
            self.tally.note_failure(task.path, error or "failed", record.run_id)
        if self.options.write_reports and status == "processed" and result is not None:
            try:
                write_reports(self.options.data_dir, record.run_id, record.version, result, outcome.result_json)
            except OSError as problem:
                self.on_problem(f"run {record.run_id} recorded, its report not written ({problem.strerror or problem})")

    def _retrying(self, what: str, action: Callable[[], T]) -> T:
        """`action`, tried again with the station's backoff while the ledger is in trouble
        (locked by another program, a full disk); `_Stopped` when stopped meanwhile."""
        backoff = Backoff()
        while True:
            try:
                return action()
            except LEDGER_TROUBLE as error:
                backoff.failed()
                if backoff.worth_saying:
                    where = ledger.describe_ledger(self.options.ledger_location or self.options.data_dir)
                    self.on_problem(f"could not {what}: {describe(error, where)}; trying again in {backoff.delay:g} s")
                if self.stop.wait(backoff.delay):
                    raise _Stopped from None


class _Stopped(Exception):
    """Stopped while waiting for the ledger."""
