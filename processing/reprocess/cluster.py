"""Reprocess on a Dask cluster: workers read the files from a shared path and return results;
only this client writes the ledger.

Files go out in small batches (one Dask task each) with a bounded number in flight, so a
million-file archive streams: the client never holds the whole list, nor all futures. Dask
reruns the tasks of a worker that dies on another worker; the client records each file when
its task's result arrives, once (it checks the ledger before recording). On each cluster
worker the files are analysed in the station's worker pool (`guarded`), so a file that
crashes, hangs or eats memory fails alone, with the station's reason, as it would here.

Dask is an optional extra: `pip install 'bandwatch[cluster]'`.
"""
from __future__ import annotations

import queue
import time
import uuid
from collections.abc import Sequence
from dataclasses import replace
from typing import TYPE_CHECKING, Any

from processing.errors import BandwatchError
from processing.pipeline import ProcessSettings
from processing.provenance import analysis_version, library_hash
from processing.reprocess.guarded import PoolSpec, PoolUnavailable, runner_for
from processing.reprocess.outcome import Outcome
from processing.reprocess.plan import Task

if TYPE_CHECKING:
    from distributed import Client, Future

INSTALL_HINT = "the cluster mode needs Dask: pip install 'bandwatch[cluster]'"
BATCH_FILES = 4  # files per Dask task: fewer tasks for the scheduler, little lost with a worker
BATCHES_PER_THREAD = 2  # in flight per worker thread: one running, one waiting
WORKER_WAIT_SECONDS = 60.0
CAPACITY_REFRESH_SECONDS = 2.0

Answer = tuple[int, Any, str | None, str | None, tuple[str, str]]  # seq, RunResult | None, JSON, failure, made with


class ClusterUnavailable(BandwatchError):
    """Dask missing, or a scheduler that cannot be reached or has no workers."""


def require_dask() -> None:
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise ClusterUnavailable(INSTALL_HINT) from None


def connect(address: str, timeout_seconds: float = 30.0) -> Client:
    """A client of the scheduler at `address` (tcp://host:8786), with at least one worker."""
    require_dask()
    from distributed import Client

    try:
        client = Client(address, timeout=timeout_seconds, set_as_default=False)
    except (OSError, TimeoutError) as error:
        raise ClusterUnavailable(f"cannot reach the Dask scheduler at {address} ({error})") from None
    try:
        client.wait_for_workers(1, timeout=WORKER_WAIT_SECONDS)
    except (OSError, TimeoutError):
        client.close()
        raise ClusterUnavailable(f"the Dask scheduler at {address} has no workers (start some with `dask worker {address}`)") from None
    return client


def analyse_batch(items: list[tuple[int, str, ProcessSettings]], spec: PoolSpec) -> list[Answer]:
    """On a cluster worker: each file through this worker's station pool (as many pool
    processes as the worker has threads); what it ran with comes back beside each result."""
    from distributed import get_worker

    worker = get_worker()
    threads = int(getattr(getattr(worker, "state", worker), "nthreads", 1) or 1)
    runner = runner_for(replace(spec, workers=max(1, threads)))
    answers: list[Answer] = []
    for seq, path, settings in items:
        outcome = runner.run(path, settings)
        made_with = (analysis_version(), library_hash(settings.library_file))
        answers.append((seq, outcome.result, outcome.result_json, outcome.reason, made_with))
    return answers


class ClusterBackend:
    name = "cluster"

    def __init__(self, client: Client, spec: PoolSpec, batch_files: int = BATCH_FILES, owns_client: bool = False) -> None:
        self.client = client
        self.spec = spec
        self.batch_files = max(1, batch_files)
        self.owns_client = owns_client
        self._token = uuid.uuid4().hex[:12]
        self._futures: dict[str, tuple[Future, tuple[int, ...]]] = {}
        self._done: queue.SimpleQueue[str] = queue.SimpleQueue()
        self._capacity = self.batch_files * BATCHES_PER_THREAD
        self._capacity_at = 0.0

    def threads(self) -> int:
        workers = self.client.scheduler_info().get("workers", {})
        return sum(int(info.get("nthreads", 1)) for info in workers.values())

    def capacity(self) -> int:
        """Files in flight: two batches per worker thread the cluster has now."""
        now = time.monotonic()
        if now - self._capacity_at > CAPACITY_REFRESH_SECONDS:
            self._capacity_at = now
            self._capacity = self.batch_files * BATCHES_PER_THREAD * max(1, self.threads())
        return self._capacity

    def submit(self, tasks: Sequence[Task]) -> None:
        for start in range(0, len(tasks), self.batch_files):
            group = tasks[start:start + self.batch_files]
            key = f"bandwatch-reprocess-{self._token}-{group[0].seq}"
            items = [(task.seq, task.path, task.settings) for task in group]
            future = self.client.submit(analyse_batch, items, self.spec, key=key, pure=False)
            self._futures[key] = (future, tuple(task.seq for task in group))
            future.add_done_callback(lambda done: self._done.put(done.key))

    def take(self, timeout: float) -> list[Outcome]:
        try:
            key = self._done.get(timeout=timeout)
        except queue.Empty:
            return []
        future, seqs = self._futures.pop(key)
        try:
            answers = future.result()
        except PoolUnavailable as error:
            return [Outcome(seq, lost=f"the cluster worker's analysis processes could not start: {error}") for seq in seqs]
        except Exception as error:  # the task was lost (worker deaths, cancelled, connection gone): not recorded
            return [Outcome(seq, lost=f"{type(error).__name__}: {error}") for seq in seqs]
        finally:
            future.release()
        return [Outcome(seq, result, text, failure, made_with=made_with) for seq, result, text, failure, made_with in answers]

    @property
    def broken(self) -> str | None:
        status = getattr(self.client, "status", "running")
        if status not in ("running", "connecting"):
            return f"lost the Dask scheduler (client {status})"
        return None

    def close(self) -> None:
        futures = [future for future, _ in self._futures.values()]
        self._futures.clear()
        if futures:
            try:
                self.client.cancel(futures)
            except (OSError, RuntimeError, TimeoutError):
                pass  # the cluster is gone already; nothing is recorded either way
        if self.owns_client:
            self.client.close()
