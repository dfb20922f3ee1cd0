"""What comes back for one file, from the local pool or a cluster, and what a backend offers."""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Protocol

from processing.reprocess.plan import Task
from processing.results import RunResult


@dataclass(frozen=True)
class Outcome:
    """One file's outcome: a result (with its JSON text, encoded once in the pool process), or
    an analysis failure (recorded as `failed`), or `lost`: the infrastructure lost the task
    (a cluster gone, a task that killed its workers); nothing is recorded and the next
    reprocess takes the file again."""

    seq: int
    result: RunResult | None = None
    result_json: str | None = None
    failure: str | None = None
    lost: str | None = None
    made_with: tuple[str, str] | None = None  # (analysis version, library hash) where it ran, when said


class Backend(Protocol):
    """Where files are analysed: the station's pool here, or a Dask cluster."""

    name: str

    def capacity(self) -> int:
        """How many files to keep submitted (queued or running) at once."""
        ...

    def submit(self, tasks: Sequence[Task]) -> None: ...

    def take(self, timeout: float) -> list[Outcome]:
        """Outcomes that have arrived (waits up to `timeout` for the first)."""
        ...

    @property
    def broken(self) -> str | None:
        """Why no more work can be done (the cluster went away), else None."""
        ...

    def close(self) -> None:
        """Stop; work still submitted is abandoned (never recorded)."""
        ...
