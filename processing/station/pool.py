"""A supervised pool of worker processes: one bad file never stops the station.

Each worker is a fresh interpreter (`python -m processing.station.worker`) with its own pipes, so the supervisor knows which file each
worker holds. A worker that dies (segfault, os._exit, the kernel's OOM killer) or runs past the
timeout is killed and replaced, and only its own file is reported as failed with the reason;
the others carry on. Workers run under an address-space limit (RLIMIT_AS), so a memory blow-up
becomes a MemoryError in that worker instead of starving the machine.
"""
from __future__ import annotations

import functools
import os
import pickle
import select
import signal
import subprocess
import sys
import threading
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from multiprocessing.connection import Connection

from processing.pipeline import ProcessSettings
from processing.results import RunResult
from processing.run_digest import RunDigest
from processing.station.worker import resolve_function

__all__ = ["Job", "JobOutcome", "WorkerPool", "describe_exit", "resolve_function"]

RESTART_BACKOFF_SECONDS = 1.0
MAX_RESTART_BACKOFF_SECONDS = 30.0


@dataclass(frozen=True)
class Job:
    """One file to analyse."""

    job_id: int
    path: str
    settings: ProcessSettings
    staging: str | None = None  # where the worker writes a processed run's report files (`reports.stage_reports`)
    want_result: bool = True  # the result object too (a redo stores it); a new run is recorded from the texts


@dataclass(frozen=True)
class JobOutcome:
    """What became of a job: its result's JSON text, report texts and digest (`run_digest`),
    all made once by the worker, or a failure `reason`. The result object itself comes
    pickled and is rebuilt only when asked for (`result`): recording a run needs the digest."""

    job: Job
    result_pickle: bytes | None  # the RunResult as the worker pickled it (when the job wants it)
    reason: str | None  # set when the worker crashed, hung or ran out of memory
    seconds: float
    result_json: str | None = None
    lines_csv: str | None = None  # the lines.csv text, made by the worker too
    summary_body: str | None = None  # summary.md below its title (`result_text.summary_body`), too
    digest: RunDigest | None = None
    staged: str | None = None  # the folder with result.json and lines.csv the worker wrote, if it did

    @property
    def failed(self) -> bool:
        return self.reason is not None

    @functools.cached_property
    def result(self) -> RunResult | None:
        """The result, unpickled on first use (from the worker: trusted bytes)."""
        if self.result_pickle is None:
            return None
        found = pickle.loads(self.result_pickle)
        return found if isinstance(found, RunResult) else None


def describe_exit(exitcode: int | None) -> str:
    """A worker's exit code as words: 'killed by SIGSEGV', 'exited with code 3'."""
    if exitcode is None:
        return "vanished"
    if exitcode < 0:
        try:
            name = signal.Signals(-exitcode).name
        except ValueError:
            name = f"signal {-exitcode}"
        hint = " (out of memory?)" if name == "SIGKILL" else ""
        return f"worker process killed by {name}{hint}"
    return f"worker process exited with code {exitcode}"


class _Slot:
    """One worker process and what it is doing."""

    def __init__(self, index: int) -> None:
        self.index = index
        self.process: subprocess.Popen[bytes] | None = None
        self.outbox: Connection | None = None  # station -> worker
        self.inbox: Connection | None = None  # worker -> station (EOF = the worker is gone)
        self.ready = False
        self.retiring = False
        self.job: Job | None = None
        self.started = 0.0
        self.spawned = 0.0
        self.start_failures = 0
        self.broken_reason: str | None = None
        self.respawn_at: float | None = None


def _child_environment() -> dict[str, str]:
    """The station's environment, with its import path, so workers find the same modules."""
    env = dict(os.environ)
    paths = [entry or os.getcwd() for entry in sys.path if os.path.isdir(entry or ".")]
    env["PYTHONPATH"] = os.pathsep.join(dict.fromkeys(paths))
    for name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        env.setdefault(name, "1")
    return env


PIPE_BYTES = 1 << 20  # a worker's answer (~120 kB for a 64k-point file) in one write and one read
F_SETPIPE_SZ = 1031  # fcntl.h (Linux)


def _widen_pipe(descriptor: int) -> None:
    """Make a pipe hold a whole answer, so the worker writes it at once and the station reads it
    at once (a 64 kB pipe passes it in turns, a wake-up of each side per turn). Left as it is
    where the system refuses (a smaller pipe-max-size): only slower."""
    try:
        import fcntl

        fcntl.fcntl(descriptor, F_SETPIPE_SZ, PIPE_BYTES)
    except (ImportError, OSError):
        pass


