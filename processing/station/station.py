"""The station: watch the export folder, settle files, analyse them in the pool, record runs.

    station = Station(config, on_event=print_or_post)
    station.start()      # catch-up of files the ledger has not seen, then watching
    ...
    station.stop()

Threads: the observer (only forwards paths: `folder_events` for one folder, watchdog for a
tree or polling), the station loop (settling, rescans, claims, submitting), the pool supervisor
(feeds and watches the workers), the recorder (writes outcomes to the ledger and the reports;
in a backlog several in one transaction), and with a ledger server the replayer (records what
the local spool kept while the server was away). Each opens its own ledger connection; the
ledger is the data folder's file or a server (`station_ledger`). `on_event` is called from those threads with small `events` dataclasses; without
it, events go to `Station.events` (a queue) for the caller to drain.
"""
from __future__ import annotations

import fcntl
import functools
import hashlib
import os
import queue
import shutil
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import IO

from processing.errors import ConfigError, SpectrumFileError
from processing.provenance import Provenance, current_provenance
from processing.readers import DEFAULT_MAX_BYTES
from processing.regular_files import ReadPolicy, read_regular
from processing.results import RunResult
from processing.run_digest import RunDigest, digest_of
from processing.station import ledger
from processing.station.config import StationConfig, check_folders, station_settings
from processing.station.events import (
    CatchUpFound,
    FileSeen,
    FileSettled,
    FileUnchanged,
    FileVanished,
    FileWaiting,
    RunFailed,
    RunProcessed,
    StationEvent,
    StationProblem,
    StationStarted,
    StationStopped,
)
from processing.station.pool import Job, JobOutcome, WorkerPool
from processing.station.redo import RedoRequest, other_instrument, record_redo, redo_settings
from processing.station.reports import adopt_staged_reports, drop_staged, staging_folder, write_reports
from processing.station.retry import LEDGER_TROUBLE, Backoff, RetryQueue, describe
from processing.station.settle import IncompleteFile, RefusedFile, SettledFile, Settler, VanishedFile, WaitingFile
from processing.station.station_ledger import station_ledger
from processing.station.watcher import FileFilter, observer_alive, start_observer

LOCK_FILE = "station.lock"
FOLDER_CHECK_SECONDS = 1.0  # how often the loop checks that its data folder is still there
CATCH_UP_KEY = "\0catch-up"  # the retry key of the catch-up scan (no file path starts with NUL)


NOTIFY_SLACK_SECONDS = 0.01  # a file event waits this long at most for a wake-up the loop has anyway
BATCH_WAIT_SECONDS = 0.1  # in a backlog, how long an outcome waits for others to share its commit
BATCH_MOST = 16


@dataclass(frozen=True)
class _Written:
    """A new run's outcome as recorded (`record` None: kept in the spool), not yet announced:
    its digest, or why it failed."""

    record: ledger.RunRecord | None
    digest: RunDigest | None
    failure: str | None


@dataclass(frozen=True)
class _InFlight:
    path: str
    sha256: str | None
    claim_id: int | None
    received_at: str
    size_bytes: int | None = None
    mtime_ns: int | None = None
    reprocess_of: int | None = None  # set for a redo of a run with changed settings
    requested: RedoRequest | None = None
    done: threading.Event | None = None
    answer: dict[str, int] | None = None  # the redo's new run id lands here
    provenance: Provenance | None = None  # a redo's (its settings differ from the station's)


