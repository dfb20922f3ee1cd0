"""Reprocess on this PC: the station's worker pool on every core, with the station's
protection (a crash, a hang past `timeout_seconds` or a memory blow-up past `memory_limit_mb`
fails that file with the reason; the others go on)."""
from __future__ import annotations

import os
import queue
import time
from collections.abc import Sequence

from processing.reprocess.outcome import Outcome
from processing.reprocess.plan import Task
from processing.station.pool import Job, JobOutcome, WorkerPool

QUEUED_PER_WORKER = 2  # files waiting per pool process, so none idles while the client records
START_PATIENCE_SECONDS = 60.0  # pool processes failing to start for this long, nothing done: give up


def all_cores() -> int:
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)


class LocalBackend:
    name = "local"

    def __init__(self, workers: int, function_spec: str, timeout_seconds: float, memory_limit_mb: int) -> None:
        self.workers = workers
        self._arrived: queue.SimpleQueue[JobOutcome] = queue.SimpleQueue()
        self.problems: list[str] = []
        self._pool = WorkerPool(
            self._arrived.put, workers=workers, function_spec=function_spec,
            timeout_seconds=timeout_seconds, memory_limit_mb=memory_limit_mb, on_problem=self.problems.append,
        )
        self._last_arrival = time.monotonic()
        self._pool.start()

    def capacity(self) -> int:
        return self.workers * (1 + QUEUED_PER_WORKER)

    def submit(self, tasks: Sequence[Task]) -> None:
        for task in tasks:
            self._pool.submit(Job(task.seq, task.path, task.settings))

    def take(self, timeout: float) -> list[Outcome]:
        try:
            first = self._arrived.get(timeout=timeout)
        except queue.Empty:
            return []
        self._last_arrival = time.monotonic()
        found = [first]
        while True:
            try:
                found.append(self._arrived.get_nowait())
            except queue.Empty:
                break
        return [Outcome(item.job.job_id, item.result, item.result_json, item.reason) for item in found]

    @property
    def broken(self) -> str | None:
        """Pool processes that cannot start keep files queued (the station's rule); when
        nothing came back for a minute meanwhile, the job stops with their reason."""
        if self.problems and time.monotonic() - self._last_arrival > START_PATIENCE_SECONDS:
            return self.problems[-1]
        return None

    def close(self) -> None:
        self._pool.stop()