def _readable(connections: list[Connection], timeout: float) -> list[Connection]:
    """The connections with something to read (or closed), waiting at most `timeout` seconds:
    `multiprocessing.connection.wait` in one poll call, without building a selector each time
    (the supervisor waits once or twice per file)."""
    poller = select.poll()
    by_descriptor = {}
    for connection in connections:
        descriptor = connection.fileno()
        by_descriptor[descriptor] = connection
        poller.register(descriptor, select.POLLIN)
    return [by_descriptor[descriptor] for descriptor, _ in poller.poll(max(0.0, timeout) * 1000)]


class WorkerPool:
    """Runs jobs on `workers` processes; calls `on_outcome(JobOutcome)` from its own thread."""

    def __init__(
        self,
        on_outcome: Callable[[JobOutcome], None],
        *,
        workers: int = 2,
        function_spec: str = "processing.pipeline:process_file",
        timeout_seconds: float = 60.0,
        memory_limit_mb: int = 2048,
        on_problem: Callable[[str], None] | None = None,
    ) -> None:
        resolve_function(function_spec)  # fail here, in the caller, not in every worker
        self.on_outcome = on_outcome
        self.on_problem = on_problem or (lambda message: None)
        self.function_spec = function_spec
        self.timeout_seconds = timeout_seconds
        self.memory_limit_mb = memory_limit_mb
        self._slots = [_Slot(index) for index in range(workers)]
        self._queue: deque[Job] = deque()
        self._lock = threading.Lock()
        wake_read, wake_write = os.pipe()
        self._wake_reader = Connection(wake_read, writable=False)
        self._wake_writer = Connection(wake_write, readable=False)
        self._stopping = threading.Event()
        self._thread: threading.Thread | None = None
        self._env = _child_environment()
        self.restarts = 0

    # ---------------------------------------------------------------- public

    def start(self) -> None:
        for slot in self._slots:
            self._spawn(slot)
        self._thread = threading.Thread(target=self._supervise, name="bandwatch-pool", daemon=True)
        self._thread.start()

    def submit(self, job: Job) -> None:
        """Queue a job; the supervisor is woken only when a worker is free to take it (in a
        burst none is: a worker that finishes takes the next job itself, no wake-up needed)."""
        with self._lock:
            self._queue.append(job)
            free = any(slot.ready and not slot.retiring and slot.job is None for slot in self._slots)
        if free:
            self._wake()

    @property
    def queued(self) -> int:
        """Jobs waiting for a worker (a backlog: more outcomes will follow at once)."""
        return len(self._queue)

    @property
    def busy(self) -> int:
        """Jobs queued or running."""
        with self._lock:
            return len(self._queue) + sum(1 for slot in self._slots if slot.job is not None)

    def stop(self, grace_seconds: float = 2.0) -> None:
        """Stop the workers; jobs still queued or running are abandoned (never reported)."""
        self._stopping.set()
        self._wake()
        if self._thread is not None:
            self._thread.join(timeout=grace_seconds + 5)
        for slot in self._slots:
            if slot.outbox is not None:
                try:
                    slot.outbox.send(None)
                except (OSError, ValueError):
                    pass
        deadline = time.monotonic() + grace_seconds
        for slot in self._slots:
            if slot.process is not None:
                try:
                    slot.process.wait(timeout=max(0.05, deadline - time.monotonic()))
                except subprocess.TimeoutExpired:
                    slot.process.kill()
                    slot.process.wait(timeout=2.0)
            self._close(slot)
        self._wake_reader.close()
        self._wake_writer.close()

    # ---------------------------------------------------------------- supervision

    def _wake(self) -> None:
        try:
            self._wake_writer.send_bytes(b"")
        except (OSError, ValueError):
            pass

    def _spawn(self, slot: _Slot) -> None:
        to_worker_read, to_worker_write = os.pipe()
        from_worker_read, from_worker_write = os.pipe()
        command = [
            sys.executable, "-m", "processing.station.worker",
            str(to_worker_read), str(from_worker_write), self.function_spec, str(self.memory_limit_mb),
        ]
        try:
            slot.process = subprocess.Popen(
                command, pass_fds=(to_worker_read, from_worker_write), env=self._env,
                stdin=subprocess.DEVNULL, start_new_session=False,
            )
        finally:
            os.close(to_worker_read)
            os.close(from_worker_write)
        _widen_pipe(from_worker_read)
        slot.outbox = Connection(to_worker_write, readable=False)
        slot.inbox = Connection(from_worker_read, writable=False)
        slot.ready = slot.retiring = False
        slot.broken_reason = None
        slot.job = None
        slot.spawned = time.monotonic()

    @staticmethod
    def _close(slot: _Slot) -> None:
        for conn in (slot.outbox, slot.inbox):
            if conn is not None:
                conn.close()
        slot.outbox = slot.inbox = None

    def _supervise(self) -> None:
        while not self._stopping.is_set():
            self._respawn_due()
            self._assign()
            waitables: list[Connection] = [self._wake_reader]
            waitables += [slot.inbox for slot in self._slots if slot.inbox is not None]
            for ready in _readable(waitables, self._next_timeout()):
                if ready is self._wake_reader:
                    self._drain_wake()
                    continue
                for slot in self._slots:
                    if ready is slot.inbox and not self._receive(slot):
                        self._reap(slot)
            self._check_deadlines()

    def _drain_wake(self) -> None:
        try:
            while self._wake_reader.poll():
                self._wake_reader.recv_bytes()
        except (EOFError, OSError):
            pass

    def _next_timeout(self) -> float:
        now = time.monotonic()
        waits = [0.5]
        waits += [slot.respawn_at - now for slot in self._slots if slot.respawn_at is not None]
        for slot in self._slots:
            if slot.job is not None:
                waits.append(slot.started + self.timeout_seconds - now)
        return max(0.01, min(waits))

    def _assign(self) -> None:
        with self._lock:
            for slot in self._slots:
                if not self._queue:
                    return
                if slot.ready and not slot.retiring and slot.job is None and slot.outbox is not None:
                    job = self._queue.popleft()
                    try:
                        slot.outbox.send((job.job_id, job.path, job.settings, job.staging, job.want_result))
                    except (OSError, ValueError):
                        self._queue.appendleft(job)  # the worker died; its EOF replaces it
                        continue
                    slot.job, slot.started = job, time.monotonic()

    def _receive(self, slot: _Slot) -> bool:
        """Handle one message from a worker; False when its pipe is closed (it exited)."""
        assert slot.inbox is not None
        try:
            kind, job_id, payload = slot.inbox.recv()
        except (EOFError, OSError):
            return False
        if kind == "ready":
            slot.ready = True
            slot.start_failures = 0
            return True
        if kind == "broken":
            slot.broken_reason = str(payload)
            return True
        job = slot.job
        if job is None or job.job_id != job_id:
            return True
        with self._lock:
            slot.job = None
        seconds = time.monotonic() - slot.started
        if kind == "done":
            self._assign()  # keep the worker busy while this outcome is recorded
            result_pickle, text, lines_text, summary_text, digest, staged = payload
            self._report(JobOutcome(job, result_pickle, None, seconds, text, lines_text, summary_text, digest, staged))
        else:
            if str(payload).startswith("out of memory"):
                slot.retiring = True
            self._report(JobOutcome(job, None, str(payload), seconds))
        return True

    def _reap(self, slot: _Slot) -> None:
        """The worker's pipe closed: it exited. Report its file as failed, start another."""
        assert slot.process is not None
        try:
            exitcode: int | None = slot.process.wait(timeout=2.0)
        except subprocess.TimeoutExpired:
            slot.process.kill()
            exitcode = slot.process.wait(timeout=2.0)
        with self._lock:
            job, slot.job = slot.job, None
        if job is not None:
            self._report(JobOutcome(job, None, describe_exit(exitcode), time.monotonic() - slot.started))
        elif not slot.ready and not slot.retiring:
            # Files stay queued: a station that cannot start workers records nothing wrongly.
            slot.start_failures += 1
            why = slot.broken_reason or describe_exit(exitcode)
            self.on_problem(f"worker {slot.index} failed to start ({why}); files wait in the queue")
            backoff = min(MAX_RESTART_BACKOFF_SECONDS, RESTART_BACKOFF_SECONDS * 2 ** (slot.start_failures - 1))
            self._replace(slot, delay=backoff)
            return
        self._replace(slot)

    def _check_deadlines(self) -> None:
        now = time.monotonic()
        for slot in self._slots:
            job = slot.job
            if job is None or now - slot.started < self.timeout_seconds:
                continue
            assert slot.process is not None
            slot.process.kill()
            slot.process.wait(timeout=2.0)
            with self._lock:
                slot.job = None
            self._report(JobOutcome(job, None, f"timed out after {self.timeout_seconds:g} s", now - slot.started))
            self._replace(slot)

    def _replace(self, slot: _Slot, delay: float = 0.0) -> None:
        """A new worker in this slot, now or (after start failures) a little later."""
        self._close(slot)
        slot.process = None
        slot.ready = False
        if self._stopping.is_set():
            return
        self.restarts += 1
        if delay > 0:
            slot.respawn_at = time.monotonic() + delay
        else:
            self._spawn(slot)

    def _respawn_due(self) -> None:
        now = time.monotonic()
        for slot in self._slots:
            if slot.process is None and slot.respawn_at is not None and now >= slot.respawn_at:
                slot.respawn_at = None
                self._spawn(slot)

    def _report(self, outcome: JobOutcome) -> None:
        try:
            self.on_outcome(outcome)
        except Exception as error:  # a recording problem must not kill the supervisor
            self.on_problem(f"could not record {outcome.job.path}: {type(error).__name__}: {error}")
