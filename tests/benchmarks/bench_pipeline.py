"""Benchmark: spectrum file -> band fits (`bandwatch process`'s work), in-process and whole-process.

Run: python tests/benchmarks/bench_pipeline.py [--repeat N] [--against DIR]

`--against DIR` also times the same files with the analysis code of another checkout (e.g.
`git worktree add /tmp/before main~5`), in a child process of the same interpreter, so a change
is compared with what it replaces in one run.

Reports, in one run on this machine (shared and noisy, so ratios matter):
- in-process time from a file on disk to band fits and to the whole result for a 64k- and a
  1M-point spectrum (JCAMP-DX DIF; CSV with 17-digit floats as bandwatch writes it; CSV with
  4/6 decimals as instrument software exports it), median of N, with the share of each stage;
  targets for the whole result 35 ms and 300 ms; a same-run reference (numpy.loadtxt reading
  the same spectrum as CSV) and the ratio to it. Delimited text is read by numpy's reader, as a
  one-shot `bandwatch process` of one file reads it; with the fast-text extra each CSV is timed
  again as a process that has read files for a while reads it (polars: see the rent-before-buy
  rule in processing/readers/delimited.py);
- a 4M-point JCAMP-DX file: whole result under 1.2 s, with the same band origins and B'' as the
  1M file (difference / combined sigma);
- whole-process `bandwatch process FILE` against `python -c "import numpy"` (target <= 3x),
  with the package's bytecode compiled first (as an installed package has it), and the peak
  resident memory of `bandwatch process` on the 1M files (target < 100 MB), each with the
  same steps run one by one (imports, the file's bytes, parse, bytes let go, analysis, result):
  resident after and peak during each, so that a change shows where it adds;
- the peak search on a 1M-point array, noise-free against pure noise (must not degrade).
"""
from __future__ import annotations

import argparse
import ast
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from processing.instrument import Instrument
from processing.lines import find_peaks
from processing.pipeline import ProcessSettings, analyse
from processing.readers import delimited, load_bytes, read_any
from processing.readers.registry import parse_bytes_digest_later
from processing.readers.delimited import write_csv
from processing.readers.jcamp_write import write_jcamp
from processing.simulate import Cell, SampleGas, SimulationSettings, simulate


