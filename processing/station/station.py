"""The station: watch the export folder, settle files, analyse them in the pool, record runs.

    station = Station(config, on_event=print_or_post)
    station.start()      # catch-up of files the ledger has not seen, then watching
    ...
    station.stop()

Threads: the watchdog observer (only forwards paths), the station loop (settling, rescans,
claims, submitting), the pool supervisor (feeds and watches the workers), the recorder (writes
outcomes to the ledger and the reports). Each opens its own ledger connection. `on_event` is called from those threads with small `events` dataclasses; without
it, events go to `Station.events` (a queue) for the caller to drain.
"""
from __future__ import annotations

import fcntl
import os
import queue
import sqlite3
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from processing.errors import ConfigError
from processing.readers import DEFAULT_MAX_BYTES
from processing.regular_files import ReadPolicy
from processing.station import ledger
from processing.station.config import StationConfig, check_folders, settings_payload
from processing.station.events import (
    CatchUpFound,
    ClaimResumed,
    FileSeen,
    FileSettled,
    FileUnchanged,
    FileVanished,
    RunFailed,
    RunProcessed,
    StationEvent,
    StationProblem,
    StationStarted,
    StationStopped,
)
from processing.station.pool import Job, JobOutcome, WorkerPool
from processing.station.reports import write_reports
from processing.station.settle import IncompleteFile, RefusedFile, SettledFile, Settler, VanishedFile
from processing.station.watcher import FileFilter, start_observer

LOCK_FILE = "station.lock"


@dataclass(frozen=True)
class _InFlight:
    path: str
    sha256: str | None
    claim_id: int | None
    received_at: str
    size_bytes: int | None = None
    mtime_ns: int | None = None
    reprocess_of: int | None = None  # set for a redo of a run with changed settings
    requested: dict[str, Any] | None = None
    done: threading.Event | None = None
    answer: dict[str, Any] | None = None  # the redo's new run id lands here


