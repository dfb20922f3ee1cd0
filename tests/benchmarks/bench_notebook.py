"""bandwatch against the notebook a user would write for the same job, on the same files.

Run: python tests/benchmarks/bench_notebook.py [--repeat N] [--sizes 65536,1000000]

The notebook pipeline, written the straightforward way: read the export (pandas `read_csv`;
the `jcamp` package for JCAMP-DX), `scipy.signal.find_peaks` on the absorbance, one
`scipy.optimize.curve_fit` of a Gaussian per peak, then the strongest band's peaks numbered
outwards from the band-centre gap and a `numpy.polyfit` of position against m (band origin,
B', B'').  bandwatch's time is `process_file` (file -> the whole result: lines, assignment, band
fits, molecular constants, intensities, checks).  Both are timed warm in this process, medians
of N, on the same files: CSV with 4 and 6 decimals (as instrument software exports), CSV with
17-digit floats, and JCAMP-DX (DIF).  Target: bandwatch's whole result no slower than the
notebook's band fit on every file (ratio <= 1), and file -> whole result under 35 ms at 64k and
300 ms at 1M points.

Also: the delimited-text read alone against pandas' C reader on the same CSV files (target:
ratio <= 1), as this process reads them one after another (polars, the fast-text extra, for a
first body of 64 MB or more or a later one of 32 MB or more: the 1M 17-digit file's repeated
reads are polars', its first read and a one-shot process's are numpy's) and as a station worker
reads (polars imported at start: every delimited file), and the load average during the run.
"""
from __future__ import annotations

import argparse
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
from processing.readers import read_any
from processing.readers.delimited import POLARS_AGAIN_BYTES, POLARS_IMPORT_BYTES, polars_module
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
    rows, paths = [], []
    readers: dict[tuple[int, str], str] = {}
    print(f"polars (fast-text extra): {'installed' if importlib.util.find_spec('polars') else 'not installed'}")
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
                    our_read = median_ms(lambda: read_any(path), repeat)
                else:
                    pandas_read = our_read = None
                rows.append((points, form, notebook, ours, pandas_read, our_read, (origin, b_upper, b_lower, fitted)))
                paths.append(path)
                readers[(points, form)] = _reader(path)
        # A station worker imports polars (the fast-text extra) at start and reads every
        # delimited file with it; a one-shot `bandwatch process` only a body of 64 MB or more.
        worker = {}
        if polars_module() is not None:
            for (points, form, *_), path in zip(rows, paths):
                if form != "jdx":
                    repeat = args.repeat if points < 500_000 else max(3, args.repeat // 2)
                    worker[(points, form)] = (median_ms(lambda: read_any(path), repeat),
                                              median_ms(lambda: process_file(path, ProcessSettings()), repeat))
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
              f"  {'ok' if our_read[1] <= pandas_read[1] else 'SLOWER'}  ({readers[(points, form)]})")
    if worker:
        print("\nas a station worker reads (polars imported at start): read alone, and file -> whole result")
        for points, form, notebook, _ours, pandas_read, _our_read, _fit in rows:
            if (points, form) not in worker:
                continue
            read, whole = worker[(points, form)]
            print(f"{points:>8} {form:>5} read {read[0]:6.1f}/{read[1]:6.1f}/{read[2]:6.1f}  ratio to pandas "
                  f"{read[1] / pandas_read[1]:.2f} {'ok' if read[1] <= pandas_read[1] else 'SLOWER'}   whole result "
                  f"{whole[0]:6.1f}/{whole[1]:6.1f}/{whole[2]:6.1f}  ratio to notebook {whole[1] / notebook[1]:.2f}")


def _reader(path: Path) -> str:
    """Which parser reads this file: in a one-shot process, and in the repeated reads timed here."""
    size = path.stat().st_size
    if importlib.util.find_spec("polars") is None:
        return "numpy's reader"
    if size >= POLARS_IMPORT_BYTES:
        return "polars"
    if size >= POLARS_AGAIN_BYTES:
        return f"polars from the second read of a {size / 1e6:.0f} MB body on; a one-shot process: numpy's reader"
    return f"numpy's reader: polars is not imported for {size / 1e6:.0f} MB"


if __name__ == "__main__":
    main()