class Station:
    """Watches one export folder and keeps one ledger; start() / stop()."""

    def __init__(self, config: StationConfig, on_event: Callable[[StationEvent], None] | None = None) -> None:
        self.config = config
        self._staging: str | None = None  # where workers write report files (`reports.staging_folder`)
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
        self.settings = station_settings(config, self.read_policy)
        self.provenance = current_provenance(self.settings)  # recorded with every version
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
        self.store = station_ledger(config.ledger_location, self.data_dir, config.instrument, self._emit)
        self._lock_handle: IO[str] | None = None
        self._observer = None
        self._loop: threading.Thread | None = None
        self.pool: WorkerPool | None = None
        self._outcomes: queue.SimpleQueue[JobOutcome | None] = queue.SimpleQueue()
        self._recorder: threading.Thread | None = None
        self.observer_kind = ""
        self._idle_ticks = 0
        self._ticks = 0
        self._wakes_at = float("inf")  # when the loop's wait ends by itself (inf: it is awake)
        self._started = False
        self._retries = RetryQueue()  # loop-thread ledger work waiting for another try
        self._recorder_trouble_since: float | None = None  # the recorder is retrying since
        self._not_recorded: list[str] = []  # given up at stop: redone at the next start
        self._folder_identity: tuple[int, int] | None = None
        self._lock_path = str(self.data_dir / LOCK_FILE)  # stat'ed before every record
        self._next_folder_check = 0.0
        self.halted: str | None = None  # why the station stopped itself (its data folder went)
        self.consumer_failure: str | None = None  # the first exception an event consumer raised

    # ---------------------------------------------------------------- lifecycle

    def start(self) -> None:
        """Take the data folder, check the ledger, redo runs left in progress, start workers,
        watch, catch up. A data folder or ledger that cannot be used raises one clear error."""
        self._take_lock()
        try:
            self.store.open()  # refuses a damaged ledger; drops claims a stopped station left
            self._start_threads()
        except BaseException:
            self._stop_threads()
            self._release_lock()
            raise

    def _start_threads(self) -> None:
        self._staging = self._prepare_staging()
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
        self.store.start(self._report_and_announce)
        self.pool.start()
        self._observer, self.observer_kind = start_observer(
            self.export_dir, self.config.recursive, self.config.poll, self._notify,
            on_problem=lambda message: self._emit(StationProblem(message)), created=self._note,
        )
        self._emit(StationStarted(str(self.export_dir), str(self.data_dir), self.observer_kind, self.config.workers))
        self._loop = threading.Thread(target=self._run_loop, name="bandwatch-station", daemon=True)
        self._started = True
        self._loop.start()

    def stop(self) -> None:
        """Stop watching and the workers; files in progress, or whose record is still being
        retried, are named in a problem event and redone at the next start."""
        if not self._started:
            return
        self._started = False
        self._stop_threads()
        with self._lock:
            for info in self._inflight.values():
                if info.done is not None:
                    info.done.set()  # a redo still waiting gets None
                elif info.path not in self._not_recorded:
                    self._not_recorded.append(info.path)
        for path in self._retries.keys():
            if path not in self._not_recorded and not path.startswith("\0"):
                self._not_recorded.append(path)
        if self._not_recorded:
            names = ", ".join(Path(path).name for path in self._not_recorded[:5])
            more = f" and {len(self._not_recorded) - 5} more" if len(self._not_recorded) > 5 else ""
            self._emit(StationProblem(
                f"{len(self._not_recorded)} file(s) not recorded ({names}{more}); they are taken again at the next start",
                paths=tuple(self._not_recorded),
            ))
        self._emit(StationStopped())
        self._release_lock()

    def _stop_threads(self) -> None:
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
        self.store.stop()

    def _release_lock(self) -> None:
        if self._lock_handle is not None:
            try:
                fcntl.flock(self._lock_handle, fcntl.LOCK_UN)
                self._lock_handle.close()
            except OSError:
                pass  # the folder is gone; the lock goes with the descriptor
            self._lock_handle = None

    @property
    def not_recorded(self) -> tuple[str, ...]:
        """Files the station could not record before it stopped (redone at the next start)."""
        return tuple(self._not_recorded)

    @property
    def trouble_seconds(self) -> float:
        """How long ledger work has been failing and waiting for another try, or the ledger
        server has been away (0 when none)."""
        since = [
            t for t in (self._retries.oldest_failure, self._recorder_trouble_since, self.store.offline_since) if t is not None
        ]
        return time.monotonic() - min(since) if since else 0.0

    @property
    def spooled(self) -> int:
        """Outcomes kept in the local spool for a ledger server that is away (0 with a file)."""
        return self.store.waiting

    def reprocess(self, run_id: int, request: RedoRequest, timeout: float | None = None) -> int | None:
        """Redo a run's file in the pool: the station's settings with `request` applied (see
        `redo`); the new version's run id.

        Blocks the calling thread (not the station) until recorded; None when the station
        stopped first or `timeout` passed. The request is stored with the new version.
        """
        if self.pool is None or not self._started:
            raise ledger.LedgerError("the station is not running")
        run = ledger.get_run(self.store.conn(), run_id, with_result=False)
        if run is None:
            raise ledger.LedgerError(f"no run {run_id} in the ledger")
        if not_here := other_instrument(run, self.config.instrument):
            raise ledger.LedgerError(not_here)
        done = threading.Event()
        answer: dict[str, int] = {}
        with self._lock:
            self._job_ids += 1
            settings = redo_settings(self.settings, request)
            job = Job(self._job_ids, run.path, settings, self._staging)
            self._inflight[job.job_id] = _InFlight(
                run.path, run.sha256, None, ledger.now_iso(),
                reprocess_of=run_id, requested=request, done=done, answer=answer,
                provenance=current_provenance(settings),
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
        """The data folder's lock file, held for the station's life (one station per folder)."""
        try:
            self.data_dir.mkdir(parents=True, exist_ok=True)
            handle = open(self.data_dir / LOCK_FILE, "a+", encoding="utf-8")
        except OSError as error:
            raise ConfigError(
                self.config.source, "data_folder",
                f"{self.data_dir} cannot be written ({error.strerror or error}); the station keeps its ledger there",
            ) from None
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            handle.close()
            raise ConfigError(
                self.config.source, "data_folder", f"another station is already running with {self.data_dir}"
            ) from None
        try:
            handle.seek(0)
            handle.truncate()
            handle.write(f"{os.getpid()}\n")
            handle.flush()
            found = os.fstat(handle.fileno())
        except OSError as error:
            handle.close()
            raise ConfigError(
                self.config.source, "data_folder",
                f"{self.data_dir} cannot be written ({error.strerror or error}); the station keeps its ledger there",
            ) from None
        self._lock_handle = handle
        self._folder_identity = (found.st_dev, found.st_ino)

    def _data_folder_gone(self) -> bool:
        """True when the lock file this station holds is no longer in the data folder (the
        folder was deleted or replaced): writing on would go into deleted files."""
        if self._folder_identity is None:
            return False
        try:
            found = os.stat(self._lock_path)
        except FileNotFoundError:
            return True
        except OSError:
            return False  # cannot tell now (e.g. a network hiccup); checked again soon
        return (found.st_dev, found.st_ino) != self._folder_identity

    def _halt(self, reason: str) -> None:
        """Stop doing anything: the data folder is gone (see _data_folder_gone)."""
        if self.halted is None:
            self.halted = reason
            self._emit(StationProblem(reason))
        self._stopping.set()
        self._wakeup.set()

    def _check_data_folder(self) -> bool:
        """False (and the station halts) when the data folder went away under the station."""
        if self._data_folder_gone():
            self._halt(
                f"the data folder {self.data_dir} was deleted or replaced while the station ran; "
                "stopping so that nothing is recorded into deleted files (start the station again)"
            )
            return False
        return True

    def _check_observer(self) -> None:
        """A dead observer (a thread killed by a folder tree too deep to watch) is replaced by
        one watching the top folder only; the rescan finds the files below."""
        if self._observer is None or observer_alive(self._observer):
            return
        self._emit(StationProblem(
            f"file events stopped (a folder tree too deep to watch?); watching the top folder only, "
            f"files below are found by the rescan every {self.config.rescan_seconds:g} s"
        ))
        self._observer.stop()
        self._observer.join(timeout=2)
        self._observer, self.observer_kind = start_observer(
            self.export_dir, False, self.config.poll, self._notify, created=self._note,
        )
        self.observer_kind += ", top folder only"

    def _ledger_failed(self, key: str, what: str, error: BaseException, backoff: Backoff) -> None:
        """A ledger action failed for a passing reason: say so now and then, try again later.
        `key` is the file concerned (or CATCH_UP_KEY)."""
        self.store.drop_conn()  # the next use opens a fresh connection
        if backoff.worth_saying:
            self._emit(StationProblem(
                f"could not {what}: {describe(error, self.store.where)}; "
                f"trying again in {backoff.delay:g} s (attempt {backoff.failures})",
                paths=() if key == CATCH_UP_KEY else (key,),
            ))

    def _emit(self, event: StationEvent) -> None:
        """Hand an event to the consumer; a consumer that raises never stops the station (the
        ledger has the runs): the first such failure is kept in `consumer_failure`."""
        try:
            self._emit_to(event)
        except Exception as error:  # a broken consumer must not stop the station
            if self.consumer_failure is None:
                self.consumer_failure = f"{type(error).__name__}: {error} (at {type(event).__name__})"

    def _notify(self, path: str) -> None:
        """From the observer thread: something happened at `path`. The loop is woken for it
        unless it wakes by itself within NOTIFY_SLACK_SECONDS (in a burst a file is due every
        few ms: its wake-up takes this path too, one wake-up instead of two)."""
        self._touched.put(path)
        if self._wakes_at - time.monotonic() > NOTIFY_SLACK_SECONDS:
            self._wakeup.set()

    def _note(self, path: str) -> None:
        """From the observer thread: a file was created at `path`. Taken at the next tick (within
        `tick_seconds`) or sooner with the next event, without waking the loop for it: its
        writer's close follows (and wakes it), and until that the file cannot settle anyway (a
        later touch only starts its settle wait later, never sooner). In a burst this spares a
        wake-up of the loop per file."""
        self._touched.put(path)

    # ---------------------------------------------------------------- station loop

    def _run_loop(self) -> None:
        try:
            self._retries.attempt(CATCH_UP_KEY, "read the ledger for the catch-up scan", self._catch_up, self._ledger_failed)
        except Exception as error:  # reported; watching still goes on
            self._emit(StationProblem(f"catch-up scan failed: {type(error).__name__}: {error}"))
        next_rescan = time.monotonic() + self.config.rescan_seconds
        while not self._stopping.is_set():
            # wake at the next tick, or sooner when a pending file's settle time ends then (a
            # file is taken when it has settled, not up to a tick later)
            due = self.settler.next_due()  # only later after the touches below: a bound for the tick
            remaining = None if due is None else due - time.monotonic()
            # (a file already due but held or incomplete waits for the next tick, no spinning)
            wait = self.tick_seconds if remaining is None or remaining <= 0 else min(self.tick_seconds, remaining)
            self._wakes_at = time.monotonic() + wait
            self._wakeup.wait(wait)
            self._wakeup.clear()
            self._wakes_at = float("inf")  # awake: every event wakes the next wait (none is lost)
            try:
                if time.monotonic() >= self._next_folder_check:
                    self._next_folder_check = time.monotonic() + FOLDER_CHECK_SECONDS
                    if not self._check_data_folder():
                        return
                    self._check_observer()
                busy = self._drain_touched()
                if time.monotonic() >= next_rescan:
                    for path, stat in self.filter.scan():
                        self._touch(path, stat)
                    next_rescan = time.monotonic() + self.config.rescan_seconds
                self._retries.run_due(self._ledger_failed)
                self._settle(due)
            except Exception as error:  # one bad tick must not stop the station
                self._emit(StationProblem(f"station loop: {type(error).__name__}: {error}"))
                busy = True
            with self._lock:
                quiet = (
                    not busy and not self.settler.pending and not self._inflight and not self._retries
                    and not self.store.waiting
                )
            self._idle_ticks = self._idle_ticks + 1 if quiet else 0
            self._ticks += 1

    def _catch_up(self) -> None:
        """Queue every file in the folder the ledger does not hold as it is now.

        A file whose size and time stamp match its newest run is done (not even read); any
        other is read, and one whose content (sha256) matches its newest run is skipped then.
        """
        seen, stats = self.store.known()
        self.settler.known.update(stats)
        found = sorted(self.filter.scan(), key=lambda item: item[1].st_mtime_ns)
        new = sum(1 for path, _ in found if path not in seen)
        if new:
            self._emit(CatchUpFound(new))
        for path, stat in found:
            self.settler.touch(path, stat)

    def _drain_touched(self) -> bool:
        if self._touched.empty():
            return False  # most ticks: no exception raised and caught for nothing
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

    def _settle(self, due: float | None = None) -> None:
        # a file still in the pool waits: asked of the live set for the few files due (a copy
        # per tick cost more than the rest of the tick in a burst, with ~150 files in flight);
        # one membership test is atomic, and a path added meanwhile is held at the next tick
        inflight = self._inflight_paths
        outcomes = self.settler.tick(hold=lambda path: path in inflight or path in self._retries, due=due)
        settled: list[SettledFile] = []
        for outcome in outcomes:
            if isinstance(outcome, VanishedFile):
                self._emit(FileVanished(outcome.path))
            elif isinstance(outcome, WaitingFile):
                self._emit(FileWaiting(outcome.path, outcome.reason, outcome.give_up_after_seconds, outcome.taken_then))
            elif isinstance(outcome, (IncompleteFile, RefusedFile)):
                self._retries.attempt(
                    outcome.path, f"record {Path(outcome.path).name}",
                    functools.partial(self._record_unread, outcome), self._ledger_failed,
                )
            else:
                settled.append(outcome)
        for item in sorted(settled, key=lambda s: s.mtime_ns):  # oldest first
            self._retries.attempt(
                item.path, f"take {Path(item.path).name} on", functools.partial(self._dispatch, item), self._ledger_failed
            )

    def _record_unread(self, outcome: IncompleteFile | RefusedFile) -> None:
        """Record a file the station itself refused or gave up on as unreadable; a file given up
        on whose content the ledger already holds (the same incomplete export, seen again at a
        restart) is not recorded again."""
        if isinstance(outcome, IncompleteFile):
            latest = self.store.latest(outcome.path)
            if latest is not None and outcome.sha256 is not None and latest[1] == outcome.sha256:
                self._emit(FileUnchanged(outcome.path, latest[0]))
                return
            record = self.store.record(
                outcome.path, outcome.sha256, "unreadable", error=f"{outcome.path}: {outcome.reason}",
                size_bytes=outcome.size_bytes, mtime_ns=outcome.mtime_ns, provenance=self.provenance,
            )
        else:
            record = self.store.record(
                outcome.path, None, "unreadable", error=outcome.reason,
                size_bytes=outcome.size_bytes, mtime_ns=outcome.mtime_ns, provenance=self.provenance,
            )
        if record is None:
            return  # kept in the spool: announced when the server has it
        self._emit(RunProcessed(record.run_id, record.version, record.path, record.status, None, (), record.error))

    def _dispatch(self, item: SettledFile) -> None:
        if self._data_folder_gone():
            raise ledger.LedgerError("the data folder is gone")  # retried; the loop halts the station
        latest = self.store.latest(item.path)
        sha256 = item.sha256
        if latest is not None and sha256 is None:
            sha256 = self._content_sha256(item.path)  # seen before: the same content again?
        if latest is not None and sha256 is not None and latest[1] == sha256:
            self._emit(FileUnchanged(item.path, latest[0]))
            return
        claim = self.store.claim(item.path, sha256)
        self._emit(FileSettled(item.path, sha256, item.size_bytes))
        assert self.pool is not None
        with self._lock:
            self._job_ids += 1
            job = Job(self._job_ids, item.path, self.settings, self._staging, want_result=False)
            self._inflight[job.job_id] = _InFlight(
                item.path, sha256, claim.claim_id, claim.received_at, item.size_bytes, item.mtime_ns
            )
            self._inflight_paths.add(item.path)
        self.pool.submit(job)

    def _prepare_staging(self) -> str | None:
        """The folder where workers write report files before a run has its id, emptied of
        what a stopped station left; None when it cannot be made (the recorder then writes
        every report itself)."""
        folder = staging_folder(self.data_dir)
        shutil.rmtree(folder, ignore_errors=True)
        try:
            folder.mkdir(parents=True)
        except OSError as error:
            self._emit(StationProblem(f"{folder}: cannot be used ({error.strerror or error}); reports are written by the station"))
            return None
        return str(folder)

    def _content_sha256(self, path: str) -> str | None:
        """The file's sha256 as it is now, or None when it cannot be read (the analysis then
        says why). A new file is not hashed by the station: its worker hashes what it reads."""
        try:
            return hashlib.sha256(read_regular(path, DEFAULT_MAX_BYTES, self.read_policy)).hexdigest()
        except SpectrumFileError:
            return None

    # ---------------------------------------------------------------- outcomes (pool thread)

    def _on_outcome(self, outcome: JobOutcome) -> None:
        """From the pool's thread: hand over to the recorder, so the pool goes straight on."""
        self._outcomes.put(outcome)

    def _run_recorder(self) -> None:
        while True:
            outcomes = self._next_outcomes()
            if outcomes is None:
                return
            if len(outcomes) > 1 and self._record_together(outcomes):
                continue
            for outcome in outcomes:
                try:
                    self._handle_outcome(outcome)
                except Exception as error:  # reported; the claim stays and is redone at next start
                    self._emit(StationProblem(f"could not record {outcome.job.path}: {type(error).__name__}: {error}", paths=(outcome.job.path,)))

    def _next_outcomes(self) -> list[JobOutcome] | None:
        """The next outcome, and in a backlog (jobs waiting for a worker, so more outcomes are
        coming at once) those that arrive within BATCH_WAIT_SECONDS, up to BATCH_MOST, to be
        recorded in one ledger transaction; None when the station stops. The wait is one sleep
        (not a wake-up per outcome). Without a backlog an outcome is recorded at once: a lone
        file's latency is never held."""
        first = self._outcomes.get()
        if first is None:
            return None
        outcomes = [first]
        if not self.store.batches or self.pool is None or self.pool.queued == 0:
            return outcomes
        self._stopping.wait(BATCH_WAIT_SECONDS)  # at a stop, what has come is recorded at once
        while len(outcomes) < BATCH_MOST:
            try:
                following = self._outcomes.get_nowait()
            except queue.Empty:
                break
            if following is None:
                self._outcomes.put(None)  # the stop: after these are recorded
                break
            outcomes.append(following)
        return outcomes

    def _record_together(self, outcomes: list[JobOutcome]) -> bool:
        """Record new runs' outcomes in one ledger transaction, then report and announce each
        (RunProcessed only after the commit, as for one). False when that could not be done (a
        redo among them, the ledger in trouble, any error: rolled back, nothing recorded); the
        caller then records them one by one, each with its own retries and problem events."""
        with self._lock:
            infos = [self._inflight.get(outcome.job.job_id) for outcome in outcomes]
        if any(info is None or info.reprocess_of is not None for info in infos) or self._data_folder_gone():
            return False
        written: list[tuple[JobOutcome, _InFlight, _Written]] = []
        try:
            with self.store.batch():
                for outcome, info in zip(outcomes, infos):
                    assert info is not None
                    written.append((outcome, info, self._write_record(outcome, info)))
        except Exception:  # rolled back: recorded again one by one, where each error is reported
            self.store.drop_conn()
            return False
        self._recorder_trouble_since = None
        for outcome, info, record in written:
            try:
                self._announce_record(outcome, record)
            except Exception as error:  # recorded; reported, as for one
                self._emit(StationProblem(f"could not report {outcome.job.path}: {type(error).__name__}: {error}", paths=(outcome.job.path,)))
            finally:
                self._finish(outcome, info, recorded=True)
        return True

    def _handle_outcome(self, outcome: JobOutcome) -> None:
        """Record one outcome, trying again with backoff while the ledger is in trouble (locked,
        disk full); gives up only when the station stops (the claim makes the next start redo it)."""
        with self._lock:
            info = self._inflight.get(outcome.job.job_id)
        if info is None:
            return
        recorded = False
        try:
            recorded = self._until_recorded(outcome, info)
        finally:
            self._finish(outcome, info, recorded)

    def _finish(self, outcome: JobOutcome, info: _InFlight, recorded: bool) -> None:
        """An outcome is done with: no longer in flight; named at the stop when not recorded."""
        with self._lock:
            self._inflight.pop(outcome.job.job_id, None)
            self._inflight_paths.discard(info.path)
            if not recorded and info.done is None and info.path not in self._not_recorded:
                self._not_recorded.append(info.path)
        if info.done is not None:
            info.done.set()  # a redo's caller waits for its record (or the stop)
        if info.path in self.settler.pending or not self._inflight:
            self._wakeup.set()  # a change held while in flight may settle now; or all is done

    def _until_recorded(self, outcome: JobOutcome, info: _InFlight) -> bool:
        backoff = Backoff()
        name = Path(info.path).name
        while True:
            if self._data_folder_gone():
                self._check_data_folder()
                return False
            try:
                self._record_outcome(outcome, info)
            except LEDGER_TROUBLE as error:
                if self._recorder_trouble_since is None:
                    self._recorder_trouble_since = time.monotonic()
                backoff.failed()
                self._ledger_failed(info.path, f"record {name}", error, backoff)
                if self._stopping.wait(backoff.delay):
                    return False
                continue
            self._recorder_trouble_since = None
            return True

    def _record_outcome(self, outcome: JobOutcome, info: _InFlight) -> None:
        if info.reprocess_of is not None:
            self._record_redo(outcome, info)  # its waiter is released by _handle_outcome
            return
        self._announce_record(outcome, self._write_record(outcome, info))

    def _write_record(self, outcome: JobOutcome, info: _InFlight) -> _Written:
        """Record a new run's outcome in the ledger (nothing announced yet)."""
        digest = outcome.digest
        if digest is None and outcome.result is not None:  # a worker function's result without one
            digest = digest_of(outcome.result)
        if outcome.failed or digest is None or outcome.result_json is None:
            reason = outcome.reason or "no result"
            record = self.store.record(
                info.path, info.sha256 or self._content_sha256(info.path), "failed", error=reason,
                received_at=info.received_at, claim_id=info.claim_id,
                size_bytes=info.size_bytes, mtime_ns=info.mtime_ns, provenance=self.provenance,
            )
            return _Written(record, None, reason)
        # recorded and reported from the worker's digest and texts: the result object is not rebuilt
        status = digest.status if digest.status in ("processed", "unreadable") else "failed"
        record = self.store.record(
            info.path, digest.sha256 or info.sha256 or self._content_sha256(info.path), status,
            digest=digest, result_json=outcome.result_json, error=digest.error,
            received_at=info.received_at, claim_id=info.claim_id,
            size_bytes=info.size_bytes, mtime_ns=info.mtime_ns, provenance=self.provenance,
        )
        return _Written(record, digest, None)

    def _announce_record(self, outcome: JobOutcome, written: _Written) -> None:
        """Report and announce a recorded run (`_write_record`), once it is in the ledger."""
        record = written.record
        if written.failure is not None:
            if record is not None:
                self._emit(RunFailed(record.run_id, record.version, record.path, written.failure))
            return
        if record is None:  # kept in the spool: reported from its JSON when it is recorded
            drop_staged(outcome.staged)
            return
        self._report_and_announce(record, written.digest, outcome.result_json, outcome.lines_csv, outcome.summary_body,
                                  outcome.staged)

    def _report_and_announce(
        self, record: ledger.RunRecord, result: RunResult | RunDigest | None, result_json: str | None,
        lines_csv_text: str | None = None, summary_body_text: str | None = None, staged: str | None = None,
    ) -> None:
        """Write a processed run's reports (retried while the disk is full, given up only when
        the station stops: a problem event, never a crash) and announce the run (a failed run
        without a result, as recorded from the spool, is announced as failed)."""
        if result is None:
            self._emit(RunFailed(record.run_id, record.version, record.path, record.error or "no result"))
            return
        folder = None
        if record.status == "processed" and staged is not None and summary_body_text is not None:
            # the worker wrote result.json and lines.csv: moved in place, summary.md added
            adopted = adopt_staged_reports(staged, self.data_dir, record.run_id, record.version, result.file,
                                           summary_body_text)
            folder = str(adopted) if adopted is not None else None
        if folder is None:
            drop_staged(staged)
        if record.status == "processed":
            backoff = Backoff()
            while folder is None:
                try:
                    folder = str(write_reports(self.data_dir, record.run_id, record.version, result, result_json,
                                               lines_csv_text, summary_body_text))
                except OSError as error:
                    backoff.failed()
                    if backoff.worth_saying:
                        self._emit(StationProblem(
                            f"report for run {record.run_id} not written ({error.strerror or error}); "
                            f"trying again in {backoff.delay:g} s"
                        ))
                    if self._stopping.wait(backoff.delay):
                        self._emit(StationProblem(f"report for run {record.run_id} not written: the station stopped"))
                        break
        self._emit(
            RunProcessed(
                record.run_id, record.version, record.path, record.status,
                record.verdict, record.species, record.error, folder, record.reasons,
            )
        )

    def _record_redo(self, outcome: JobOutcome, info: _InFlight) -> None:
        """A reprocessed run: a new version with the request stored beside it."""
        assert info.reprocess_of is not None and info.answer is not None and info.requested is not None
        conn = self.store.conn()
        if outcome.failed or outcome.result is None:
            reason = outcome.reason or "no result"
            record = record_redo(conn, info.reprocess_of, info.requested, None, failure=reason, provenance=info.provenance)
            info.answer["run_id"] = record.run_id
            self._emit(RunFailed(record.run_id, record.version, record.path, reason))
            return
        record = record_redo(conn, info.reprocess_of, info.requested, outcome.result, outcome.result_json, provenance=info.provenance)
        info.answer["run_id"] = record.run_id
        self._report_and_announce(record, outcome.result, outcome.result_json, outcome.lines_csv, outcome.summary_body,
                                  outcome.staged)
