"""Tables of the instrument line shape f(s) = integral_0^1 w(u) cos(2 pi s u) du for each
apodization window w, s in units of 1/L.

The full table (s = 0 .. 1024 in steps of 1/32) is one FFT of the window on 2^17 points, ~2 ms
a window. Choosing a line shape compares every window near the lines only (s < 16), so the
start of each table (s <= NEAR_S) ships with the package (`data/line_shape_near/*.npy`, written
by `python -m processing.line_shape_tables` from the same FFT, checked against it by a test):
a command's first analysis then makes one full table (the chosen window's, for its far lobes)
instead of seven.
"""
from __future__ import annotations

import functools
from pathlib import Path

import numpy as np

from processing.apodization import APODIZATIONS, apodization_window

SAMPLES = 1 << 12  # window samples over 0..1
PAD = 1 << 17  # FFT length: s step SAMPLES / PAD = 1/32 in units of 1/L (ILS to ~2e-3 of its peak)
FULL_S = 1024.0
NEAR_S = 32.0  # the shipped tables reach this s
NEAR_COUNT = int(round(NEAR_S * PAD / SAMPLES)) + 1  # their points
NEAR_FOLDER = Path(__file__).resolve().parent / "data" / "line_shape_near"  # <window>.npy


@functools.lru_cache(maxsize=16)
def full_table(window: str) -> tuple[np.ndarray, np.ndarray]:
    """(s, f(s)) for s = 0 .. 1024 in steps of 1/32 (units of 1/L), by one FFT of the window."""
    u = np.arange(SAMPLES) / SAMPLES
    w = apodization_window(window, u)
    w[0] *= 0.5  # trapezoid weight of the end at zero path difference (the cosine series doubles it)
    spectrum = np.fft.rfft(w, PAD).real * (2.0 / SAMPLES)  # 2 integral_0^1 w cos(2 pi s u) du
    s = np.arange(spectrum.size) * (SAMPLES / PAD)
    keep = s <= FULL_S
    return s[keep], spectrum[keep]


@functools.lru_cache(maxsize=16)
def near_table(window: str) -> tuple[np.ndarray, np.ndarray]:
    """(s, f(s)) for s = 0 .. NEAR_S: the shipped start of the full table, or (no file for the
    window, or not of the right size) the start of the full table itself."""
    try:
        f = np.load(NEAR_FOLDER / f"{window}.npy", allow_pickle=False)
    except (OSError, ValueError):  # not installed with the package: computed instead
        f = None
    if f is None or f.shape != (NEAR_COUNT,):
        s, f = full_table(window)
        return s[:NEAR_COUNT], f[:NEAR_COUNT]
    return np.arange(f.size) * (SAMPLES / PAD), f


def table_reaching(window: str, largest_s: float) -> tuple[np.ndarray, np.ndarray]:
    """The near table when it reaches `largest_s`, else the full one (the same values where
    both are defined, so an interpolation gives the same numbers from either)."""
    return near_table(window) if largest_s <= NEAR_S else full_table(window)


def write_near_tables(folder: Path = NEAR_FOLDER) -> None:
    """Write the start of every window's full table (for the package's data folder)."""
    folder.mkdir(exist_ok=True)
    for window in APODIZATIONS:
        np.save(folder / f"{window}.npy", full_table(window)[1][:NEAR_COUNT])


if __name__ == "__main__":
    write_near_tables()
    print(f"wrote {NEAR_FOLDER}")
