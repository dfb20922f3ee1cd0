"""Reading and analysing hold no more than they must: tracemalloc's peak (numpy reports its
arrays to it) while a 200,000-point file is read, against the arrays a spectrum keeps, and the
analysis steps that read a spectrum through a view or a gather instead of a copy give the
numbers the copy gave. No timing.

A spectrum keeps x and absorbance (8 bytes a point each) and the saturated mask (1 byte): 17
bytes a point, 3.4 MB at 200,000 points. One more array of the whole spectrum in float64 (a
(rows, columns) table kept for its x view, a copy of y, the body's steps, a negated copy) is
8 bytes a point, 0.47 of that, and is what the bounds below are set to catch."""
from __future__ import annotations

import tracemalloc
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest

from processing.baseline import _runs, _x_at, find_saturated_regions
from processing.lines import find_peaks
from processing.readers import delimited, jcamp, jcamp_asdf
from processing.readers.jcamp_write import write_jcamp
from processing.spectrum import Spectrum

POINTS = 200_000
KEPT_BYTES = 17 * POINTS


def _peak_bytes(work: Callable[[], object]) -> tuple[int, int]:
    """(bytes still held, peak bytes) allocated while `work` runs, its result kept."""
    tracemalloc.start()
    try:
        result = work()
        held, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    del result
    return held, peak


def _spectrum_values() -> tuple[np.ndarray, np.ndarray]:
    x = 1850.0 + 0.00625 * np.arange(POINTS)
    y = 0.05 + 0.02 * np.sin(x / 3.0) + np.random.default_rng(7).normal(0.0, 1e-3, POINTS)
    return x, y


def _csv(form: str) -> bytes:
    x, y = _spectrum_values()
    if form == "17 digits":
        rows = (f"{a!r},{b!r}\n" for a, b in zip(x.tolist(), y.tolist()))
        return ("wavenumber_cm-1,absorbance\n" + "".join(rows)).encode()
    if form == "4 and 6 decimals":
        return ("cm-1,A\n" + "".join(f"{a:.4f},{b:.6f}\n" for a, b in zip(x.tolist(), y.tolist()))).encode()
    # descending %T with a title, as some instrument software writes it
    rows = (f"{a:.4f},{100.0 * 10.0 ** -b:.4f}\n" for a, b in zip(x[::-1].tolist(), y[::-1].tolist()))
    return ("Lab 3 export\ncm-1,%T\n" + "".join(rows)).encode()


# Measured (numpy 2.4): 1.39, 1.58 and 1.59 x the kept arrays; before the body was read in
# pieces 2.47, 2.47 and 3.41. The rest is one piece's text and rows (PIECE_BYTES of text) and
# the 10 % of rows the arrays are sized ahead. One more float64 array of the spectrum (+0.47)
# passes 1.8.
DELIMITED_PEAK_OVER_KEPT = 1.8


@pytest.mark.parametrize("form", ["17 digits", "4 and 6 decimals", "descending %T"])
def test_reading_a_csv_holds_little_more_than_the_spectrum(monkeypatch: pytest.MonkeyPatch, form: str) -> None:
    monkeypatch.setattr(delimited, "_polars_allowed", False)  # numpy's reader: what a one-shot process uses
    data = _csv(form)
    spectrum = delimited.parse(data, "a.csv")  # warm: first calls allocate caches
    held, peak = _peak_bytes(lambda: delimited.parse(data, "a.csv"))
    assert spectrum.points == POINTS
    assert held <= 1.01 * KEPT_BYTES  # x, absorbance and mask only: no table behind a view
    assert peak <= DELIMITED_PEAK_OVER_KEPT * KEPT_BYTES, f"{peak / KEPT_BYTES:.2f} x the kept arrays"


# JCAMP-DX DIF, decoded in pieces of 64 kB (so that the per-piece token arrays are small and
# the whole-spectrum arrays show): measured 2.96 x the kept arrays, 3.90 before the decoder
# summed in place and let the tokens go first. The section's bytes, a value (8 bytes) and a
# kind per token, the per-token repeats and y remain. One more float64 array (+0.47) passes 3.3.
DIF_PEAK_OVER_KEPT = 3.3


