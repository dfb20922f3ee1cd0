"""Station speed (plain script: `python tests/benchmarks/bench_station.py`).

1. Latency: a 64k-point spectrum (simulated HCl 1-0 band, CSV, ~2.3 MB) is written into the
   watched folder and closed; the clock stops when its run is in the ledger (the station's
   RunProcessed event fires after the ledger commit and the report files). Default settle time
   0.5 s included. Target: median < 1 s.
   Baseline measured in the same run: `process_file` on the same file in this process.
2. Throughput: a burst of 200 smaller spectra (~4k points each) written at once, 2 workers;
   files per second from the first write to the last run in the ledger.
   Baseline: the same 200 files through `process_file` one after another in this process.
Reports medians and ratios (station / baseline).
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

from processing.pipeline import process_file
from processing.station import ledger
from processing.station.config import StationConfig
from processing.station.events import RunProcessed, StationEvent
from processing.station.station import Station

LATENCY_TRIALS = 9
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
    """perf_counter time of each RunProcessed event, by file name."""

    def __init__(self) -> None:
        self.times: dict[str, float] = {}
        self.statuses: dict[str, str] = {}
        self.changed = threading.Condition()

    def __call__(self, event: StationEvent) -> None:
        if isinstance(event, RunProcessed):
            with self.changed:
                self.times[Path(event.path).name] = time.perf_counter()
                self.statuses[Path(event.path).name] = event.status
                self.changed.notify_all()

    def wait_for(self, names: set[str], timeout: float) -> bool:
        with self.changed:
            return self.changed.wait_for(lambda: names <= set(self.times), timeout)


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
    small = simulate(source / "small.csv", 0.35, "2500:3200", 2)
    small_points = small.count(b"\n") - 1
    print(f"latency file: {points} points, {len(big) / 1e6:.1f} MB; burst files: {small_points} points each")

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
            (burst_source / name).write_bytes(small)
        start = time.perf_counter()
        for name in names:
            write_closed(export / name, small)
        written = time.perf_counter()
        if not arrivals.wait_for(set(names), 300):
            print("  burst: not all files finished within 300 s")
            failures += 1
        end = max(arrivals.times[name] for name in names if name in arrivals.times)
        rate = BURST_FILES / (end - start)
        print(f"burst of {BURST_FILES}: written in {(written - start) * 1e3:.0f} ms, all in the ledger after "
              f"{end - start:.2f} s -> {rate:.1f} files/s on {config.workers} workers (settle included)")
        bad = [name for name in names if arrivals.statuses.get(name) != "processed"]
        if bad:
            print(f"  {len(bad)} burst files not processed: {bad[:3]}")
            failures += 1
    finally:
        station.stop()

    sequential = median_time(
        lambda: [process_file(burst_source / name) for name in names[:50]], 1
    ) / 50
    base_rate = 1 / sequential
    print(f"baseline process_file one after another: {base_rate:.1f} files/s "
          f"({sequential * 1e3:.1f} ms per file, 50 files)")
    print(f"throughput ratio station / sequential baseline = {rate / base_rate:.2f} "
          f"(ideal on {os.cpu_count()} cores with {config.workers} workers: {config.workers:.0f}, less settle time)")
    ok = median_latency < TARGET_LATENCY_SECONDS and failures == 0
    print(f"target median latency < {TARGET_LATENCY_SECONDS:g} s: {'met' if ok else 'NOT met'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
