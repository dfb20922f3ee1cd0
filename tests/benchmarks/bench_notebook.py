"""bandwatch against the notebook a user would write for the same job, on the same files.

Run: python tests/benchmarks/bench_notebook.py [--repeat N] [--sizes 65536,1000000]

The notebook pipeline, written the straightforward way: read the export (pandas `read_csv`;
the `jcamp` package for JCAMP-DX), `scipy.signal.find_peaks` on the absorbance, one
`scipy.optimize.curve_fit` of a Gaussian per peak, then the strongest band's peaks numbered
outwards from the band-centre gap and a `numpy.polyfit` of position against m (band origin,
B', B'').  bandwatch's time is `process_file` (file -> the whole result: lines, assignment, band
fits, molecular constants, intensities, checks).  Both are timed warm in this process, medians
of N, on the same files: CSV with 4 and 6 decimals (as instrument software exports), CSV with
17-digit floats, and JCAMP-DX (AFFN as bandwatch writes it, 13 significant digits).  Target: bandwatch's whole result no slower than the
notebook's band fit on every file (ratio <= 1), and file -> whole result under 35 ms at 64k and
300 ms at 1M points.

Also: the delimited-text read alone against pandas' C reader on the same CSV files (target:
ratio <= 1): the file's bytes to the checked spectrum, every step of bandwatch's reader, without
the file's sha256 (a fingerprint pandas does not compute; its time is printed beside). Both are
timed as a process that has been reading files for a while reads them:
pandas imported, and polars (the fast-text extra) imported by bandwatch's rule of renting
before buying (after 0.15 s spent in numpy's reader, about polars' import; see
processing/readers/delimited.py). numpy's reader, which a one-shot `bandwatch process` of one
file uses, is timed beside it for reference. And the load average during the run.
"""
from __future__ import annotations

import argparse
import hashlib
import importlib.util
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

try:
    import pandas as pd
except ImportError:  # pandas is in the test extra only
    sys.exit("bench_notebook.py needs pandas: pip install -e '.[test]'")
import jcamp
from scipy.optimize import curve_fit
from scipy.signal import find_peaks

from processing.pipeline import ProcessSettings, process_file
from processing.readers import load_bytes
from processing.readers.registry import parse_bytes_unhashed
from processing.readers import delimited
from processing.readers.delimited import numpy_reader_only, polars_module
from processing.readers.delimited import write_csv
from processing.readers.jcamp_write import write_jcamp

sys.path.insert(0, str(Path(__file__).parent))
from bench_pipeline import make_spectrum  # noqa: E402

FORMS = ("csv4", "csv6", "csv17", "jdx")


def write_form(path: Path, spectrum, form: str) -> None:
    x, y = spectrum.wavenumber_cm1, spectrum.absorbance
    if form == "csv17":
        write_csv(path, spectrum)
    elif form == "jdx":
        write_jcamp(path, spectrum, form="affn")
    else:
        decimals = 4 if form == "csv4" else 6
        body = "\n".join(f"{a:.4f},{b:.{decimals}f}" for a, b in zip(x.tolist(), y.tolist()))
        path.write_text("cm-1,absorbance\n" + body + "\n")


def gaussian(x, height, centre, width, offset):
    return offset + height * np.exp(-0.5 * ((x - centre) / width) ** 2)


def notebook_band_fit(path: Path) -> tuple[float, float, float, int]:
    """What a user's notebook does: (band origin, B', B'', peaks fitted)."""
    if path.suffix == ".jdx":
        data = jcamp.readfile(str(path))
        x, y = np.asarray(data["x"], dtype=float), np.asarray(data["y"], dtype=float)
    else:
        frame = pd.read_csv(path)
        x, y = frame.iloc[:, 0].to_numpy(), frame.iloc[:, 1].to_numpy()
    step = abs(x[1] - x[0])
    y = y - np.median(y)
    # the tallest peak within 3 cm-1: one line per J of the main isotopologue
    peaks, _ = find_peaks(y, prominence=0.02, distance=max(1, int(3.0 / step)))
    half = max(3, int(0.15 / step))
    centres = []
    for peak in peaks:
        lo, hi = max(0, peak - half), min(x.size, peak + half + 1)
        try:
            params, _ = curve_fit(gaussian, x[lo:hi], y[lo:hi], p0=(y[peak], x[peak], 2 * step, 0.0))
        except RuntimeError:
            continue
        centres.append(params[1])
    centres = np.sort(np.asarray(centres))
    band = centres[(centres > 2650.0) & (centres < 3120.0)]  # the strongest band, by eye
    gaps = np.diff(band)
    middle = np.argmax(np.where((band[:-1] > 2850) & (band[:-1] < 2920), gaps, 0.0))
    m = np.concatenate([-np.arange(middle + 1, 0, -1), np.arange(1, band.size - middle)])
    c3, c2, c1, c0 = np.polyfit(m, band, 3)
    b_upper = (c1 + c2) / 2.0
    b_lower = (c1 - c2) / 2.0
    return c0, b_upper, b_lower, len(centres)


