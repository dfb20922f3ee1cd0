"""Median and percentiles of a 1-D array, equal bit for bit to numpy's.

numpy's `median` and `percentile` import `numpy.ma` on their first call (~7 ms of every
command's start-up, for a check that a masked array was not passed); these partition the
values the same way and interpolate with the same arithmetic, without it.
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
