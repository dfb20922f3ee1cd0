"""Median, percentiles and distinct values of a 1-D array, equal to numpy's.

numpy's `median`, `percentile` and `unique` import `numpy.ma` on their first call (~7-10 ms of
every command's start-up, for a check that a masked array was not passed); these partition or
sort the values the same way and interpolate with the same arithmetic, without it.
"""
from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np


def median(values: np.ndarray | Sequence[float]) -> float:
    """`float(np.median(values))` of the flattened values: NaN when any is NaN or there are none."""
    array = np.array(values, dtype=np.float64).ravel()  # a copy: partitioned in place
    size = array.size
    if size == 0:
        return math.nan
    half = size // 2
    array.partition([half - 1, half, size - 1] if size % 2 == 0 else [half, size - 1])
    if math.isnan(array[-1]):
        return math.nan
    if size % 2:
        return float(array[half])
    return float((array[half - 1] + array[half]) / 2.0)


def percentile(values: np.ndarray | Sequence[float], q: float) -> float:
    """`float(np.percentile(values, q))` (linear interpolation) of the flattened values: NaN
    when any is NaN; ValueError when there are none."""
    return percentiles(values, (q,))[0]


def percentiles(values: np.ndarray | Sequence[float], qs: Sequence[float]) -> list[float]:
    """`np.percentile(values, qs)` as a list, one partition for all of them."""
    array = np.array(values, dtype=np.float64).ravel()
    size = array.size
    if size == 0:
        raise ValueError("percentile of no values")
    virtual = [(size - 1) * (float(q) / 100.0) for q in qs]
    below = [size - 1 if v >= size - 1 else max(math.floor(v), 0) for v in virtual]
    above = [min(b + 1, size - 1) for b in below]
    array.partition(sorted({0, size - 1, *below, *above}))
    if math.isnan(array[-1]):
        return [math.nan] * len(qs)
    out = []
    for v, b, a in zip(virtual, below, above):
        # numpy reads both ends at the last value once the index reaches it
        gamma = v - (b if v < size - 1 else -1.0)
        low, high = array[b], array[a if v < size - 1 else b]
        difference = high - low
        out.append(float(high - difference * (1.0 - gamma)) if gamma >= 0.5 else float(low + difference * gamma))
    return out


def sorted_distinct(values: np.ndarray | Sequence[float]) -> np.ndarray:
    """`np.unique(values)`: the distinct values in ascending order (NaNs as one, last). Of an
    equal -0.0 and 0.0 either may be kept (numpy keeps the first it meets)."""
    array = np.sort(np.asarray(values).ravel())
    if array.size == 0:
        return array
    keep = np.empty(array.size, dtype=bool)
    keep[0] = True
    np.not_equal(array[1:], array[:-1], out=keep[1:])
    if array.dtype.kind in "fc" and np.isnan(array[-1]):
        first_nan = int(np.argmax(np.isnan(array)))
        keep[first_nan] = True
        keep[first_nan + 1 :] = False
    return array[keep]
