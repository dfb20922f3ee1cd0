"""Analysis functions that misbehave on purpose, for the reprocess tests (imported by name in
the pool's worker processes: this folder is on their import path)."""
from __future__ import annotations

import os
from pathlib import Path

from processing.pipeline import ProcessSettings, RunResult, process_file


def crash_on_name(path: str, settings: ProcessSettings) -> RunResult:
    """The real analysis, except that a file named *crash* kills its worker process."""
    if "crash" in Path(path).name:
        os._exit(3)
    return process_file(path, settings)


def pretend_another_analysis() -> None:
    """Run on a cluster worker: it now says it runs another analysis version."""
    from processing.reprocess import cluster

    cluster.analysis_version = lambda: "0.0.0+another"


def back_to_this_analysis() -> None:
    from processing.provenance import analysis_version
    from processing.reprocess import cluster

    cluster.analysis_version = analysis_version
