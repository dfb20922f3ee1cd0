"""Delimited-text read speed against numpy.loadtxt, measured in the same run.

Run: python tests/benchmarks/bench_read_delimited.py [--sizes 64000,1000000] [--repeats 5]

Writes clean CSV files in two styles (bandwatch's own writer: repr floats, up to 17 digits;
and instrument-export style: fixed 4 and 6 decimals) and a quirky export of the same
data (UTF-8 BOM, free-text first line, trailing comma on every row, CRLF, descending x),
times bandwatch (`read_any`, and `parse` on bytes already in memory) against
`numpy.loadtxt(delimiter=",", skiprows=1)` on the clean file, prints medians, ratios and peak
traced memory, and shows loadtxt refusing the quirky file that bandwatch reads.
"""
from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
import tracemalloc
from collections.abc import Callable
from pathlib import Path

import numpy as np

from processing.errors import SpectrumFileError
from processing.readers import delimited, read_any
from processing.spectrum import Spectrum


def make_spectrum(points: int) -> Spectrum:
    """A plausible absorbance trace: 0.0605 cm-1 grid from 400 cm-1, baseline 0.5, noise."""
    rng = np.random.default_rng(points)
    x = 400.0 + 0.0605 * np.arange(points)
    line = 0.3 * np.exp(-(((x - x[points // 2]) / 0.2) ** 2))
    y = 0.5 + 0.002 * rng.standard_normal(points) + line
    return Spectrum.from_y(x, y, "absorbance")


def write_quirky(path: Path, spectrum: Spectrum) -> None:
    x = spectrum.wavenumber_cm1[::-1].tolist()
    rows = map("{!r},{!r},\r\n".format, x, spectrum.absorbance[::-1].tolist())
    text = "\ufeffExported by the demo lab's bench spectrometer\r\ncm-1,A,\r\n" + "".join(rows)
    path.write_bytes(text.encode("utf-8"))


def median_time(action: Callable[[], object], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def peak_memory(action: Callable[[], object]) -> float:
    """Peak traced allocation in MB during one call (tracemalloc sees numpy buffers too)."""
    tracemalloc.start()
    try:
        action()
        return tracemalloc.get_traced_memory()[1] / 1e6
    finally:
        tracemalloc.stop()


def write_export_style(path: Path, spectrum: Spectrum) -> None:
    """Fixed decimals as instrument software often writes them: x to 4, y to 6 places."""
    x, y = spectrum.wavenumber_cm1.tolist(), spectrum.absorbance.tolist()
    path.write_text("cm-1,A\n" + "".join(map("{:.4f},{:.6f}\n".format, x, y)), encoding="utf-8")


def bench(points: int, folder: Path, repeats: int, style: str) -> dict[str, float]:
    spectrum = make_spectrum(points)
    clean = folder / f"clean_{style}_{points}.csv"
    quirky = folder / f"quirky_{points}.csv"
    if style == "repr":
        delimited.write_csv(clean, spectrum)
    else:
        write_export_style(clean, spectrum)
    data = clean.read_bytes()

    def with_loadtxt() -> np.ndarray:
        return np.loadtxt(clean, delimiter=",", skiprows=1)

    def with_read_any() -> object:
        return read_any(clean)

    def with_parse() -> object:
        return delimited.parse(data, str(clean))

    # Check before timing: both read the same numbers, bit for bit.
    table = with_loadtxt()
    ours = read_any(clean)
    assert isinstance(ours, Spectrum)
    assert np.array_equal(ours.wavenumber_cm1, table[:, 0])
    assert np.array_equal(ours.absorbance, table[:, 1])

    timings: dict[str, list[float]] = {"loadtxt": [], "read_any": [], "parse": []}
    # Interleaved rounds, so that load from other work on the machine hits all three alike.
    for _ in range(repeats):
        timings["loadtxt"].append(median_time(with_loadtxt, 1))
        timings["read_any"].append(median_time(with_read_any, 1))
        timings["parse"].append(median_time(with_parse, 1))
    result = {name: statistics.median(values) for name, values in timings.items()}
    result["mem_loadtxt"] = peak_memory(with_loadtxt)
    result["mem_read_any"] = peak_memory(with_read_any)
    result["mb"] = len(data) / 1e6
    if style != "repr":
        result["quirky_s"] = float("nan")
        return result
    write_quirky(quirky, spectrum)

    refusals = []
    for skip in (1, 2):  # 2 also skips the free-text line: the trailing commas still stop it
        try:
            np.loadtxt(quirky, delimiter=",", skiprows=skip)
            refusals.append(f"skiprows={skip}: read it (unexpected)")
        except ValueError as error:
            refusals.append(f"skiprows={skip}: {str(error).splitlines()[0][:70]}")
    loadtxt_quirky = "refused; " + "; ".join(refusals)
    try:
        read_back = read_any(quirky)
        assert isinstance(read_back, Spectrum)
        same = np.array_equal(read_back.wavenumber_cm1, spectrum.wavenumber_cm1) and np.array_equal(
            read_back.absorbance, spectrum.absorbance
        )
        ours_quirky = f"read {read_back.points} points, identical to the clean file: {same}"
        result["quirky_s"] = median_time(lambda: read_any(quirky), max(3, repeats // 2))
    except SpectrumFileError as error:
        ours_quirky = f"FAILED: {error}"
        result["quirky_s"] = float("nan")
    print(f"  quirky {points}: loadtxt {loadtxt_quirky}")
    print(f"  quirky {points}: bandwatch {ours_quirky}")
    return result


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="64000,1000000")
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args(argv)
    sizes = [int(size) for size in args.sizes.split(",")]
    repeats = max(5, args.repeats)
    rows = []
    with tempfile.TemporaryDirectory(prefix="bench_delimited_") as folder:
        for points in sizes:
            for style in ("repr", "export"):
                rows.append((points, style, bench(points, Path(folder), repeats, style)))
    print()
    print(f"medians of {repeats} interleaved runs; ratio = bandwatch / loadtxt (< 1 is faster)")
    head = (
        f"{'points':>9} {'style':>6} {'MB':>6} {'loadtxt s':>10} {'read_any s':>11} {'ratio':>6} "
        f"{'parse s':>8} {'ratio':>6} {'quirky s':>9} "
        f"{'peak MB loadtxt':>16} {'peak MB read_any':>17}"
    )
    print(head)
    print("-" * len(head))
    for points, style, r in rows:
        print(
            f"{points:>9} {style:>6} {r['mb']:>6.1f} {r['loadtxt']:>10.4f} {r['read_any']:>11.4f} "
            f"{r['read_any'] / r['loadtxt']:>6.2f} {r['parse']:>8.4f} "
            f"{r['parse'] / r['loadtxt']:>6.2f} "
            f"{r['quirky_s']:>9.4f} {r['mem_loadtxt']:>16.1f} {r['mem_read_any']:>17.1f}"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
