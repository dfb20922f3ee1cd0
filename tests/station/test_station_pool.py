"""The worker pool: a crash, hang, memory blow-up or exception fails one file, never the pool."""
from __future__ import annotations

import threading
import time
from pathlib import Path

from station_files import spectrum_csv, write_file

from processing.pipeline import ProcessSettings
from processing.station.pool import Job, JobOutcome, WorkerPool, describe_exit


def _run_jobs(paths: list[Path], **options: object) -> dict[str, JobOutcome]:
    outcomes: dict[str, JobOutcome] = {}
    done = threading.Event()

    def collect(outcome: JobOutcome) -> None:
        outcomes[Path(outcome.job.path).name] = outcome
        if len(outcomes) == len(paths):
            done.set()

    pool = WorkerPool(collect, function_spec="station_hooks:misbehave", **options)  # type: ignore[arg-type]
    pool.start()
    try:
        for index, path in enumerate(paths):
            pool.submit(Job(index, str(path), ProcessSettings()))
        assert done.wait(30), f"only {sorted(outcomes)} finished"
    finally:
        pool.stop()
    return outcomes


def test_crash_segfault_hang_hog_and_exception_fail_only_their_file(tmp_path: Path) -> None:
    names = ["good1.csv", "crash.csv", "good2.csv", "segv.csv", "hang.csv", "hog.csv", "raise.csv", "good3.csv"]
    paths = [write_file(tmp_path / name, spectrum_csv(200)) for name in names]
    outcomes = _run_jobs(paths, workers=2, timeout_seconds=1.5, memory_limit_mb=768)
    assert sorted(outcomes) == sorted(names)
    for name in ("good1.csv", "good2.csv", "good3.csv"):
        assert not outcomes[name].failed and outcomes[name].result.status == "processed"
    assert outcomes["crash.csv"].reason == "worker process exited with code 3"
    assert outcomes["segv.csv"].reason == "worker process killed by SIGSEGV"
    assert outcomes["hang.csv"].reason == "timed out after 1.5 s"
    assert outcomes["hang.csv"].seconds < 5  # killed at the timeout, not after its 60 s sleep
    assert outcomes["hog.csv"].reason == "out of memory (worker limit 768 MB)"
    assert outcomes["raise.csv"].reason == "analysis crashed: RuntimeError: deliberate failure"


def test_exit_descriptions() -> None:
    assert describe_exit(-9) == "worker process killed by SIGKILL (out of memory?)"
    assert describe_exit(-11) == "worker process killed by SIGSEGV"
    assert describe_exit(2) == "worker process exited with code 2"


def test_workers_that_cannot_start_are_reported_and_files_stay_queued(tmp_path: Path, monkeypatch) -> None:
    import station_hooks  # noqa: F401  (imported here before the workers' environment breaks)

    monkeypatch.setenv("BANDWATCH_TEST_BREAK_WORKERS", "1")
    outcomes: list[JobOutcome] = []
    problems: list[str] = []
    pool = WorkerPool(outcomes.append, workers=1, function_spec="station_hooks:misbehave", on_problem=problems.append)
    pool.start()
    try:
        pool.submit(Job(1, str(write_file(tmp_path / "a.csv", spectrum_csv(100))), ProcessSettings()))
        deadline = time.monotonic() + 10
        while not problems and time.monotonic() < deadline:
            time.sleep(0.05)
        time.sleep(0.3)
        assert problems and "RuntimeError: this worker cannot start (test)" in problems[0]
        assert outcomes == [] and pool.busy == 1  # not recorded as a failure of the file
    finally:
        pool.stop()


def test_a_worker_uses_polars_only_with_room_under_its_memory_limit(monkeypatch, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    """polars reserves ~370 MB of address space at import: a worker under a tight limit must
    never import it (the analysis would then fail to allocate), one at the default imports it
    at start (the fast-text extra) and reads with it. Both read a file to the same numbers."""
    import pytest

    from processing.readers import delimited, read_any
    from processing.station import worker

    pytest.importorskip("polars")
    monkeypatch.setenv("POLARS_MAX_THREADS", "1")  # as warm_up sets it; restored after the test
    path = write_file(tmp_path / "a.csv", spectrum_csv(200))
    monkeypatch.setattr(delimited, "_polars_allowed", True)
    worker.warm_up(768)
    assert delimited.polars_module(10**9) is None
    tight = read_any(path)
    monkeypatch.setattr(delimited, "_polars_allowed", True)
    worker.warm_up(2048)
    assert delimited.polars_module(0) is not None
    assert read_any(path).absorbance.tolist() == tight.absorbance.tolist()
