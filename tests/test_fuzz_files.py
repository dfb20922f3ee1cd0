"""Fuzz: a few hundred seeded mutations of real and demo files (tests/fuzz_mutations.py). Each
is processed (refused in one clean line naming the file, or analysed) without an exception,
a warning on standard error, or a hang. The long run is tests/benchmarks/fuzz_files.py."""
from __future__ import annotations

import signal
from collections import Counter
from pathlib import Path


from fuzz_mutations import mutated_files, process_and_measure, verdict_of

MUTATIONS_IN_CI = 300
SEED = 13
SECONDS_PER_FILE = 10  # a hang, not a speed target: files here take ~0.03 s


class Hung(Exception):
    pass


def _alarm(signum: int, frame: object) -> None:
    raise Hung()


def test_mutated_files_are_refused_cleanly_or_processed(tmp_path: Path) -> None:
    previous = signal.signal(signal.SIGALRM, _alarm)
    outcomes: Counter[str] = Counter()
    problems: list[str] = []
    try:
        for name, data in mutated_files(MUTATIONS_IN_CI, SEED):
            path = tmp_path / name
            path.write_bytes(data)
            signal.alarm(SECONDS_PER_FILE)
            try:
                verdict = verdict_of(str(path), process_and_measure(str(path)))
            except Hung:
                verdict = "hang"
            except Exception as error:  # noqa: BLE001 - the point is to find any
                verdict = f"crash ({type(error).__name__}: {error})"
            finally:
                signal.alarm(0)
            outcomes[verdict.split(" (")[0]] += 1
            if verdict not in ("processed", "refused"):
                problems.append(f"{name}: {verdict}")
            path.unlink()
    finally:
        signal.signal(signal.SIGALRM, previous)
    assert problems == [], problems[:10]
    assert outcomes["processed"] > 20 and outcomes["refused"] > 20  # the mutations reach both ends
