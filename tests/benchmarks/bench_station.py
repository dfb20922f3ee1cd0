"""Station speed (plain script: `python tests/benchmarks/bench_station.py`).

1. Latency: a 64k-point spectrum (simulated HCl 1-0 band, CSV, ~2.3 MB) is written into the
   watched folder and closed; the clock stops when its run is in the ledger (the station's
   RunProcessed event fires after the ledger commit and the report files). Default settle time
   0.5 s included. Targets: median < 1 s, p95 < settle + 100 ms (analysis included); the
   same-run baseline is `process_file` on the same file in this process.
2. Throughput: a burst of 200 64k-point spectra written at once, 2 workers; files per second
   from the first write to the last run in the ledger (in the burst's backlog the station lets
   outcomes gather for up to 0.1 s to record them in one ledger transaction: included).
   Baseline: the same files through `process_file` one after another in this process, doing a
   worker's work per file: with the fast-text extra polars reads, on one thread as in each
   worker (POLARS_MAX_THREADS=1, set here before polars is imported). Target: ratio >= 1.7,
   the two workers' speed-up over one. For reference, a loop in a fresh process with polars'
   own thread count (its reader then spreads over both cores while it parses: a user's own
   loop) is timed too.
3. The station process's own CPU during the burst (this process: watcher, settling, ledger,
   reports) against all CPU used (this process + its worker processes, read from /proc).
   Target: under 5 %. The instrument's own work in this process is left out as far as it can
   be: the writes of the burst (the writing thread's CPU is subtracted), and the thread waiting
   for the runs is woken once, when the last one is in (`Arrivals`).
Reports medians, p95 and ratios (station / baseline), and the load average.
"""
from __future__ import annotations

import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

# The sequential baseline does one worker's work on one core: polars (the fast-text extra)
# on one thread, as `worker.warm_up` sets it in each worker. Set before anything imports it.
os.environ.setdefault("POLARS_MAX_THREADS", "1")

from processing.pipeline import process_file
from processing.readers.delimited import polars_module
from processing.station import ledger
from processing.station.config import StationConfig
from processing.station.events import RunProcessed, StationEvent
from processing.station.station import Station

LATENCY_TRIALS = 20
BURST_FILES = 200
TARGET_LATENCY_SECONDS = 1.0


def simulate(path: Path, resolution_cm1: float, first_last: str, seed: int) -> bytes:
    subprocess.run(
        [sys.executable, "-m", "tui", "simulate", "-o", str(path), "--species", "HCl",
         "--resolution", str(resolution_cm1), "--range", first_last, "--format", "csv", "--seed", str(seed)],
        check=True, capture_output=True,
    )
    return path.read_bytes()


class Arrivals:
    """perf_counter time of each RunProcessed event, by file name. The waiting thread is woken
    once, when the last awaited name arrives (it runs in the station's process: woken at every
    event and comparing sets of up to 200 names each time, it was ~0.05 ms of the "station's"
    CPU per file in the burst, the instrument's cost, not the station's)."""

    def __init__(self) -> None:
        self.times: dict[str, float] = {}
        self.statuses: dict[str, str] = {}
        self.changed = threading.Condition()
        self._awaited: set[str] = set()

    def __call__(self, event: StationEvent) -> None:
        if isinstance(event, RunProcessed):
            name = os.path.basename(event.path)
            with self.changed:
                self.times[name] = time.perf_counter()
                self.statuses[name] = event.status
                self._awaited.discard(name)
                if not self._awaited:
                    self.changed.notify_all()

    def wait_for(self, names: set[str], timeout: float) -> bool:
        with self.changed:
            self._awaited = names - set(self.times)
            return self.changed.wait_for(lambda: not self._awaited, timeout)


