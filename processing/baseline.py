"""Baseline, noise and saturation of an absorbance spectrum.

Baseline: an iterative line-free estimate. The axis is cut into blocks a few line widths
wide; each block's baseline level is the median of its points not flagged as lines; the
levels are joined linearly; points more than 3 noise sigma above (lines) or below (ringing,
emission-like artefacts) the baseline are flagged and the estimate repeated. Vectorised over
blocks: a 1M-point spectrum costs a few tens of milliseconds.

Window fringes are found in the line-free residual and drawn as part of the baseline
(`processing.fringes`), so their crests are not taken for lines.

Noise: the per-point sigma of the line-free residual itself, clipped at 3 sigma and made
self-consistent with the line flags; its correlation and the file's rounding grid are measured
too (`processing.noise`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from processing.fringes import FringeModel, find_fringes
from processing.noise import NoiseEstimate, clipped_sigma, estimate_noise, lagged_sigma, quantization_step
from processing.order_stats import median, sorted_distinct
from processing.results import SaturatedRegion  # reason: "transmittance <= 0", "above usable absorbance", "flat top"
from processing.spectrum import Spectrum

# Absorbance above which a line top is no longer usable for intensities: T < ~3% (common practice).
DEFAULT_USABLE_ABSORBANCE = 1.5


@dataclass(frozen=True)
class BaselineResult:
    baseline: np.ndarray  # absorbance of the baseline at every point
    corrected: np.ndarray  # absorbance - baseline
    noise_sigma: float  # per-point standard deviation, absorbance units, from line-free regions
    line_free: np.ndarray  # bool mask of points used for the baseline
    offset_median: float  # median baseline absorbance (a large value means a poor background)
    tilt_per_1000_cm1: float  # baseline slope
    saturated_regions: tuple[SaturatedRegion, ...]
    usable_absorbance: float
    noise: NoiseEstimate | None = None  # correlation, rounding grid, measurability
    fringes: FringeModel | None = None  # window fringes found and taken out with the baseline

    @property
    def noise_transmittance(self) -> float:
        """The per-point noise as transmittance depth near the baseline (ln 10 x sigma_A)."""
        return math.log(10.0) * self.noise_sigma


def original_values(spectrum: Spectrum, index: np.ndarray) -> np.ndarray:
    """The y values at `index` as the file held them (absorbance, T or %T), for spotting a
    rounding grid."""
    absorbance = spectrum.absorbance[index]
    if spectrum.original_y_kind == "absorbance":
        return absorbance
    transmittance = np.power(10.0, -absorbance)
    return transmittance * 100.0 if spectrum.original_y_kind == "percent_transmittance" else transmittance


def rounding_floor_absorbance(step: float | None, y_kind: str, baseline_absorbance: float) -> float | None:
    """The noise a rounding grid of `step` (file units) alone puts on absorbance at the
    baseline: step / sqrt(12), through dA = dT / (T ln 10) for transmittance files."""
    if step is None:
        return None
    floor = step / np.sqrt(12.0)
    if y_kind == "absorbance":
        return float(floor)
    fraction = floor / 100.0 if y_kind == "percent_transmittance" else floor
    return float(fraction / (np.power(10.0, -baseline_absorbance) * np.log(10.0)))


# A block's level is the median of at most this many of its points (evenly strided): its
# error, ~1.25 sigma / sqrt(count / tau), is then set by the noise, not by how finely the
# axis is sampled, and a 4M-point spectrum costs no more per block than a 64k one.
BLOCK_SAMPLE = 256


def _block_levels(y: np.ndarray, free: np.ndarray, block: int) -> tuple[np.ndarray, np.ndarray]:
    """Median of the free points of each block (NaN where a block has too few).

    Vectorised: flagged points become +inf, each block row (strided down to BLOCK_SAMPLE
    points) is sorted once and the median is read at the middle of its finite part."""
    n = y.size
    n_blocks = max(1, n // block)
    usable = n_blocks * block
    stride = max(1, -(-block // BLOCK_SAMPLE))
    free_rows = free[:usable].reshape(n_blocks, block)[:, ::stride]
    rows = np.where(free_rows, y[:usable].reshape(n_blocks, block)[:, ::stride], np.inf)
    width = rows.shape[1]
    rows.sort(axis=1)
    counts = free_rows.sum(axis=1)
    lower = np.clip((counts - 1) // 2, 0, width - 1)
    upper = np.clip(counts // 2, 0, width - 1)
    index = np.arange(n_blocks)
    levels = 0.5 * (rows[index, lower] + rows[index, upper])
    levels[counts < max(3, width // 10)] = np.nan
    centres = (np.arange(n_blocks) + 0.5) * block
    if usable < n:
        centres[-1] = (usable - block + n) / 2.0
    return centres, levels


def _join(centres: np.ndarray, levels: np.ndarray, n: int, fallback: float) -> np.ndarray:
    good = np.isfinite(levels)
    if not good.any():
        return np.full(n, fallback)
    return np.interp(np.arange(n, dtype=np.float64), centres[good], levels[good])


def estimate_baseline(
    spectrum: Spectrum,
    block_cm1: float | None = None,
    usable_absorbance: float = DEFAULT_USABLE_ABSORBANCE,
    iterations: int = 6,
) -> BaselineResult:
    """Baseline, noise and saturated regions of `spectrum` (see module docstring)."""
    x = spectrum.wavenumber_cm1
    y = spectrum.absorbance
    n = y.size
    spacing = spectrum.spacing_cm1
    if block_cm1 is None:
        block_cm1 = 12.0  # a few CO line spacings; wide enough that a block is mostly line-free
    block = int(min(np.clip(round(block_cm1 / spacing), 16, max(16, n // 4)), n))
    # (None: no saturated point, the common case; no mask is applied then)
    saturated = spectrum.saturated if spectrum.saturated.any() else None
    initial = _first_sigma(y, saturated)
    baseline, free, sigma, centres, levels = _iterate(y, saturated, block, initial, iterations)
    # window fringes: found in the line-free residual, then the baseline is drawn again
    # through the spectrum without them (twice: better line flags give a better fringe)
    fringes = find_fringes(x, y - baseline, free, spacing, sigma)
    for _ in range(2):
        if fringes is None:
            break
        without = y - fringes.profile
        baseline, free, sigma, centres, levels = _iterate(without, saturated, block, _first_sigma(without, saturated), iterations)
        fringes = find_fringes(x, y - baseline, free, spacing, sigma) or fringes
    if fringes is not None:
        baseline = baseline + fringes.profile
    corrected = y - baseline
    good = np.isfinite(levels)
    if good.sum() >= 2:
        centre_x = _x_at(centres[good], x)
        tilt = float(np.polyfit(centre_x, levels[good], 1)[0] * 1000.0)
    else:
        tilt = 0.0
    # (+ 0.0: a median of exact zeros carries no sign, whichever zero the partition left there)
    offset = (median(levels[~np.isnan(levels)]) if np.isfinite(levels).any() else median(y)) + 0.0
    # the grid is seen best over every point (a noise-free baseline may hold one value only)
    step = quantization_step(original_values(spectrum, np.arange(0, n, max(1, n // 20_000))))
    floor_rounding = rounding_floor_absorbance(step, spectrum.original_y_kind, offset)
    stated = (spectrum.meta.apodization, spectrum.meta.resolution_cm1, spacing)
    noise = estimate_noise(corrected, free, sigma, step, floor_rounding, block, stated)
    sigma = noise.sigma
    regions = find_saturated_regions(spectrum, corrected, sigma, usable_absorbance)
    return BaselineResult(
        baseline=baseline,
        corrected=corrected,
        noise_sigma=float(sigma),
        line_free=free,
        offset_median=offset,
        tilt_per_1000_cm1=tilt,
        saturated_regions=regions,
        usable_absorbance=usable_absorbance,
        noise=noise,
        fringes=fringes,
    )


def _first_sigma(y: np.ndarray, saturated: np.ndarray | None) -> float:
    """The noise's first guess from the points that are not saturated (0 when none is left)."""
    if saturated is None:
        return lagged_sigma(y)
    return lagged_sigma(y[~saturated]) if not saturated.all() else 0.0