def median_time(function, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def make_spectrum(points: int, noise_domain: str = "interferogram", zero_fill: int = 2):
    """HCl + DCl cell; the resolution is chosen so the band region fills `points` at spacing
    res / (2 zero_fill) with zero_fill 2 (so a larger zero fill gives the same spectrum
    sampled more finely: `points` x zero_fill / 2 points)."""
    span = 3100.0 - 1850.0
    resolution = 4.0 * span / points
    settings = SimulationSettings(
        (SampleGas(("HCl",), 0.05), SampleGas(("DCl",), 0.05)),
        Cell(10.0),
        Instrument(resolution_cm1=resolution, zero_fill=zero_fill, first_cm1=1850.0, last_cm1=3100.0, seed=1,
                   noise_domain=noise_domain),
    )
    return simulate(settings).spectrum


FIT_STAGES = ("read", "baseline", "lines", "assignment and fits")


def in_process(path: Path, repeat: int) -> tuple[float, float, dict[str, float], int]:
    """Medians of (file -> band fits) and (file -> whole result with constants and checks), the
    file read and hashed as process_file does."""
    stage_times: dict[str, list[float]] = {}
    to_fits, totals = [], []
    bands = 0
    for _ in range(repeat):
        start = time.perf_counter()
        data, sha256 = parse_bytes_digest_later(load_bytes(path), str(path))  # as process_file reads
        read_time = time.perf_counter() - start
        analysis = analyse(data, ProcessSettings())
        sha256()  # the file's hash, made alongside the parse or the analysis, is part of the whole
        totals.append(time.perf_counter() - start)
        stage_times.setdefault("read", []).append(read_time * 1e3)
        for stage, ms in analysis.timing_ms.items():
            stage_times.setdefault(stage, []).append(ms)
        to_fits.append(read_time + sum(analysis.timing_ms.get(k, 0.0) for k in FIT_STAGES[1:]) / 1e3)
        bands = len(analysis.assignment.bands)
    return statistics.median(to_fits), statistics.median(totals), {k: statistics.median(v) for k, v in stage_times.items()}, bands


_OTHER_TREE = """
import statistics, sys, time
sys.path.insert(0, sys.argv[1])
from processing.pipeline import ProcessSettings, analyse
from processing.readers import read_any
path, repeat = sys.argv[2], int(sys.argv[3])
analyse(read_any(path))
times, fits = [], []
for _ in range(repeat):
    start = time.perf_counter()
    data = read_any(path)
    read = time.perf_counter() - start
    analysis = analyse(data, ProcessSettings())
    times.append(time.perf_counter() - start)
    fits.append(read + sum(analysis.timing_ms.get(k, 0.0) for k in ("baseline", "lines", "assignment and fits")) / 1e3)
print(statistics.median(fits), statistics.median(times))
"""


OTHER_TREE_LIMIT_S = 120.0


def other_tree_time(tree: str, path: Path, repeat: int) -> tuple[float, float]:
    """Median seconds of (file -> band fits, file -> whole result) with the analysis code of
    checkout `tree` (inf when it takes longer than OTHER_TREE_LIMIT_S in all)."""
    try:
        done = subprocess.run([sys.executable, "-c", _OTHER_TREE, tree, str(path), str(repeat)], check=True,
                              capture_output=True, text=True, env={"PYTHONPATH": tree}, timeout=OTHER_TREE_LIMIT_S)
    except subprocess.TimeoutExpired:
        return float("inf"), float("inf")
    fits, total = done.stdout.strip().splitlines()[-1].split()
    return float(fits), float(total)


def whole_process(command: list[str], repeat: int) -> float:
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    return median_time(lambda: subprocess.run(command, check=True, capture_output=True, env=env), repeat)


def peak_memory_mb(command: list[str]) -> float:
    """Peak resident memory of a child process (its own, not this process's), MB."""
    code = ("import resource, subprocess, sys; subprocess.run(sys.argv[1:], check=True, capture_output=True); "
            "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")
    done = subprocess.run([sys.executable, "-c", code, *command], check=True, capture_output=True, text=True)
    return int(done.stdout.strip()) / 1024.0


_MEMORY_STAGES = r"""
import sys
def resident():
    found = {}
    for line in open("/proc/self/status"):
        if line.startswith(("VmRSS", "VmHWM")):
            name, value = line.split(":")
            found[name] = int(value.split()[0]) / 1024.0
    return found["VmRSS"], found["VmHWM"]
def restart_peak():
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")  # the peak starts again from the resident size
    except OSError:
        pass
stages = []
def stage(name):
    now, peak = resident()
    stages.append((name, now, peak))
    restart_peak()
restart_peak()
import tui.cli
from processing.pipeline import ProcessSettings, analyse, result_from_analysis
from processing.readers.registry import load_bytes, parse_bytes
from processing.result_text import render_result
stage("python, numpy, bandwatch imports")
path = sys.argv[1]
raw = load_bytes(path)
stage("the file's bytes")
data = parse_bytes(raw, path)
stage("parse (bytes still held)")
del raw
stage("bytes let go")
analysis = analyse(data, ProcessSettings())
stage("analysis (lazy imports, BLAS)")
render_result(result_from_analysis(path, analysis), None)
stage("result and its text")
print(repr((stages, "polars" in sys.modules)))
"""


def memory_stages(path: Path) -> tuple[list[tuple[str, float, float]], bool]:
    """The steps of `bandwatch process FILE` one by one in a child process: (stage, resident
    MB after it, peak MB during it) from /proc/self/status (VmRSS, VmHWM, the peak restarted
    after each stage where the kernel allows), and whether polars was imported."""
    done = subprocess.run([sys.executable, "-c", _MEMORY_STAGES, str(path)], check=True, capture_output=True, text=True)
    stages, polars = ast.literal_eval(done.stdout.strip().splitlines()[-1])
    return stages, polars


def compile_package() -> None:
    """Bytecode for the package, as `pip install` writes it (this machine may run with
    PYTHONDONTWRITEBYTECODE, which would time the compiler at every start)."""
    root = Path(__file__).resolve().parents[2]
    subprocess.run([sys.executable, "-m", "compileall", "-q", str(root / "processing"), str(root / "tui")], check=True)


def band_answer(path: Path) -> dict[str, tuple[float, float, float, float]]:
    """(origin, sigma, B'', sigma) per band of the whole result."""
    analysis = analyse(read_any(path), ProcessSettings())
    return {f.label: (f.origin.value, f.origin.sigma, f.B_lower.value, f.B_lower.sigma) for f in analysis.assignment.bands}


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--against", metavar="DIR", default=None,
                        help="another checkout whose analysis is timed on the same files")
    parser.add_argument("--noise-domain", choices=("interferogram", "points"), default="interferogram",
                        help="noise of the simulated files: interferogram (correlated, as an FTIR; "
                        "default) or points (independent, as the simulator made it before)")
    parser.add_argument("--skip-4m", action="store_true", help="leave out the 4M-point file")
    args = parser.parse_args()
    print(f"bandwatch pipeline benchmark (file -> band fits), {args.noise_domain} noise")
    with tempfile.TemporaryDirectory() as folder:
        work = Path(folder)
        rows = []
        files = {}
        steady_totals: dict[tuple[int, str], float | None] = {}
        for points in (65_536, 1_000_000):
            spectrum = make_spectrum(points, args.noise_domain)
            for form in ("dif", "csv", "csv6"):
                path = work / f"bench_{points}_{form}.{'jdx' if form == 'dif' else 'csv'}"
                if form == "dif":
                    write_jcamp(path, spectrum, form="dif")
                elif form == "csv":
                    write_csv(path, spectrum)  # 17-digit repr floats (exact round trip)
                else:
                    # as instrument software exports: x to 4 decimals, absorbance to 6
                    text = "\n".join(f"{x:.4f},{y:.6f}" for x, y in zip(spectrum.wavenumber_cm1, spectrum.absorbance))
                    path.write_text("cm-1,A\n" + text + "\n")
                files[(points, form)] = path
                repeat = args.repeat if points < 500_000 else max(3, args.repeat // 2)
                with delimited.numpy_reader_only():
                    analyse(read_any(path))  # warm the library caches, as a running station has them
                    to_fits, total, stages, bands = in_process(path, repeat)
                steady = None
                if form != "dif" and delimited.polars_module(delimited.POLARS_IMPORT_BYTES) is not None:
                    steady = in_process(path, repeat)[1]
                steady_totals[(points, form)] = steady
                csv_path = files.get((points, "csv")) or work / f"ref_{points}.csv"
                if not csv_path.exists():
                    write_csv(csv_path, spectrum)
                reference = median_time(lambda: np.loadtxt(csv_path, delimiter=",", skiprows=1), max(3, repeat // 2))
                other = other_tree_time(args.against, path, repeat) if args.against else None
                rows.append((points, form, to_fits, total, stages, bands, reference, other))
        print(f"\n{'points':>9} {'file':>4} {'->fits':>9} {'->all':>9} {'target':>7} {'loadtxt':>9} {'all/loadtxt':>11}  shares of ->fits (read/baseline/lines/assign+fit)  bands")
        for points, form, to_fits, total, stages, bands, reference, other in rows:
            target = 0.035 if points < 500_000 else 0.300
            share = " / ".join(f"{100 * stages.get(k, 0) / (to_fits * 1e3):.0f}%" for k in FIT_STAGES)
            verdict = "ok" if total <= target else "OVER"
            steady = steady_totals.get((points, form))
            later = "" if steady is None else f"   ->all with polars {steady * 1e3:.1f}ms {'ok' if steady <= target else 'OVER'}"
            print(f"{points:>9} {form:>4} {to_fits * 1e3:>7.1f}ms {total * 1e3:>7.1f}ms {target * 1e3:>5.0f}ms {reference * 1e3:>7.1f}ms {total / reference:>11.2f}  {share:<48} {bands}  {verdict}{later}")
        print("->fits: file to band fits; ->all: the whole result (also molecular constants, intensities and checks; the target);"
              " delimited text by numpy's reader (a one-shot run), then with polars (a process that has read files a while)")
        if args.against:
            print(f"\nsame files, this checkout against {args.against} (->fits and ->all):")
            for points, form, to_fits, total, _stages, _bands, _reference, other in rows:
                print(f"{points:>9} {form:>4} ->fits this {to_fits * 1e3:>7.1f}ms other {other[0] * 1e3:>7.1f}ms ratio {to_fits / other[0]:.2f}"
                      f"   ->all this {total * 1e3:>7.1f}ms other {other[1] * 1e3:>7.1f}ms ratio {total / other[1]:.2f}")

        # 4M points: time, and the same answer as 1M
        if not args.skip_4m:
            big = work / "bench_4000000_dif.jdx"
            # the 1M spectrum's instrument with zero fill 8: the same spectrum on 4x the points
            write_jcamp(big, make_spectrum(1_000_000, args.noise_domain, zero_fill=8), form="dif")
            analyse(read_any(big))
            _fits4, total4, _stages4, _bands4 = in_process(big, 3)
            one, four = band_answer(files[(1_000_000, "dif")]), band_answer(big)
            print(f"\n4M-point JCAMP-DX file (the 1M file's spectrum, zero fill 8 instead of 2): whole result {total4 * 1e3:.0f} ms (target 1200 ms) {'ok' if total4 <= 1.2 else 'OVER'}")
            for label in sorted(set(one) & set(four)):
                (o1, s1, b1, t1), (o4, s4, b4, t4) = one[label], four[label]
                print(f"  {label:<14} origin 1M {o1:.5f} 4M {o4:.5f} (diff/sigma {(o4 - o1) / np.hypot(s1, s4):+.2f})"
                      f"   B'' 1M {b1:.6f} 4M {b4:.6f} (diff/sigma {(b4 - b1) / np.hypot(t1, t4):+.2f})")
            missing = sorted(set(one) ^ set(four))
            if missing:
                print(f"  bands found at one size only: {', '.join(missing)}")

        # whole process: the command-line tool against a bare numpy import
        compile_package()
        numpy_import = whole_process([sys.executable, "-c", "import numpy"], args.repeat)
        cli = whole_process([sys.executable, "-m", "tui", "process", str(files[(65_536, "dif")])], args.repeat)
        print(f"\nwhole process on a 64k-point file: bandwatch process {cli * 1e3:.0f} ms, "
              f"python -c 'import numpy' {numpy_import * 1e3:.0f} ms, ratio {cli / numpy_import:.2f} (target <= 3)")
        print("peak resident memory of `bandwatch process` on the 1M-point files (target < 100 MB), and where it is "
              "reached: the same steps one by one in a child, MB resident after / peak during each")
        for form in ("dif", "csv", "csv6"):
            path = files[(1_000_000, form)]
            megabytes = peak_memory_mb([sys.executable, "-m", "tui", "process", str(path)])
            stages, polars = memory_stages(path)
            print(f"  {form:>4} {megabytes:6.1f} MB {'ok' if megabytes < 100 else 'OVER'}   "
                  f"({path.stat().st_size / 1e6:.1f} MB file, body read by {'polars' if polars else 'numpy'})")
            for name, after, peak in stages:
                print(f"         {name:<34} {after:6.1f} / {peak:6.1f}")

    # peak search must not degrade with noise
    rng = np.random.default_rng(2)
    x = np.arange(1_000_000, dtype=np.float64)
    clean = np.zeros_like(x)
    for centre in rng.uniform(1000, 999_000, 300):
        lo, hi = int(centre) - 30, int(centre) + 30
        clean[lo:hi] += np.exp(-0.5 * ((x[lo:hi] - centre) / 4.0) ** 2)
    noisy = clean + rng.normal(0, 0.01, x.size)
    pure_noise = rng.normal(0, 0.01, x.size)
    t_clean = median_time(lambda: find_peaks(clean, 1e-3, 5.0, None), args.repeat)
    t_noisy = median_time(lambda: find_peaks(noisy, 0.01, 5.0, None), args.repeat)
    t_noise = median_time(lambda: find_peaks(pure_noise, 0.01, 5.0, None), args.repeat)
    maxima = int(np.sum((pure_noise[1:-1] > pure_noise[:-2]) & (pure_noise[1:-1] >= pure_noise[2:])))
    print(f"\npeak search on 1M points: lines only {t_clean * 1e3:.1f} ms, lines + noise {t_noisy * 1e3:.1f} ms, "
          f"pure noise {t_noise * 1e3:.1f} ms ({maxima} local maxima in the noise); noisy/clean ratio {t_noisy / t_clean:.2f}")


if __name__ == "__main__":
    main()
