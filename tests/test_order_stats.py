"""Median and percentiles without numpy.ma: equal bit for bit to numpy's own (the reference:
numpy.median and numpy.percentile, linear method, on the same values)."""
from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest

from processing.order_stats import median, percentile, percentiles, sorted_distinct

QS = (0.0, 0.5, 5.0, 25.0, 33.3, 50.0, 75.0, 99.5, 100.0)


def _same(ours: float, theirs: float) -> bool:
    return (math.isnan(ours) and math.isnan(theirs)) or ours == theirs


@pytest.mark.parametrize("seed", range(40))
def test_median_and_percentiles_equal_numpys_bit_for_bit(seed: int) -> None:
    rng = np.random.default_rng(seed)
    for size in (1, 2, 3, 4, 5, 8, 9, 31, 64, 1001, 2047, 2048, 2049, 50_000):
        values = rng.normal(size=size) * 10.0 ** rng.uniform(-8, 4)
        if seed % 3 == 0:
            values = np.round(values, 2)  # ties, as rounded exports hold
        assert median(values) == float(np.median(values))
        assert all(ours == float(theirs) for ours, theirs in zip(percentiles(values, QS), np.percentile(values, QS)))
        for q in QS:
            assert percentile(values, q) == float(np.percentile(values, q))


def test_nan_and_integers_and_lists_as_numpy() -> None:
    assert math.isnan(median([1.0, float("nan"), 3.0])) and math.isnan(float(np.median([1.0, np.nan, 3.0])))
    assert _same(percentile([1.0, float("nan"), 2.0], 25.0), float(np.percentile([1.0, np.nan, 2.0], 25.0)))
    assert median([1, 2, 3, 4]) == float(np.median([1, 2, 3, 4])) == 2.5
    assert median(np.arange(7).reshape(7, 1)) == 3.0
    assert math.isnan(median([]))
    with pytest.raises(ValueError):
        percentile([], 50.0)


@pytest.mark.parametrize("size", [2, 3, 10, 11, 1000, 1001, 4096, 4097])
def test_any_nan_makes_the_median_nan_wherever_it_sits(size: int) -> None:
    # numpy.median: NaN when any value is NaN (one NaN far above the middle after partitioning
    # must still be seen; the reference is numpy's own median)
    rng = np.random.default_rng(size)
    for count in sorted({1, 2, max(1, size // 3), size // 2, size - 1, size}):
        values = rng.normal(size=size)
        values[rng.choice(size, count, replace=False)] = np.nan
        assert math.isnan(median(values)) and math.isnan(float(np.median(values)))


def test_values_are_not_reordered_in_place() -> None:
    values = np.array([3.0, 1.0, 2.0, 5.0, 4.0])
    median(values), percentiles(values, (25.0, 75.0))
    assert values.tolist() == [3.0, 1.0, 2.0, 5.0, 4.0]


def test_no_numpy_ma_is_imported() -> None:
    code = ("import sys, numpy as np\nfrom processing.order_stats import median, percentiles, sorted_distinct\n"
            "median(np.arange(5.0)); percentiles(np.arange(5.0), (25, 75)); sorted_distinct(np.arange(5.0))\nprint('numpy.ma' in sys.modules)")
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.strip() == "False"


@pytest.mark.parametrize("seed", range(20))
def test_sorted_distinct_equals_numpys_unique(seed: int) -> None:
    rng = np.random.default_rng(seed)
    for size in (0, 1, 2, 7, 100, 20_000):
        values = np.round(rng.normal(size=size), int(rng.integers(0, 4)))  # many repeats
        if seed % 4 == 0 and size:
            values[rng.integers(0, size, size=max(1, size // 10))] = np.nan  # NaNs kept as one
        np.testing.assert_array_equal(sorted_distinct(values), np.unique(values))
    integers = rng.integers(0, 5, size=50)
    np.testing.assert_array_equal(sorted_distinct(integers), np.unique(integers))
