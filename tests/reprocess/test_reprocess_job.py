"""The job's rules whatever runs the analyses: lost tasks are not recorded and come back next
time, a backend that breaks stops the job, one reprocess per data folder."""
from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import pytest
from reprocess_support import versions_by_path, write_archive

from processing.pipeline import ProcessSettings, process_file
from processing.reprocess import plan
from processing.reprocess.job import JobOptions, ReprocessError, ReprocessJob, reprocess_lock
from processing.reprocess.outcome import Outcome
from processing.reprocess.plan import Task
from processing.reprocess.selection import PathSelection
from processing.reprocess.summary import ReprocessSummary
from processing.results import to_json
from processing.station import ledger


class InProcess:
    """A backend that analyses here, one file per take; loses the files named in `lose` (as a
    cluster loses a task) and breaks after `break_after` outcomes."""

    name = "test"

    def __init__(self, lose: tuple[str, ...] = (), break_after: int | None = None) -> None:
        self.lose = lose
        self.break_after = break_after
        self.waiting: list[Task] = []
        self.given = 0

    def capacity(self) -> int:
        return 3

    def submit(self, tasks: Sequence[Task]) -> None:
        self.waiting.extend(tasks)

    def take(self, timeout: float) -> list[Outcome]:
        if not self.waiting:
            return []
        task = self.waiting.pop(0)
        self.given += 1
        if any(word in task.path for word in self.lose):
            return [Outcome(task.seq, lost="KilledWorker: the task killed 3 workers (test)")]
        result = process_file(task.path, task.settings)
        return [Outcome(task.seq, result, to_json(result))]

    @property
    def broken(self) -> str | None:
        if self.break_after is not None and self.given >= self.break_after:
            return "lost the Dask scheduler (client closed) (test)"
        return None

    def close(self) -> None:
        self.waiting.clear()


def _run(data: Path, archive: Path, backend: InProcess) -> ReprocessSummary:
    conn = ledger.open_ledger(data)
    try:
        return ReprocessJob(conn, JobOptions(data, ProcessSettings()), backend).run(PathSelection((str(archive),)).candidates())
    finally:
        conn.close()


def test_a_lost_task_is_not_recorded_and_is_taken_again_next_time(tmp_path: Path) -> None:
    archive, data = tmp_path / "archive", tmp_path / "data"
    write_archive(archive, 5)
    summary = _run(data, archive, InProcess(lose=("run-00003",)))
    assert (summary.recorded, summary.not_recorded, summary.failed) == (4, 1, 0)
    assert summary.lost[0].path.endswith("run-00003.csv") and "KilledWorker" in summary.lost[0].reason
    assert not summary.complete and summary.total == 5
    assert len(versions_by_path(data)) == 4
    again = _run(data, archive, InProcess())
    assert again.reasons == {plan.NEW: 1} and again.recorded == 1 and again.skipped == 4
    assert set(versions_by_path(data).values()) == {1} and len(versions_by_path(data)) == 5


def test_a_backend_that_breaks_stops_the_job_with_its_reason(tmp_path: Path) -> None:
    archive, data = tmp_path / "archive", tmp_path / "data"
    write_archive(archive, 8)
    summary = _run(data, archive, InProcess(break_after=2))
    assert summary.stopped == "lost the Dask scheduler (client closed) (test)"
    assert summary.recorded == 2 and not summary.complete and summary.total is None


def test_one_reprocess_per_data_folder(tmp_path: Path) -> None:
    with reprocess_lock(tmp_path / "data"):
        with pytest.raises(ReprocessError, match="another reprocess is running"):
            with reprocess_lock(tmp_path / "data"):
                pass
    with reprocess_lock(tmp_path / "data"):
        pass  # free again
