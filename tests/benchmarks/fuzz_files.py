"""Long fuzz run (plain script: `python tests/benchmarks/fuzz_files.py [COUNT] [SEED]`).

COUNT (default 10,000) seeded mutations of the demo and real files (tests/fuzz_mutations.py)
go through the station's own worker pool: 2 worker processes, each file stopped after
`TIMEOUT_SECONDS` (a hang) and each worker held to `MEMORY_LIMIT_MB` of address space (a
memory blow-up becomes "out of memory"); a worker that dies is replaced. Prints one table:
clean refusals (one line naming the file), results, unclean refusals, warnings on standard
error, crashes (an exception or a dead worker), hangs, out of memory, the peak resident memory
of any worker, and the median and slowest file. The CI test runs a few hundred of the same
mutations in-process (tests/test_fuzz_files.py).
"""
from __future__ import annotations

import statistics
import sys
import tempfile
import threading
import time
from collections import Counter
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE.parent), str(HERE.parents[1])]  # fuzz_mutations, and the project

from fuzz_mutations import measurement, mutated_files, verdict_of  # noqa: E402

from processing.pipeline import ProcessSettings  # noqa: E402
from processing.station.pool import Job, JobOutcome, WorkerPool  # noqa: E402

TIMEOUT_SECONDS = 30.0
MEMORY_LIMIT_MB = 1024
WORKERS = 2


def run(count: int, seed: int) -> int:
    outcomes: dict[int, JobOutcome] = {}
    finished = threading.Event()
    lock = threading.Lock()

    def on_outcome(outcome: JobOutcome) -> None:
        with lock:
            outcomes[outcome.job.job_id] = outcome
            if len(outcomes) == count:
                finished.set()

    started = time.monotonic()
    with tempfile.TemporaryDirectory(prefix="bandwatch-fuzz-") as folder:
        pool = WorkerPool(on_outcome, workers=WORKERS, function_spec="fuzz_mutations:process_and_measure",
                          timeout_seconds=TIMEOUT_SECONDS, memory_limit_mb=MEMORY_LIMIT_MB)
        pool.start()
        names: dict[int, str] = {}
        for job_id, (name, data) in enumerate(mutated_files(count, seed), start=1):
            path = Path(folder) / name
            path.write_bytes(data)
            names[job_id] = str(path)
            pool.submit(Job(job_id, str(path), ProcessSettings()))
        finished.wait()
        pool.stop()
    wall = time.monotonic() - started

    counts: Counter[str] = Counter()
    seconds: list[float] = []
    peak_kb = 0
    examples: dict[str, str] = {}
    for job_id, outcome in sorted(outcomes.items()):
        name = Path(names[job_id]).name
        if outcome.failed:
            reason = outcome.reason or ""
            kind = ("hang" if reason.startswith("timed out") else
                    "out of memory" if reason.startswith("out of memory") else "crash")
            examples.setdefault(kind, f"{name}: {reason}")
            counts[kind] += 1
            continue
        result = outcome.result
        assert result is not None
        fuzz = measurement(result)
        seconds.append(float(fuzz.get("seconds", outcome.seconds)))
        peak_kb = max(peak_kb, int(fuzz.get("peak_kb", 0)))
        kind = verdict_of(names[job_id], result)
        if kind not in ("processed", "refused"):
            examples.setdefault(kind, f"{name}: {result.error or fuzz.get('warnings')}")
        counts[kind] += 1

    rows = [
        ("mutated files", count),
        ("clean refusals (one line naming the file)", counts["refused"]),
        ("results (processed)", counts["processed"]),
        ("unclean refusals", counts["unclean refusal"]),
        ("warnings on standard error", counts["warning"]),
        ("crashes (exception or dead worker)", counts["crash"]),
        (f"hangs (over {TIMEOUT_SECONDS:g} s)", counts["hang"]),
        (f"out of memory (worker limit {MEMORY_LIMIT_MB} MB)", counts["out of memory"]),
        ("peak resident memory of a worker", f"{peak_kb / 1024:.0f} MB"),
        ("median / slowest file", f"{statistics.median(seconds) * 1e3:.0f} ms / {max(seconds):.2f} s" if seconds else "-"),
        ("wall time (2 workers)", f"{wall:.0f} s"),
    ]
    width = max(len(label) for label, _ in rows)
    print(f"fuzz: {count} mutations, seed {seed}")
    print(f"| {'outcome'.ljust(width)} | count |")
    print(f"|{'-' * (width + 2)}|-------|")
    for label, value in rows:
        print(f"| {label.ljust(width)} | {value} |")
    for kind, example in examples.items():
        print(f"first {kind}: {example}")
    bad = counts["unclean refusal"] + counts["warning"] + counts["crash"] + counts["hang"]
    return 1 if bad else 0


if __name__ == "__main__":
    arguments = sys.argv[1:]
    sys.exit(run(int(arguments[0]) if arguments else 10_000, int(arguments[1]) if len(arguments) > 1 else 2026))