def median_ms(function, repeat: int) -> tuple[float, float, float]:
    function()  # warm
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        function()
        times.append((time.perf_counter() - start) * 1e3)
    return min(times), statistics.median(times), max(times)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=9)
    parser.add_argument("--sizes", default="65536,1000000")
    args = parser.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    print(f"load average at start: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    rows = []
    numpy_reads: dict[tuple[int, str], tuple[float, float, float]] = {}
    hashes: dict[tuple[int, str], tuple[float, float, float]] = {}
    # the steady state of a process that has read files for a while: bandwatch's rule has
    # imported polars by then (after 0.15 s in numpy's reader), as the notebook has pandas
    reader = "polars" if polars_module(delimited.POLARS_IMPORT_BYTES) is not None else "numpy's reader"
    print(f"polars (fast-text extra): {'installed' if importlib.util.find_spec('polars') else 'not installed'}; "
          f"bandwatch reads delimited text with {reader}")
    with tempfile.TemporaryDirectory() as folder:
        for points in sizes:
            spectrum = make_spectrum(points)
            repeat = args.repeat if points < 500_000 else max(3, args.repeat // 2)
            for form in FORMS:
                path = Path(folder) / f"n{points}_{form}.{'jdx' if form == 'jdx' else 'csv'}"
                write_form(path, spectrum, form)
                origin, b_upper, b_lower, fitted = notebook_band_fit(path)
                notebook = median_ms(lambda: notebook_band_fit(path), repeat)
                ours = median_ms(lambda: process_file(path, ProcessSettings()), repeat)
                if form != "jdx":
                    pandas_read = median_ms(lambda: pd.read_csv(path).to_numpy(), repeat)
                    our_read = median_ms(lambda: read_unhashed(path), repeat)
                    with numpy_reader_only():
                        numpy_reads[(points, form)] = median_ms(lambda: read_unhashed(path), repeat)
                    hashes[(points, form)] = median_ms(lambda: hashlib.sha256(path.read_bytes()).hexdigest(), repeat)
                else:
                    pandas_read = our_read = None
                rows.append((points, form, notebook, ours, pandas_read, our_read, (origin, b_upper, b_lower, fitted)))
    print(f"load average at end: {' '.join(f'{v:.2f}' for v in os.getloadavg())}\n")
    print("file -> result, ms (min / median / max); ratio = bandwatch whole result / notebook band fit (target <= 1)")
    print(f"{'points':>8} {'file':>5} {'notebook':>20} {'bandwatch':>20} {'ratio':>6} {'target':>7}  notebook's fit")
    for points, form, notebook, ours, _pr, _or, fit in rows:
        target = 35.0 if points < 500_000 else 300.0 if points <= 1_000_000 else 1200.0
        flags = ("ok" if ours[1] <= notebook[1] else "SLOWER") + ("" if ours[1] <= target else f" OVER {target:.0f}ms")
        print(f"{points:>8} {form:>5} {notebook[0]:6.1f}/{notebook[1]:6.1f}/{notebook[2]:6.1f} "
              f"{ours[0]:6.1f}/{ours[1]:6.1f}/{ours[2]:6.1f} {ours[1] / notebook[1]:6.2f} {target:5.0f}ms  "
              f"nu0 {fit[0]:.3f} B' {fit[1]:.4f} B'' {fit[2]:.4f} ({fit[3]} peaks)  {flags}")
    print("\ndelimited read alone, ms (min / median / max); ratio = bandwatch / pandas read_csv (target <= 1)")
    for points, form, _nb, _ours, pandas_read, our_read, _fit in rows:
        if pandas_read is None:
            continue
        print(f"{points:>8} {form:>5} pandas {pandas_read[0]:6.1f}/{pandas_read[1]:6.1f}/{pandas_read[2]:6.1f}  "
              f"bandwatch {our_read[0]:6.1f}/{our_read[1]:6.1f}/{our_read[2]:6.1f}  ratio {our_read[1] / pandas_read[1]:.2f}"
              f"  {'ok' if our_read[1] <= pandas_read[1] else 'SLOWER'}  ({reader}; numpy's reader, as a one-shot "
              f"process reads: {numpy_reads[(points, form)][1]:.1f} ms; the file's sha256, not part of the read: "
              f"{hashes[(points, form)][1]:.1f} ms)")


def read_unhashed(path: Path):
    """The file's bytes to the checked spectrum, as process_file reads it: every step of the
    reader, but not the file's sha256 (provenance, which pandas does not compute either;
    process_file hashes on a second thread alongside the analysis when polars reads)."""
    return parse_bytes_unhashed(load_bytes(path), str(path))


if __name__ == "__main__":
    main()
