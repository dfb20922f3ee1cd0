"""Median, percentiles and distinct values of a 1-D array, equal to numpy's.

numpy's `median`, `percentile` and `unique` import `numpy.ma` on their first call (~7-10 ms of
every command's start-up, for a check that a masked array was not passed); these partition or
sort the values the same way and interpolate with the same arithmetic, without it.
"""
from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np


# From this many values on, `median` partitions at one place and reads the maxima of the halves
# (below it, numpy's partition at the three places is quicker than the two extra passes).
_ONE_PLACE_FROM = 2048


def median(values: np.ndarray | Sequence[float]) -> float:
    """`float(np.median(values))` of the flattened values: NaN when any is NaN or there are none."""
    array = np.array(values, dtype=np.float64).ravel()  # a copy: partitioned in place
    size = array.size
    if size == 0:
        return math.nan
    half = size // 2
    if size < _ONE_PLACE_FROM:
        array.partition([half - 1, half, size - 1] if size % 2 == 0 else [half, size - 1])
        return math.nan if math.isnan(array[-1]) else median_of_sorted(array)  # (the middle values are in place)
    # One partition at the middle; the value below it (even sizes) is the largest of the lower
    # half, and a NaN (numpy sorts NaNs last) shows in the upper half's maximum. The same
    # numbers as partitioning at all three places, several times faster on many values:
    # numpy's partition with a list of places costs ~6x one place on 64k values.
    array.partition(half)
    if math.isnan(array[half:].max()):
        return math.nan
    middle = float(array[half])
    return middle if size % 2 else float((array[:half].max() + array[half]) / 2.0)


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
    array.partition(sorted({0, size - 1, *below, *(min(b + 1, size - 1) for b in below)}))
    if math.isnan(array[-1]):
        return [math.nan] * len(qs)
    return [float(_between(array, v, b)) for v, b in zip(virtual, below)]


def percentile_of_sorted(ordered: Sequence[float], q: float) -> float:
    """`percentile` of finite values already in ascending order (a few numbers: no numpy)."""
    virtual = (len(ordered) - 1) * (q / 100.0)
    return float(_between(ordered, virtual, len(ordered) - 1 if virtual >= len(ordered) - 1 else math.floor(virtual)))


def median_of_sorted(ordered: Sequence[float]) -> float:
    """`median` of finite values already in ascending order (a few numbers: no numpy)."""
    half = len(ordered) // 2
    return float(ordered[half] if len(ordered) % 2 else (ordered[half - 1] + ordered[half]) / 2.0)


def _between(ordered: Sequence[float] | np.ndarray, virtual: float, below: int) -> float:
    """numpy's linear interpolation at a fractional index (`below` its floor, or the last
    index once the fraction reaches it: numpy then reads both ends there)."""
    last = len(ordered) - 1
    if virtual >= last:
        return ordered[last]  # (numpy interpolates the last value with itself: the same)
    gamma = virtual - below
    low, high = ordered[below], ordered[below + 1]
    difference = high - low
    return high - difference * (1.0 - gamma) if gamma >= 0.5 else low + difference * gamma


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
