"""The station's worker pool, called synchronously: one file in, its outcome out.

A cluster worker analyses each file in the station's pool (`processing.station.pool`), not in
its own process, so a file that crashes, hangs or eats memory costs one pool process (replaced)
and is reported as `failed` with the reason, exactly as on the station, instead of killing the
cluster worker and every task it holds. One pool per process, as many pool processes as the
cluster worker runs threads; each thread waits for its own file.
"""
from __future__ import annotations

import threading
from dataclasses import dataclass

from processing.pipeline import ProcessSettings
from processing.station.pool import Job, JobOutcome, WorkerPool

START_PATIENCE_SECONDS = 60.0  # beyond the timeout: pool processes that cannot start are an error


class PoolUnavailable(RuntimeError):
    """The pool's processes could not start (said with the pool's own reason)."""


@dataclass(frozen=True)
class PoolSpec:
    """What a pool is made with; one pool per process and spec."""

    workers: int
    function_spec: str
    timeout_seconds: float
    memory_limit_mb: int


class GuardedRunner:
    """`run(path, settings)` from any thread: the outcome of that file in the pool."""

    def __init__(self, spec: PoolSpec) -> None:
        self.spec = spec
        self._lock = threading.Lock()
        self._waiting: dict[int, threading.Event] = {}
        self._outcomes: dict[int, JobOutcome] = {}
        self._next_id = 0
        self.problem: str | None = None
        self._pool = WorkerPool(
            self._arrived, workers=spec.workers, function_spec=spec.function_spec,
            timeout_seconds=spec.timeout_seconds, memory_limit_mb=spec.memory_limit_mb,
            on_problem=self._said,
        )
        self._pool.start()

    def _said(self, message: str) -> None:
        self.problem = message

    def _arrived(self, outcome: JobOutcome) -> None:
        with self._lock:
            self._outcomes[outcome.job.job_id] = outcome
            event = self._waiting.get(outcome.job.job_id)
        if event is not None:
            event.set()

    def run(self, path: str, settings: ProcessSettings) -> JobOutcome:
        event = threading.Event()
        with self._lock:
            self._next_id += 1
            job = Job(self._next_id, path, settings)
            self._waiting[job.job_id] = event
        try:
            self._pool.submit(job)
            # The pool always answers (a timed-out file is killed); only pool processes that
            # cannot start leave a file waiting.
            while not event.wait(self.spec.timeout_seconds + START_PATIENCE_SECONDS):
                if self.problem is not None:
                    raise PoolUnavailable(self.problem)
            with self._lock:
                return self._outcomes.pop(job.job_id)
        finally:
            with self._lock:
                self._waiting.pop(job.job_id, None)
                self._outcomes.pop(job.job_id, None)

    def stop(self) -> None:
        self._pool.stop()


_runners: dict[PoolSpec, GuardedRunner] = {}
_runners_lock = threading.Lock()


def runner_for(spec: PoolSpec) -> GuardedRunner:
    """This process's pool for `spec`, started on first use (it lives as long as the process)."""
    with _runners_lock:
        runner = _runners.get(spec)
        if runner is None:
            runner = _runners[spec] = GuardedRunner(spec)
        return runner
