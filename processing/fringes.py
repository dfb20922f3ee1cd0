"""Channel fringes (window etalons) in the baseline, found and taken out before line finding.

A window of thickness t and index n multiplies the transmittance by 1 + a cos(2 pi nu / P + phi)
with P = 1 / (2 n t) (0.8 cm-1 for 4 mm of KBr); in absorbance that is a sinusoid of amplitude
a / ln 10. Left in, its crests are found as "lines" and its comb numbered as bands. So: the
line-free residual's Fourier transform is searched for a periodic component (periods 0.3-20
cm-1) standing well above the transform's median (FRINGE_CONTRAST; white noise's largest of
~1e4 magnitudes is ~3.6x their median, calc) that is there across the spectrum, not only where
a band's lines are (SEGMENTS_WITH_FRINGE of the segments). Its amplitude and phase are fitted
block by block (a real etalon's period drifts slightly with the window's dispersion), joined
smoothly, and the result is subtracted as part of the baseline.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from processing.order_stats import median

FRINGE_CONTRAST = 8.0
PERIOD_RANGE_CM1 = (0.3, 20.0)
SEGMENTS = 4
SEGMENTS_WITH_FRINGE = 3
PERIODS_PER_BLOCK = 40  # amplitude and phase are refitted every this many periods
# In absorbance a fringe of relative amplitude a in transmittance is -log10(1 + a cos phi), whose
# second harmonic is a^2 / (4 ln 10) (2e-3 A for a = 10%, calc): harmonics up to this order
HARMONICS = 3


@dataclass(frozen=True)
class FringeModel:
    period_cm1: float
    amplitude: float  # absorbance, median over the blocks
    contrast: float  # Fourier magnitude over the median magnitude
    profile: np.ndarray  # the fitted fringe at every point (absorbance)


# Periods down to PERIOD_RANGE_CM1[0] need only bins of a third of that: the search runs on the
# residual averaged into bins of SEARCH_BIN_CM1 (a 0.3 cm-1 sinusoid keeps sinc(1/3) = 83% of
# its amplitude, its period exactly), so a finely sampled spectrum costs no more than a coarse one.
SEARCH_BIN_CM1 = 0.1


def _binned(residual: np.ndarray, free: np.ndarray, spacing: float) -> tuple[np.ndarray, np.ndarray, float]:
    """(mean of the free points per bin, bin has free points, bin width) for the period search;
    the data themselves when the spacing is already coarse."""
    factor = int(SEARCH_BIN_CM1 // spacing) if spacing > 0 else 1
    if factor < 2:
        return residual, free, spacing
    usable = (residual.size // factor) * factor
    counts = free[:usable].reshape(-1, factor).sum(axis=1)
    sums = np.where(free[:usable], residual[:usable], 0.0).reshape(-1, factor).sum(axis=1)
    filled = counts > 0
    return np.where(filled, sums / np.maximum(counts, 1), 0.0), filled, spacing * factor


def _strongest_period(residual: np.ndarray, free: np.ndarray, spacing: float) -> tuple[float, float, float] | None:
    """(period, amplitude, contrast) of the largest periodic component of the free residual."""
    residual, free, spacing = _binned(residual, free, spacing)
    n = residual.size
    if n < 64 or free.sum() < 64:
        return None
    r = np.where(free, residual - np.mean(residual[free]), 0.0)
    size = 1 << int(math.ceil(math.log2(n)))
    magnitude = np.abs(np.fft.rfft(r, size))
    frequency = np.fft.rfftfreq(size, d=spacing)  # cycles per cm-1
    band = (frequency > 1.0 / PERIOD_RANGE_CM1[1]) & (frequency < 1.0 / PERIOD_RANGE_CM1[0])
    if band.sum() < 8:
        return None
    index = np.flatnonzero(band)
    k = int(index[np.argmax(magnitude[index])])
    contrast = float(magnitude[k] / max(median(magnitude[index]), 1e-300))
    # parabolic refinement of the peak frequency
    if 0 < k < magnitude.size - 1:
        a, b, c = magnitude[k - 1], magnitude[k], magnitude[k + 1]
        denominator = a - 2.0 * b + c
        shift = 0.5 * (a - c) / denominator if denominator < 0 else 0.0
    else:
        shift = 0.0
    peak_frequency = (k + float(np.clip(shift, -0.5, 0.5))) / (size * spacing)
    amplitude = 2.0 * float(magnitude[k]) / max(int(free.sum()), 1)
    return 1.0 / peak_frequency, amplitude, contrast


def _harmonics(phase: np.ndarray) -> np.ndarray:
    return np.column_stack([f(k * phase) for k in range(1, HARMONICS + 1) for f in (np.cos, np.sin)])


def _block_fit(x: np.ndarray, residual: np.ndarray, free: np.ndarray, period: float) -> tuple[np.ndarray, np.ndarray]:
    """(block centres, coefficients of the harmonics per block) of the fringe fitted in blocks."""
    block = PERIODS_PER_BLOCK * period
    edges = np.arange(x[0], x[-1] + block, block)
    centres, coefficients = [], []
    phase = 2.0 * np.pi * x / period
    for lo, hi in zip(edges[:-1], edges[1:]):
        inside = (x >= lo) & (x < hi) & free
        if inside.sum() < 8 * HARMONICS:
            continue
        design = np.column_stack([_harmonics(phase[inside]), np.ones(int(inside.sum()))])
        solution, *_ = np.linalg.lstsq(design, residual[inside], rcond=None)
        centres.append(0.5 * (lo + hi))
        coefficients.append(solution[:-1])
    return np.array(centres), np.array(coefficients)


def find_fringes(x: np.ndarray, residual: np.ndarray, free: np.ndarray, spacing: float, noise_sigma: float) -> FringeModel | None:
    """The fringe in a baseline-corrected spectrum's line-free residual, or None (see module
    docstring). Its amplitude must also exceed the noise's share (3 sigma / sqrt(points per
    period), the size of a chance sinusoid at that period)."""
    found = _strongest_period(residual, free, spacing)
    if found is None:
        return None
    period, amplitude, contrast = found
    if contrast < FRINGE_CONTRAST:
        return None
    # present across the spectrum, not only in one band's region
    edges = np.linspace(x[0], x[-1], SEGMENTS + 1)
    with_fringe = 0
    for lo, hi in zip(edges[:-1], edges[1:]):
        inside = slice(int(np.searchsorted(x, lo, "left")), int(np.searchsorted(x, hi, "right")))  # x ascends
        segment = _strongest_period(residual[inside], free[inside], spacing)
        if segment is not None and abs(segment[0] - period) < 0.05 * period and segment[2] > 0.5 * FRINGE_CONTRAST:
            with_fringe += 1
    if with_fringe < SEGMENTS_WITH_FRINGE:
        return None
    centres, coefficients = _block_fit(x, residual, free, period)
    if centres.size == 0:
        return None
    terms = _harmonics(2.0 * np.pi * x / period)
    profile = np.zeros(x.size)
    for j in range(terms.shape[1]):
        profile += np.interp(x, centres, coefficients[:, j]) * terms[:, j]
    block_amplitude = median(np.hypot(coefficients[:, 0], coefficients[:, 1]))
    chance = 3.0 * noise_sigma / math.sqrt(max(period / spacing, 1.0))
    if block_amplitude < chance:
        return None
    return FringeModel(float(period), block_amplitude, contrast, profile)