def test_reading_jcamp_dif_holds_each_whole_spectrum_array_once(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    x, y = _spectrum_values()
    path = tmp_path / "a.jdx"
    write_jcamp(path, Spectrum(x, y, np.zeros(POINTS, dtype=bool)), form="dif")
    data = path.read_bytes()
    monkeypatch.setattr(jcamp_asdf, "CHUNK_BYTES", 1 << 16)
    spectrum = jcamp.parse(data, "a.jdx")
    held, peak = _peak_bytes(lambda: jcamp.parse(data, "a.jdx"))
    assert spectrum.points == POINTS
    assert np.allclose(spectrum.absorbance, y, rtol=0, atol=1e-6)  # (DIF keeps YFACTOR steps)
    assert held <= 1.01 * KEPT_BYTES
    assert peak <= DIF_PEAK_OVER_KEPT * KEPT_BYTES, f"{peak / KEPT_BYTES:.2f} x the kept arrays"


def _corrected() -> tuple[np.ndarray, float]:
    """A line-free residual with noise, Gaussian lines up and dips down (sigma 1e-3)."""
    rng = np.random.default_rng(5)
    index = np.arange(POINTS, dtype=np.float64)
    values = rng.normal(0.0, 1e-3, POINTS)
    for centre, depth in zip(rng.uniform(100, POINTS - 100, 120), rng.uniform(-0.3, 0.5, 120)):
        near = slice(int(centre) - 40, int(centre) + 40)
        values[near] += depth * np.exp(-0.5 * ((index[near] - centre) / 3.0) ** 2)
    return values, 1e-3


def test_dips_are_found_as_the_peaks_of_the_negated_residual() -> None:
    corrected, sigma = _corrected()
    dips, width = find_peaks(corrected, sigma, 8.0, None, dips=True)
    expected, expected_width = find_peaks(-corrected, sigma, 8.0, None)
    assert dips.size > 20  # the test data has dips to find
    assert dips.tolist() == expected.tolist() and width == expected_width
    peaks, _ = find_peaks(corrected, sigma, 8.0, None)
    assert not set(peaks.tolist()) & set(dips.tolist())


def test_dips_are_found_without_a_negated_copy() -> None:
    # the candidates' mask (1 byte a point) and gathers around them, no 8-byte array
    corrected, sigma = _corrected()
    find_peaks(corrected, sigma, 8.0, None, dips=True)
    _, peak = _peak_bytes(lambda: find_peaks(corrected, sigma, 8.0, None, dips=True))
    assert peak < 0.3 * corrected.nbytes


def test_x_at_block_centres_is_what_interpolating_over_every_index_gives() -> None:
    rng = np.random.default_rng(9)
    for size in (2, 3, 1000, POINTS):
        x = 1850.0 + np.cumsum(rng.uniform(0.001, 0.01, size))
        where = np.concatenate([rng.uniform(-1.0, size, 300), np.arange(0.0, size, 37.0), [0.0, size - 1.0, size - 0.5]])
        assert np.array_equal(_x_at(where, x), np.interp(where, np.arange(size, dtype=np.float64), x)), size


def test_runs_and_flat_top_maxima_match_a_direct_reading() -> None:
    """True runs of a mask (one at each end too), and a flat-topped line's peak absorbance is
    the largest value inside its run."""
    rng = np.random.default_rng(4)
    mask = rng.random(5000) < 0.4
    mask[:3] = mask[-3:] = True
    edges = np.flatnonzero(np.diff(np.concatenate([[False], mask, [False]]).astype(np.int64)))
    assert _runs(mask) == list(zip(edges[0::2].tolist(), edges[1::2].tolist()))

    x = 2000.0 + 0.01 * np.arange(3000)
    y = np.zeros(x.size)
    for centre in (500, 1500, 2990):  # the last one runs off the end
        y += np.minimum(4.0 * np.exp(-0.5 * ((np.arange(x.size) - centre) / 20.0) ** 2), 2.5 + 1e-4 * np.sin(np.arange(x.size)))
    spectrum = Spectrum(x, y, np.zeros(x.size, dtype=bool))
    regions = find_saturated_regions(spectrum, y, 1e-3, 5.0)
    flat = [region for region in regions if region.reason == "flat top"]
    assert len(flat) == 3
    for region in flat:
        inside = (x >= region.first_cm1) & (x <= region.last_cm1)
        assert region.peak_absorbance == float(y[inside].max())
