"""Every index of many half-open ranges at once, without a Python loop over the ranges."""
from __future__ import annotations

import numpy as np


def expand_ranges(lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(owner, index): for each range k = [lo[k], hi[k]) in turn, its indices in ascending
    order, each with the range's position k (empty ranges give nothing)."""
    lo = np.asarray(lo, dtype=np.int64)
    counts = np.maximum(np.asarray(hi, dtype=np.int64) - lo, 0)
    owner = np.repeat(np.arange(counts.size), counts)
    index = np.arange(int(counts.sum())) - np.repeat(np.cumsum(counts) - counts, counts) + np.repeat(lo, counts)
    return owner, index
