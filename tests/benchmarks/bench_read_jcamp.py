"""Benchmark: bandwatch's JCAMP-DX reader against the general-purpose `jcamp` package.

Run: python tests/benchmarks/bench_read_jcamp.py [--quick]
Writes 64k- and 1M-point spectra (AFFN with 13 significant digits, DIF, and at 1M also AFFN
with repr's 17 digits) with bandwatch's writer into a temp dir,
times bandwatch (file bytes + parse, median of 5) and `jcamp.readfile` (median of 3) in the
same run, and prints medians, the speed ratio and peak traced memory of one read of each.
Then shows two valid files that `jcamp` misreads and bandwatch reads.
"""
from __future__ import annotations

import statistics
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path
from typing import Any, Callable

import numpy as np

from processing.readers import jcamp as bandwatch_jcamp
from processing.readers.jcamp_write import write_jcamp
from processing.spectrum import Spectrum

HEADER = (
    "##TITLE=pitfall\n##JCAMP-DX=4.24\n##DATA TYPE=INFRARED SPECTRUM\n##XUNITS=1/CM\n"
    "##YUNITS=ABSORBANCE\n##XFACTOR=1\n##YFACTOR=1\n"
)
# E is the SQZ digit +5 straight after the line-start X, and the last line holds only the
# DIF Y-check: X 1946..1948, Y 5434, 5435, 5436.
E_AFTER_X = HEADER + "##FIRSTX=1946\n##LASTX=1948\n##DELTAX=1\n##NPOINTS=3\n##XYDATA=(X++(Y..Y))\n1946E434JJ\n1948E436\n##END=\n"
# A DUP count of 30 (U0) on the difference J (+1): Y = 0, 1, ..., 30.
DUP_ON_DIF = HEADER + "##FIRSTX=0\n##LASTX=30\n##DELTAX=1\n##NPOINTS=31\n##XYDATA=(X++(Y..Y))\n0@JU0\n30C0\n##END=\n"


def spectrum(points: int) -> Spectrum:
    """Seeded absorbance with bands and noise on an even grid (bandwatch's own test data)."""
    rng = np.random.default_rng(2024)
    x = np.linspace(400.0, 4400.0, points)
    y = 0.05 + 0.4 * np.exp(-(((x - 2886.0) / 30.0) ** 2)) + rng.normal(0.0, 1e-3, points)
    return Spectrum.from_y(x, y, "absorbance")


def bandwatch_read(path: Path) -> Any:
    return bandwatch_jcamp.parse(path.read_bytes(), str(path))


def baseline_read(path: Path) -> Any:
    import jcamp

    reader = getattr(jcamp, "jcamp_readfile", None) or jcamp.readfile  # name differs by version
    return reader(str(path))


def median_time(function: Callable[[Path], Any], path: Path, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function(path)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def peak_memory_mb(function: Callable[[Path], Any], path: Path) -> float:
    tracemalloc.start()
    function(path)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak / 1e6


def main() -> int:
    quick = "--quick" in sys.argv
    sizes = (65_536,) if quick else (65_536, 1_000_000)
    rows = []
    with tempfile.TemporaryDirectory() as folder:
        for points in sizes:
            s = spectrum(points)
            variants = [("affn", 13), ("dif", None)]
            if points >= 1_000_000:
                variants.append(("affn", None))  # repr: 17-digit numbers, the slowest to parse
            for form, digits in variants:
                label = form if form == "dif" else f"affn{digits or '-repr'}"
                path = Path(folder) / f"bench_{points}_{label}.jdx"
                write_jcamp(path, s, form=form, digits=digits)  # type: ignore[arg-type]
                ours = median_time(bandwatch_read, path, 5)
                theirs = median_time(baseline_read, path, 3)
                rows.append(
                    (points, label, path.stat().st_size / 1e6, ours, theirs, theirs / ours,
                     peak_memory_mb(bandwatch_read, path), peak_memory_mb(baseline_read, path))
                )
        print(f"{'points':>9} {'form':>9} {'MB':>6} {'bandwatch s':>12} {'jcamp s':>9} {'ratio':>6} "
              f"{'bw peak MB':>10} {'jcamp peak MB':>13}")
        for points, form, size, ours, theirs, ratio, our_mem, their_mem in rows:
            print(f"{points:>9} {form:>9} {size:>6.1f} {ours:>12.4f} {theirs:>9.4f} {ratio:>6.1f} "
                  f"{our_mem:>10.1f} {their_mem:>13.1f}")
        print("\nvalid files the jcamp package misreads:")
        for name, text, expected in (
            ("E (SQZ +5) right after the line-start X, check-only last line", E_AFTER_X, [5434.0, 5435.0, 5436.0]),
            ("DUP count of 10+ on a DIF difference (J U0)", DUP_ON_DIF, [float(v) for v in range(31)]),
        ):
            path = Path(folder) / "pitfall.jdx"
            path.write_text(text)
            ours = bandwatch_read(path)
            ok = ours.absorbance.tolist() == sorted(expected) or ours.absorbance[::-1].tolist() == expected
            try:
                theirs = baseline_read(path)
                their_y = [float(v) for v in theirs["y"]]
                verdict = "correct" if their_y == expected else f"wrong: {len(their_y)} values {their_y[:6]}"
            except Exception as error:  # the baseline's failure is what we show
                verdict = f"raised {type(error).__name__}: {error}"
            print(f"- {name}\n    bandwatch: {'correct' if ok else 'WRONG'} ({ours.points} points)\n    jcamp:     {verdict}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