def _cpu_seconds(pid: int | str) -> float:
    """user + system CPU seconds of a process from /proc (Linux)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def _children() -> list[str]:
    pids: list[str] = []
    for task in Path("/proc/self/task").iterdir():
        try:
            pids += (task / "children").read_text().split()
        except OSError:
            continue
    return pids


def cpu_split() -> tuple[float, dict[str, float]]:
    """(this process's CPU seconds, {child pid: CPU seconds})."""
    children = {}
    for pid in _children():
        try:
            children[pid] = _cpu_seconds(pid)
        except (OSError, IndexError, ValueError):
            continue
    return _cpu_seconds("self"), children


def reader_in_use() -> str:
    """Which delimited-text parser `process_file` uses in this process for a 2 MB file."""
    return "polars" if "polars" in sys.modules else "numpy's reader"


def loop_in_fresh_process(paths: list[Path]) -> float:
    """Seconds per file of `process_file` over `paths` in a fresh process whose polars (when
    installed) has its own thread count, after 5 files to warm up."""
    code = (
        "import sys, time\n"
        "from processing.pipeline import process_file\n"
        "from processing.readers import delimited\n"
        "delimited.polars_module(delimited.POLARS_IMPORT_BYTES)\n"
        "paths = sys.argv[1:]\n"
        "for path in paths[:5]:\n"
        "    process_file(path)\n"
        "start = time.perf_counter()\n"
        "for path in paths:\n"
        "    process_file(path)\n"
        "print((time.perf_counter() - start) / len(paths))\n"
    )
    environment = {key: value for key, value in os.environ.items() if key != "POLARS_MAX_THREADS"}
    done = subprocess.run([sys.executable, "-c", code, *map(str, paths)], env=environment,
                          capture_output=True, text=True, check=True)
    return float(done.stdout.split()[-1])


def write_closed(path: Path, data: bytes) -> float:
    """Write and close like an exporter; returns the time of the close."""
    with open(path, "wb") as handle:
        handle.write(data)
    return time.perf_counter()


def median_time(function, repeats: int) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> int:
    work = Path(tempfile.mkdtemp(prefix="bandwatch-bench-"))
    try:
        return run(work)
    finally:
        shutil.rmtree(work, ignore_errors=True)


def run(work: Path) -> int:
    source = work / "source"
    source.mkdir()
    big = simulate(source / "big.csv", 0.0428, "2500:3200", 1)
    points = big.count(b"\n") - 1
    print(f"latency and burst file: {points} points, {len(big) / 1e6:.1f} MB")

    # ---- baselines, same run, this process
    process_file(source / "big.csv")  # warm imports and caches, as the workers do at start
    base_big = median_time(lambda: process_file(source / "big.csv"), 5)
    result = process_file(source / "big.csv")
    print(f"baseline process_file (64k points) median {base_big * 1e3:.0f} ms  "
          f"[{len(result.lines)} lines, species {','.join(result.to_dict().get('species_found') or []) or '-'}]")

    # ---- latency
    export, data = work / "export", work / "data"
    export.mkdir()
    arrivals = Arrivals()
    config = StationConfig(export_folder=export, data_folder=data, workers=2)  # default settle 0.5 s
    station = Station(config, on_event=arrivals)
    station.start()
    failures = 0
    try:
        time.sleep(1.0)  # workers up
        latencies = []
        for trial in range(LATENCY_TRIALS):
            name = f"latency{trial:02d}.csv"
            closed = write_closed(export / name, big)
            if not arrivals.wait_for({name}, 30):
                print(f"  {name}: no result within 30 s")
                failures += 1
                continue
            latencies.append(arrivals.times[name] - closed)
            time.sleep(0.2)
        conn = ledger.open_ledger(data)
        in_ledger = [r for r in ledger.list_runs(conn, with_result=False) if r.name.startswith("latency")]
        conn.close()
        assert len(in_ledger) == LATENCY_TRIALS and all(r.status == "processed" for r in in_ledger)
        median_latency = statistics.median(latencies)
        p95_latency = statistics.quantiles(latencies, n=20)[-1]
        print(f"latency p95 {p95_latency * 1e3:.0f} ms; target p95 < settle + 100 ms = "
              f"{(config.settle_seconds + 0.1) * 1e3:.0f} ms: "
              f"{'met' if p95_latency < config.settle_seconds + 0.1 else 'NOT met'}")
        print(
            f"latency close -> in ledger: median {median_latency * 1e3:.0f} ms "
            f"(min {min(latencies) * 1e3:.0f}, max {max(latencies) * 1e3:.0f}; {len(latencies)} trials; "
            f"settle {config.settle_seconds:g} s included)"
        )
        print(
            f"  station overhead beyond settle + analysis: "
            f"{(median_latency - config.settle_seconds - base_big) * 1e3:.0f} ms; "
            f"ratio latency / (settle + process_file) = {median_latency / (config.settle_seconds + base_big):.2f}"
        )

        # ---- throughput
        burst_source = source / "burst"
        burst_source.mkdir()
        names = [f"burst{index:03d}.csv" for index in range(BURST_FILES)]
        for name in names:
            (burst_source / name).write_bytes(big)
        own_before, children_before = cpu_split()
        start = time.perf_counter()
        writer_before = time.thread_time()
        for name in names:
            write_closed(export / name, big)
        writer_cpu = time.thread_time() - writer_before  # the instrument's writes, not the station's work
        written = time.perf_counter()
        if not arrivals.wait_for(set(names), 600):
            print("  burst: not all files finished within 600 s")
            failures += 1
        end = max(arrivals.times[name] for name in names if name in arrivals.times)
        own_after, children_after = cpu_split()
        own = own_after - own_before - writer_cpu
        workers = sum(children_after[pid] - children_before.get(pid, 0.0) for pid in children_after)
        station_share = own / max(own + workers, 1e-9)
        rate = BURST_FILES / (end - start)
        print(f"station process CPU during the burst: {own:.2f} s of {own + workers:.2f} s in all "
              f"({100 * station_share:.1f} %; target < 5 %)")
        print(f"burst of {BURST_FILES} 64k-point files: written in {(written - start) * 1e3:.0f} ms, all in the ledger after "
              f"{end - start:.2f} s -> {rate:.1f} files/s on {config.workers} workers (settle included)")
        # While the backlog lasts: from the first run in the ledger to the last (the settle wait
        # of 0.5 s before the first, and the writing, left out): the two workers' own pace.
        arrived = sorted(arrivals.times[name] for name in names if name in arrivals.times)
        flowing = (len(arrived) - 1) / (arrived[-1] - arrived[0]) if len(arrived) > 1 and arrived[-1] > arrived[0] else rate
        print(f"  from the first run in the ledger to the last: {flowing:.1f} files/s")
        bad = [name for name in names if arrivals.statuses.get(name) != "processed"]
        if bad:
            print(f"  {len(bad)} burst files not processed: {bad[:3]}")
            failures += 1
    finally:
        station.stop()

    polars_module()  # the workers read with polars when the fast-text extra is installed: so does this loop
    sequential = median_time(
        lambda: [process_file(burst_source / name) for name in names[:50]], 1
    ) / 50  # the same analysis per file as the burst's
    base_rate = 1 / sequential
    print(f"baseline process_file one after another, a worker's work on one core: {base_rate:.1f} files/s "
          f"({sequential * 1e3:.1f} ms per file, 50 files; {reader_in_use()})")
    print(f"throughput ratio station / sequential baseline = {rate / base_rate:.2f} "
          f"(target >= 1.7; ideal on {os.cpu_count()} cores with {config.workers} workers: {config.workers:.0f}, less settle time)")
    print(f"  the same while the backlog lasts (settle and writing left out): {flowing / base_rate:.2f}; the ratio with "
          f"settle is at most ({BURST_FILES} x {sequential * 1e3:.1f} ms) / (0.5 s + {BURST_FILES} x "
          f"{sequential * 1e3:.1f} ms / {config.workers}) = "
          f"{BURST_FILES * sequential / (0.5 + BURST_FILES * sequential / config.workers):.2f} even with no cost "
          f"to write, watch or record")
    threaded = loop_in_fresh_process([burst_source / name for name in names[:50]])
    print(f"for reference, the loop in a fresh process with polars' own threads: {1 / threaded:.1f} files/s "
          f"({threaded * 1e3:.1f} ms per file); station / this loop = {rate * threaded:.2f}")
    print(f"load average at end: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    ok = median_latency < TARGET_LATENCY_SECONDS and failures == 0
    print(f"target median latency < {TARGET_LATENCY_SECONDS:g} s: {'met' if ok else 'NOT met'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