class Station:
    """Watches one export folder and keeps one ledger; start() / stop()."""

    def __init__(self, config: StationConfig, on_event: Callable[[StationEvent], None] | None = None) -> None:
        self.config = config
        self.export_dir, self.data_dir = check_folders(config)
        self.filter = FileFilter(
            root=self.export_dir,
            include=config.include,
            exclude=config.excluded_patterns,
            recursive=config.recursive,
        )
        self.events: queue.Queue[StationEvent] = queue.Queue()
        self._emit_to = on_event or self.events.put
        self.read_policy = ReadPolicy.for_station(self.export_dir, self.data_dir, config.follow_links_outside)
        self.settings = {**settings_payload(config), "read_policy": self.read_policy}
        self.settler = Settler(
            config.settle_seconds, config.max_wait_seconds, DEFAULT_MAX_BYTES, policy=self.read_policy
        )
        self.tick_seconds = max(0.01, min(0.05, config.settle_seconds / 4))
        self._touched: queue.SimpleQueue[str] = queue.SimpleQueue()
        self._wakeup = threading.Event()
        self._stopping = threading.Event()
        self._lock = threading.Lock()
        self._inflight: dict[int, _InFlight] = {}
        self._inflight_paths: set[str] = set()
        self._job_ids = 0
        self._local = threading.local()
        self._lock_handle: IO[str] | None = None
        self._observer = None
        self._loop: threading.Thread | None = None
        self.pool: WorkerPool | None = None
        self._outcomes: queue.SimpleQueue[JobOutcome | None] = queue.SimpleQueue()
        self._recorder: threading.Thread | None = None
        self.observer_kind = ""
        self._idle_ticks = 0
        self._ticks = 0
        self._started = False

    # ---------------------------------------------------------------- lifecycle

    def start(self) -> None:
        """Take the data folder, redo runs left in progress, start workers, watch, catch up."""
        self._take_lock()
        conn = self._conn()
        for claim in ledger.list_claims(conn):
            ledger.drop_claim(conn, claim.claim_id)  # not in `runs`, so the catch-up redoes it
            self._emit(ClaimResumed(claim.path))
        self.pool = WorkerPool(
            self._on_outcome,
            workers=self.config.workers,
            function_spec=self.config.process_function,
            timeout_seconds=self.config.timeout_seconds,
            memory_limit_mb=self.config.memory_limit_mb,
            on_problem=lambda message: self._emit(StationProblem(message)),
        )
        self._recorder = threading.Thread(target=self._run_recorder, name="bandwatch-recorder", daemon=True)
        self._recorder.start()
        self.pool.start()
        self._observer, self.observer_kind = start_observer(
            self.export_dir, self.config.recursive, self.config.poll, self._notify
        )
        self._emit(StationStarted(str(self.export_dir), str(self.data_dir), self.observer_kind, self.config.workers))
        self._loop = threading.Thread(target=self._run_loop, name="bandwatch-station", daemon=True)
        self._started = True
        self._loop.start()

    def stop(self) -> None:
        """Stop watching and the workers; files in progress are redone at the next start."""
        if not self._started:
            return
        self._started = False
        self._stopping.set()
        self._wakeup.set()
        if self._observer is not None:
            self._observer.stop()
            self._observer.join(timeout=5)
        if self._loop is not None:
            self._loop.join(timeout=5)
        if self.pool is not None:
            self.pool.stop()
        if self._recorder is not None:
            self._outcomes.put(None)  # after the outcomes already handed over
            self._recorder.join(timeout=30)
        with self._lock:
            for info in self._inflight.values():
                if info.done is not None:
                    info.done.set()  # a redo still waiting gets None
        self._emit(StationStopped())
        if self._lock_handle is not None:
            fcntl.flock(self._lock_handle, fcntl.LOCK_UN)
            self._lock_handle.close()
            self._lock_handle = None

    def reprocess(self, run_id: int, requested: dict[str, Any], timeout: float | None = None) -> int | None:
        """Redo a run's file in the pool with changed settings; the new version's run id.

        Blocks the calling thread (not the station) until recorded; None when the station
        stopped first or `timeout` passed. The request is stored with the new version.
        """
        if self.pool is None or not self._started:
            raise ledger.LedgerError("the station is not running")
        run = ledger.get_run(self._conn(), run_id)
        if run is None:
            raise ledger.LedgerError(f"no run {run_id} in the ledger")
        done = threading.Event()
        answer: dict[str, Any] = {}
        with self._lock:
            self._job_ids += 1
            job = Job(self._job_ids, run.path, {**self.settings, **requested})
            self._inflight[job.job_id] = _InFlight(
                run.path, run.sha256, None, ledger.now_iso(),
                reprocess_of=run_id, requested=dict(requested), done=done, answer=answer,
            )
            self._inflight_paths.add(run.path)
        self.pool.submit(job)
        done.wait(timeout)
        return answer.get("run_id")

    def __enter__(self) -> Station:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    @property
    def idle(self) -> bool:
        """Nothing pending, settling or running (as of the last two loop ticks)."""
        return self._idle_ticks >= 2

    def wait_idle(self, timeout: float = 30.0, quiet_ticks: int = 3) -> bool:
        """Block until idle for `quiet_ticks` loop ticks after this call; True when idle.

        Counting ticks after the call keeps a change made just before it (whose event may
        still be on its way) from being missed.
        """
        deadline = time.monotonic() + timeout
        first_tick = self._ticks
        while time.monotonic() < deadline:
            if self._idle_ticks >= quiet_ticks and self._ticks - first_tick >= quiet_ticks:
                return True
            time.sleep(self.tick_seconds / 2)
        return self.idle

    # ---------------------------------------------------------------- plumbing

    def _take_lock(self) -> None:
        self.data_dir.mkdir(parents=True, exist_ok=True)
        handle = open(self.data_dir / LOCK_FILE, "a+", encoding="utf-8")
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            handle.close()
            raise ConfigError(
                self.config.source, "data_folder", f"another station is already running with {self.data_dir}"
            ) from None
        handle.seek(0)
        handle.truncate()
        handle.write(f"{os.getpid()}\n")
        handle.flush()
        self._lock_handle = handle

    def _conn(self) -> sqlite3.Connection:
        conn = getattr(self._local, "conn", None)
        if conn is None:
            conn = ledger.open_ledger(self.data_dir)
            self._local.conn = conn
        return conn

    def _emit(self, event: StationEvent) -> None:
        try:
            self._emit_to(event)
        except Exception:  # a broken consumer must not stop the station
            pass

    def _notify(self, path: str) -> None:
        """From the observer thread: something happened at `path`."""
        self._touched.put(path)
        self._wakeup.set()

    # ---------------------------------------------------------------- station loop

    def _run_loop(self) -> None:
        try:
            self._catch_up()
        except Exception as error:  # reported; watching still goes on
            self._emit(StationProblem(f"catch-up scan failed: {type(error).__name__}: {error}"))
        next_rescan = time.monotonic() + self.config.rescan_seconds
        while not self._stopping.is_set():
            self._wakeup.wait(self.tick_seconds)
            self._wakeup.clear()
            try:
                busy = self._drain_touched()
                if time.monotonic() >= next_rescan:
                    for path, stat in self.filter.scan():
                        self._touch(path, stat)
                    next_rescan = time.monotonic() + self.config.rescan_seconds
                self._settle()
            except Exception as error:  # one bad tick must not stop the station
                self._emit(StationProblem(f"station loop: {type(error).__name__}: {error}"))
                busy = True
            with self._lock:
                quiet = not busy and not self.settler.pending and not self._inflight
            self._idle_ticks = self._idle_ticks + 1 if quiet else 0
            self._ticks += 1

    def _catch_up(self) -> None:
        """Queue every file in the folder the ledger does not hold as it is now.

        A file whose size and time stamp match its newest run is done (not even read); any
        other is read, and one whose content (sha256) matches its newest run is skipped then.
        """
        conn = self._conn()
        seen = ledger.latest_sha_by_path(conn)
        self.settler.known.update(ledger.latest_stat_by_path(conn))
        found = sorted(self.filter.scan(), key=lambda item: item[1].st_mtime_ns)
        new = sum(1 for path, _ in found if path not in seen)
        if new:
            self._emit(CatchUpFound(new))
        for path, stat in found:
            self.settler.touch(path, stat)

    def _drain_touched(self) -> bool:
        any_touched = False
        while True:
            try:
                path = self._touched.get_nowait()
            except queue.Empty:
                return any_touched
            any_touched = True
            if os.path.isdir(path):
                if self.config.recursive and Path(path) != self.export_dir:
                    for inner, stat in FileFilter(
                        Path(path), self.filter.include, self.filter.exclude, True
                    ).scan():
                        if self.filter.accepts(inner):
                            self._touch(inner, stat)
                continue
            if self.filter.accepts(path):
                self._touch(path)

    def _touch(self, path: str, stat: os.stat_result | None = None) -> None:
        was_pending = path in self.settler.pending
        if self.settler.touch(path, stat) and not was_pending:
            self._emit(FileSeen(path))

    def _settle(self) -> None:
        with self._lock:
            held = set(self._inflight_paths)
        outcomes = self.settler.tick(hold=held.__contains__)
        settled: list[SettledFile] = []
        for outcome in outcomes:
            if isinstance(outcome, VanishedFile):
                self._emit(FileVanished(outcome.path))
            elif isinstance(outcome, IncompleteFile):
                record = ledger.record_run(
                    self._conn(), outcome.path, outcome.sha256, "unreadable", error=f"{outcome.path}: {outcome.reason}"
                )
                self._emit(RunProcessed(record.run_id, record.version, record.path, record.status, None, (), record.error))
            elif isinstance(outcome, RefusedFile):
                record = ledger.record_run(
                    self._conn(), outcome.path, None, "unreadable", error=outcome.reason,
                    size_bytes=outcome.size_bytes, mtime_ns=outcome.mtime_ns,
                )
                self._emit(RunProcessed(record.run_id, record.version, record.path, record.status, None, (), record.error))
            else:
                settled.append(outcome)
        for item in sorted(settled, key=lambda s: s.mtime_ns):  # oldest first
            self._dispatch(item)

    def _dispatch(self, item: SettledFile) -> None:
        conn = self._conn()
        latest = ledger.latest_run_for_path(conn, item.path)
        if latest is not None and item.sha256 is not None and latest.sha256 == item.sha256:
            self._emit(FileUnchanged(item.path, latest.run_id))
            return
        claim = ledger.claim_file(conn, item.path, item.sha256, os.getpid())
        self._emit(FileSettled(item.path, item.sha256, item.size_bytes))
        assert self.pool is not None
        with self._lock:
            self._job_ids += 1
            job = Job(self._job_ids, item.path, self.settings)
            self._inflight[job.job_id] = _InFlight(
                item.path, item.sha256, claim.claim_id, claim.received_at, item.size_bytes, item.mtime_ns
            )
            self._inflight_paths.add(item.path)
        self.pool.submit(job)

    # ---------------------------------------------------------------- outcomes (pool thread)

    def _on_outcome(self, outcome: JobOutcome) -> None:
        """From the pool's thread: hand over to the recorder, so the pool goes straight on."""
        self._outcomes.put(outcome)

    def _run_recorder(self) -> None:
        while True:
            outcome = self._outcomes.get()
            if outcome is None:
                return
            try:
                self._handle_outcome(outcome)
            except Exception as error:  # reported; the claim stays and is redone at next start
                self._emit(StationProblem(f"could not record {outcome.job.path}: {type(error).__name__}: {error}"))

    def _handle_outcome(self, outcome: JobOutcome) -> None:
        with self._lock:
            info = self._inflight.get(outcome.job.job_id)
        if info is None:
            return
        try:
            self._record_outcome(outcome, info)
        finally:
            with self._lock:
                self._inflight.pop(outcome.job.job_id, None)
                self._inflight_paths.discard(info.path)
            self._wakeup.set()

    def _record_outcome(self, outcome: JobOutcome, info: _InFlight) -> None:
        if info.reprocess_of is not None:
            try:
                self._record_redo(outcome, info)
            finally:
                assert info.done is not None
                info.done.set()
            return
        conn = self._conn()
        if outcome.failed or outcome.result is None:
            reason = outcome.reason or "no result"
            record = ledger.record_run(
                conn, info.path, info.sha256, "failed", error=reason,
                received_at=info.received_at, claim_id=info.claim_id,
                size_bytes=info.size_bytes, mtime_ns=info.mtime_ns,
            )
            self._emit(RunFailed(record.run_id, record.version, record.path, reason))
            return
        result = outcome.result
        status = result.get("status")
        if status not in ("processed", "unreadable"):
            status = "failed"
        record = ledger.record_run(
            conn, info.path, result.get("sha256") or info.sha256, status,
            result=result, error=result.get("error"),
            received_at=info.received_at, claim_id=info.claim_id,
            size_bytes=info.size_bytes, mtime_ns=info.mtime_ns,
        )
        self._report_and_announce(record, result)

    def _report_and_announce(self, record: Any, result: Any) -> None:
        """Write a processed run's reports (a failure to write is a problem event, not a crash)
        and announce the run."""
        folder = None
        if record.status == "processed":
            try:
                folder = str(write_reports(self.data_dir, record.run_id, record.version, result))
            except OSError as error:
                self._emit(StationProblem(f"report for run {record.run_id} not written: {error}"))
        self._emit(
            RunProcessed(
                record.run_id, record.version, record.path, record.status,
                record.verdict, record.species, record.error, folder,
            )
        )

    def _record_redo(self, outcome: JobOutcome, info: _InFlight) -> None:
        """A reprocessed run: a new version with the request stored beside it."""
        assert info.reprocess_of is not None and info.answer is not None
        conn = self._conn()
        settings = dict(info.requested or {})
        if outcome.failed or outcome.result is None:
            reason = outcome.reason or "no result"
            record = ledger.record_reprocessed(conn, info.reprocess_of, None, settings, status="failed", error=reason)
            info.answer["run_id"] = record.run_id
            self._emit(RunFailed(record.run_id, record.version, record.path, reason))
            return
        result = outcome.result
        record = ledger.record_reprocessed(conn, info.reprocess_of, result, settings)
        info.answer["run_id"] = record.run_id
        self._report_and_announce(record, result)