def _x_at(index: np.ndarray, x: np.ndarray) -> np.ndarray:
    """x at fractional point indices, as `np.interp(index, np.arange(n), x)` gives it, from
    only the points on either side of each (no index array of the whole spectrum)."""
    around = sorted_distinct(np.clip(np.floor(index)[:, None] + np.array([0.0, 1.0]), 0, x.size - 1))
    return np.interp(index, around, x[around.astype(np.intp)])


def _iterate(
    y: np.ndarray, saturated: np.ndarray | None, block: int, sigma: float, iterations: int
) -> tuple[np.ndarray, np.ndarray, float, np.ndarray, np.ndarray]:
    """The iterated line-free baseline: (baseline, line-free mask, clipped sigma, block
    centres, block levels).

    The block medians read at most BLOCK_SAMPLE points per block, so when blocks are longer
    the iteration runs on every stride-th point only (the points those medians read), and the
    full-resolution baseline, flags and sigma follow once from its block levels."""
    stride = max(1, -(-block // BLOCK_SAMPLE))
    if stride == 1:
        return _iterate_points(y, saturated, block, sigma, iterations)
    n = y.size
    _, _, sigma, centres, levels = _iterate_points(y[::stride], None if saturated is None else saturated[::stride],
                                                   max(16, block // stride), sigma, iterations)
    centres = centres * stride
    baseline = _join(centres, levels, n, median(y[:: max(1, n // 100_000)]))
    residual = y - baseline
    floor = _flat_floor(y)
    free = _line_free(residual, saturated, sigma, floor)
    if free.sum() >= max(16, n // 20):
        sigma = max(clipped_sigma(residual[free], sigma), floor)
    return baseline, free, sigma, centres, levels


def _flat_floor(y: np.ndarray) -> float:
    """The smallest noise sigma used: 1e-9 of the largest absorbance (a noise-free trace)."""
    return 1e-9 * max(1.0, float(np.max(np.abs(y))))


def _line_free(residual: np.ndarray, saturated: np.ndarray | None, sigma: float, floor: float) -> np.ndarray:
    """Points within 3 sigma of the baseline, with each flagged run's wings flagged too
    (saturated points never free; None: there are none)."""
    new_free = np.abs(residual) <= 3.0 * max(sigma, floor)
    if saturated is None:
        return ~grow_flags(~new_free)
    new_free &= ~saturated
    return ~grow_flags(~new_free) & ~saturated


def _iterate_points(
    y: np.ndarray, saturated: np.ndarray | None, block: int, sigma: float, iterations: int
) -> tuple[np.ndarray, np.ndarray, float, np.ndarray, np.ndarray]:
    """`_iterate` on every point of `y`."""
    n = y.size
    free = np.ones(n, dtype=bool) if saturated is None else ~saturated
    floor = _flat_floor(y)
    overall = median(y[:: max(1, n // 100_000)])
    baseline = np.full(n, overall)
    centres = np.array([0.0])
    levels = np.array([overall])
    clipped = False
    for _ in range(iterations):
        centres, levels = _block_levels(y, free, block)
        baseline = _join(centres, levels, n, overall)
        residual = y - baseline
        new_free = _line_free(residual, saturated, sigma, floor)
        if new_free.sum() < max(16, n // 20):
            break
        # iterated down from above: twice the first guess, then the previous clipped value
        new_sigma = max(clipped_sigma(residual[new_free], sigma if clipped else 2.0 * sigma), floor)
        clipped = True
        # settled: under 1% of points changed flag and sigma within 2%
        settled = np.count_nonzero(new_free != free) < 0.01 * n and abs(new_sigma - sigma) <= 0.02 * new_sigma
        free, sigma = new_free, new_sigma
        if settled:
            break
    return baseline, free, sigma, centres, levels


def grow_flags(flagged: np.ndarray, minimum: int = 3, fraction: float = 0.75) -> np.ndarray:
    """Widen each run of flagged points by `fraction` of its own length (at least `minimum`
    points) on both sides, so a line's wings and first sidelobes, which stay under the flag
    threshold but are not noise, lift neither the baseline nor the noise estimate."""
    n = flagged.size
    change = np.flatnonzero(flagged[1:] != flagged[:-1]) + 1
    if n == 0 or (change.size == 0 and not flagged[0]):
        return flagged.copy()
    edges = np.concatenate([[0] if flagged[0] else [], change, [n] if flagged[-1] else []]).astype(np.int64)
    starts, stops = edges[0::2], edges[1::2]
    grow = np.maximum(minimum, np.rint(fraction * (stops - starts))).astype(np.int64)
    first, last = np.clip(starts - grow, 0, n), np.clip(stops + grow, 0, n)
    # grown runs may overlap: merge them (starts ascending), then paint each once
    last = np.maximum.accumulate(last)
    opens = np.concatenate([[True], first[1:] > last[:-1]])
    closes = np.concatenate([opens[1:], [True]])
    painted = np.zeros(n + 1, dtype=np.int8)
    painted[first[opens]] = 1
    painted[last[closes]] -= 1
    return np.cumsum(painted[:n], dtype=np.int8) > 0


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(start, stop) index pairs of the True runs of a bool mask (stop exclusive)."""
    if not mask.any():
        return []
    padded = np.zeros(mask.size + 2, dtype=np.int8)  # (int8 throughout: a mask of a million
    padded[1:-1] = mask  # points would otherwise become two 8 MB arrays of int64)
    edges = np.diff(padded)
    return list(zip(np.flatnonzero(edges == 1).tolist(), np.flatnonzero(edges == -1).tolist()))


def find_saturated_regions(
    spectrum: Spectrum, corrected: np.ndarray, sigma: float, usable_absorbance: float
) -> tuple[SaturatedRegion, ...]:
    """Regions where absorbance is not measurable (T <= 0), beyond the usable limit, or
    flat-topped (at least 4 consecutive points within 2 sigma of the local maximum while the
    maximum is above 1 absorbance unit: a line bottoming out in transmittance)."""
    x = spectrum.wavenumber_cm1
    y = spectrum.absorbance
    regions: list[SaturatedRegion] = []
    # (most spectra have no point over either limit: each mask is built only when one is)
    any_over = bool(np.max(y) > usable_absorbance) or bool(spectrum.saturated.any()) if y.size else False
    over = (y > usable_absorbance) | spectrum.saturated if any_over else None
    if over is not None:
        for start, stop in _runs(over):
            reason = "transmittance <= 0" if spectrum.saturated[start:stop].any() else "above usable absorbance"
            regions.append(SaturatedRegion(float(x[start]), float(x[stop - 1]), float(y[start:stop].max()), reason))
    runs = []
    if corrected.size and np.max(corrected) > 1.0:
        runs = _runs((corrected > 1.0) & ~over if over is not None else corrected > 1.0)
    if runs:
        starts = np.array([a for a, _ in runs])
        stops = np.array([b for _, b in runs])
        bounds = np.ravel(np.column_stack([starts, stops]))  # each run's [start, stop)
        tops = np.maximum.reduceat(y, bounds[:-1] if bounds[-1] == y.size else bounds)[0::2]
        owner = np.repeat(np.arange(len(runs)), stops - starts)
        inside = np.concatenate([np.arange(a, b) for a, b in runs])
        near_top = y[inside] >= tops[owner] - 2.0 * max(sigma, 1e-6)
        counts = np.bincount(owner, weights=near_top, minlength=len(runs))
        for r in np.flatnonzero(counts >= 4):
            segment_near = near_top[owner == r]
            longest = max((b - a for a, b in _runs(segment_near)), default=0)
            if longest >= 4:
                regions.append(SaturatedRegion(float(x[starts[r]]), float(x[stops[r] - 1]), float(tops[r]), "flat top"))
    regions.sort(key=lambda r: r.first_cm1)
    return tuple(regions)
