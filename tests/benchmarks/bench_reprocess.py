"""Reprocess speed and the client's memory (plain script: `python tests/benchmarks/bench_reprocess.py`).

1. Files per second over the same archive (small simulated HCl spectra, ~13 ms of analysis
   each), each into a fresh ledger:
   - sequential: `process_file` one after another in this process, nothing recorded (the baseline);
   - local pool: `bandwatch reprocess` on this PC, the station's pool on every core, recorded;
   - LocalCluster: a Dask cluster of 2 worker processes x 1 thread on this machine, recorded.
   Ratios are against the sequential baseline of the same run (the machine is shared).
2. The client's memory while 20,000 small files stream through the local pool: its resident
   size sampled every 1,000 files. The workers return a real result re-labelled for each file
   (`replayed_result`), so the client's work per file (planning, the ledger query, recording the
   run and its quantities) is the real one while the workers skip the fitting; `--real` makes
   them analyse every file (about 13 ms x 20,000 / cores longer).
Options: --files N (part 1, default 300), --stream N (part 2, default 20000), --skip-cluster.
"""
from __future__ import annotations

import argparse
import functools
import hashlib
import os
import shutil
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "reprocess"))
sys.path.insert(0, str(HERE))  # this module, by name, in the pool's processes

from archive_files import write_archive  # noqa: E402

from processing.pipeline import ProcessSettings, RunResult, process_file  # noqa: E402
from processing.reprocess.job import JobOptions, ReprocessJob  # noqa: E402
from processing.reprocess.local import LocalBackend, all_cores  # noqa: E402
from processing.reprocess.selection import PathSelection  # noqa: E402
from processing.reprocess.summary import Progress, ReprocessSummary  # noqa: E402
from processing.station import ledger  # noqa: E402

PROCESS = "processing.pipeline:process_file"
REPLAYED = "bench_reprocess:replayed_result"


@functools.lru_cache(maxsize=1)
def _template_result(template: str) -> RunResult:
    return process_file(template)


def replayed_result(path: str, settings: ProcessSettings) -> RunResult:
    """A worker function for the memory run: the file is read and hashed, and the result of
    one real analysis (made once per process) is returned as this file's."""
    data = Path(path).read_bytes()
    template = os.environ["BANDWATCH_BENCH_TEMPLATE"]
    return replace(_template_result(template), file=path, sha256=hashlib.sha256(data).hexdigest())


def rss_mb() -> float:
    """This process's resident set size (Linux /proc)."""
    with open("/proc/self/status", encoding="ascii") as status:
        for line in status:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    return float("nan")


def load() -> str:
    return " ".join(f"{value:.2f}" for value in os.getloadavg())


def reprocess(data: Path, archive: Path, backend, on_progress=None) -> tuple[ReprocessSummary, float]:  # noqa: ANN001
    conn = ledger.open_ledger(data)
    try:
        job = ReprocessJob(conn, JobOptions(data, ProcessSettings()), backend, on_progress=on_progress)
        start = time.perf_counter()
        summary = job.run(PathSelection((str(archive),)).candidates())
        return summary, time.perf_counter() - start
    finally:
        backend.close()
        conn.close()


def throughput(work: Path, files: int, with_cluster: bool) -> None:
    archive = work / "archive"
    paths = write_archive(archive, files)
    process_file(paths[0])  # imports and the library parsed, as a worker does at start
    start = time.perf_counter()
    for path in paths:
        process_file(path)
    sequential = files / (time.perf_counter() - start)
    print(f"{files} files (~{paths[0].stat().st_size / 1024:.0f} KB, simulated HCl at 4 cm-1); {all_cores()} cores; load {load()}")
    print(f"  sequential process_file, nothing recorded   {sequential:7.1f} files/s   1.00x")

    summary, seconds = reprocess(work / "data-local", archive, LocalBackend(all_cores(), PROCESS, 60.0, 2048))
    assert summary.recorded == files, summary
    local = files / seconds
    print(f"  local pool ({all_cores()} workers), recorded         {local:7.1f} files/s   {local / sequential:.2f}x   load {load()}")

    if not with_cluster:
        return
    from distributed import Client, LocalCluster

    from processing.reprocess.cluster import ClusterBackend
    from processing.reprocess.guarded import PoolSpec

    started = time.perf_counter()
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
    client = Client(cluster)
    up = time.perf_counter() - started
    try:
        summary, seconds = reprocess(work / "data-cluster", archive, ClusterBackend(client, PoolSpec(1, PROCESS, 60.0, 2048)))
        assert summary.recorded == files, summary
    finally:
        client.close()
        cluster.close()
    clustered = files / seconds
    print(f"  LocalCluster (2 x 1 thread), recorded       {clustered:7.1f} files/s   {clustered / sequential:.2f}x   "
          f"({clustered / local:.2f}x the local pool; cluster start {up:.1f} s not counted)   load {load()}")


def memory(work: Path, files: int, real: bool) -> None:
    archive = work / "stream"
    started = time.perf_counter()
    paths = write_archive(archive, files)
    os.environ["BANDWATCH_BENCH_TEMPLATE"] = str(paths[0])
    print(f"\nclient memory while {files} files stream through the local pool "
          f"({'real analysis' if real else 'a real result replayed per file'}; files written in {time.perf_counter() - started:.1f} s)")
    del paths
    samples: list[tuple[int, float]] = [(0, rss_mb())]

    def sample(progress: Progress) -> None:
        if progress.done >= (len(samples)) * 1000:
            samples.append((progress.done, rss_mb()))

    backend = LocalBackend(all_cores(), PROCESS if real else REPLAYED, 60.0, 2048)
    summary, seconds = reprocess(work / "data-stream", archive, backend, on_progress=sample)
    assert summary.recorded == files, summary
    for done, mb in samples:
        print(f"  {done:6d} files done   client RSS {mb:6.1f} MB")
    half = samples[len(samples) // 2]
    last = samples[-1]
    slope = (last[1] - half[1]) / max(1, last[0] - half[0]) * 1000
    print(f"  {files / seconds:.1f} files/s; second half: {slope:+.2f} MB per 1000 files "
          f"(from {half[1]:.1f} MB at {half[0]} to {last[1]:.1f} MB at {last[0]}); load {load()}")
    # The gauge's sensitivity: what holding the file list alone would have cost.
    before = rss_mb()
    listed = list(PathSelection((str(archive),)).candidates())
    print(f"  for scale: the {len(listed)} candidates held as a list would add {rss_mb() - before:.1f} MB")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--files", type=int, default=300)
    parser.add_argument("--stream", type=int, default=20_000)
    parser.add_argument("--skip-cluster", action="store_true")
    parser.add_argument("--real", action="store_true", help="analyse every streamed file for real")
    args = parser.parse_args()
    work = Path(tempfile.mkdtemp(prefix="bandwatch-bench-reprocess-"))
    try:
        throughput(work, args.files, not args.skip_cluster)
        if args.stream:
            memory(work, args.stream, args.real)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
