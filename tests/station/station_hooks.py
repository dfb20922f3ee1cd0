"""Processing functions that misbehave on purpose, injected into the station's workers.

Named as "station_hooks:<function>" (this folder is on sys.path under pytest and in the
subprocess tests). Each misbehaves only for files whose name contains its trigger word, and
runs the real analysis otherwise, so one test can mix good and bad files.
"""
from __future__ import annotations

import os
import signal
import time
from pathlib import Path
from typing import Any

from processing.pipeline import ProcessSettings, RunResult, process_file


def misbehave(path: str, settings: ProcessSettings) -> RunResult:
    name = Path(path).name
    if "crash" in name:
        os._exit(3)
    if "segv" in name:
        os.kill(os.getpid(), signal.SIGSEGV)
    if "hang" in name:
        time.sleep(60)
    if "hog" in name:
        import numpy as np

        hoard: list[Any] = [np.ones(16 * 1024 * 1024)]  # 128 MB really used first
        for _ in range(16):  # then 16 x 1 GB reserved (not touched): far over the test's limit
            hoard.append(np.empty(128 * 1024 * 1024))
    if "raise" in name:
        raise RuntimeError("deliberate failure")
    return process_file(path, settings)


def slow(path: str, settings: ProcessSettings) -> RunResult:
    """The real analysis, 0.4 s later: leaves time to kill the station mid-file."""
    time.sleep(0.4)
    return process_file(path, settings)


def quick(path: str, settings: ProcessSettings) -> RunResult:
    """Read and hash only (no analysis): for tests of the station's bookkeeping at volume."""
    import hashlib

    with open(path, "rb") as handle:
        data = handle.read()
    if not data.strip():
        return RunResult(file=path, status="unreadable", error=f"{path}: file is empty")
    return RunResult(file=path, status="processed", sha256=hashlib.sha256(data).hexdigest(), verdict="pass")


if os.environ.get("BANDWATCH_TEST_BREAK_WORKERS"):
    raise RuntimeError("this worker cannot start (test)")
