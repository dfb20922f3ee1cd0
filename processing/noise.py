"""The noise of a spectrum, measured from its line-free residual.

An FTIR's noise is not independent from point to point: apodization convolves it with the
instrument line shape and zero filling interpolates it, so neighbouring points are strongly
correlated (Happ-Genzel with zero fill 2: one independent sample per ~5 points, calc). Exports
are also rounded (absorbance to 4 decimals, say), and some traces (digitised or smoothed) carry
no measurable noise at all. So:

- sigma, the per-point standard deviation, is taken from the residual itself (data minus
  baseline on line-free points), as a clipped standard deviation made self-consistent: points
  beyond 3 sigma are left out and the Gaussian truncation corrected. First differences would
  assume independent points and read 3-6x low on apodized, zero-filled spectra.
- The correlation is measured: rho(k), the autocorrelation of the residual at lag k, and
  tau = sum over all lags of rho(k), the number of points one independent sample spans
  (1 for independent points). Position uncertainties and the detection threshold use it.
  Where too few line-free points remain to measure it (dense bands at coarse resolution), it
  is derived from the stated apodization and resolution: the noise's power spectrum over path
  difference is the square of the window.
- Values on a grid (rounded exports, integer counts x a factor) are detected; rounding adds
  step^2 / 12 to the variance, so step / sqrt(12) is the floor of any noise estimate.
- A residual that is smooth from point to point (rho(1) near 1 and tau of tens of points) or
  sits at the rounding floor is reported as not measurable, never as a tiny sigma.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from processing.apodization import apodization_window, window_name
from processing.order_stats import median, percentiles, sorted_distinct

CLIP_SIGMAS = 3.0
# std of a unit Gaussian truncated to |z| <= 3 (calc: sqrt(1 - 2 * 3 * phi(3) / (2 Phi(3) - 1)))
_TRUNCATED_STD_AT_3 = math.sqrt(1.0 - 2.0 * CLIP_SIGMAS * math.exp(-0.5 * CLIP_SIGMAS**2) / math.sqrt(2.0 * math.pi) / math.erf(CLIP_SIGMAS / math.sqrt(2.0)))
MAX_LAG = 64  # longest lag of the measured autocorrelation, points
_CORRELATION_SAMPLE = 1 << 14  # points of residual used to measure the autocorrelation (rho to ~0.01)
_SIGMA_SAMPLE = 50_000  # points used for the clipped standard deviation (sigma to < 1%)
# A residual smoother than this is not noise (a digitised or smoothed trace): lag-1
# correlation above 0.97 means the points vary over > ~20 points; white or apodized FTIR noise
# stays below ~0.9 at lag 1 even with zero fill 4 (calc for Happ-Genzel: 0.90).
SMOOTH_LAG1 = 0.97
SMOOTH_TAU = 30.0
# a noise estimate within this factor of the rounding floor measures the rounding, not the noise
AT_FLOOR = 1.5


@dataclass(frozen=True)
class NoiseEstimate:
    """Per-point noise of a spectrum's line-free residual (absorbance units at the baseline)."""

    sigma: float  # per-point standard deviation (at least the rounding floor)
    correlation_points: float  # tau: points spanned by one independent sample (>= 1)
    autocorrelation: np.ndarray  # rho(k) for k = 0 .. MAX_LAG (rho(0) = 1)
    quantization_step: float | None  # grid of the file's y values, in the file's y units
    quantization_floor: float | None  # step / sqrt(12) in absorbance at the baseline
    measurable: bool
    description: str  # one phrase: how sigma was obtained or why it cannot be

    def effective_points(self, points: float) -> float:
        """Independent samples among `points` consecutive points (at least 1)."""
        return max(1.0, points / self.correlation_points)

    def sum_variance_points(self, points: np.ndarray) -> np.ndarray:
        """Variance of a sum of `points` consecutive values in units of sigma^2:
        P + 2 sum_k (P - k) rho(k) (P for independent points, ~P tau for P >> tau)."""
        points = np.asarray(points, dtype=np.float64)
        rho = self.autocorrelation[1:]
        lags = np.arange(1, rho.size + 1, dtype=np.float64)
        # sum over k < P of (P - k) rho(k) = P * S0(m) - S1(m), m = min(P - 1, lags available)
        s0 = np.concatenate([[0.0], np.cumsum(rho)])
        s1 = np.concatenate([[0.0], np.cumsum(lags * rho)])
        m = np.clip(points - 1, 0, rho.size).astype(np.int64)
        return np.maximum(points + 2.0 * (points * s0[m] - s1[m]), points)

    def correlation_matrix(self, size: int) -> np.ndarray:
        """size x size correlation of `size` consecutive points (Toeplitz of rho)."""
        lags = np.abs(np.arange(size)[:, None] - np.arange(size)[None, :])
        rho = np.concatenate([self.autocorrelation, np.zeros(max(0, size - self.autocorrelation.size))])
        return rho[lags]


def white_noise(sigma: float) -> NoiseEstimate:
    """An estimate that assumes independent points (tests, line lists)."""
    rho = np.zeros(MAX_LAG + 1)
    rho[0] = 1.0
    return NoiseEstimate(sigma, 1.0, rho, None, None, sigma > 0, "assumed independent points")


def quantization_step(values: np.ndarray, sample: int = 20_000) -> float | None:
    """The grid step of `values` when they all lie on one (rounded exports: 10^-k; integer
    counts x a factor), else None. Checked on up to `sample` evenly spread values: the smallest
    gap between distinct values is the candidate step, and every gap must be a whole multiple."""
    v = np.asarray(values, dtype=np.float64)
    if v.size > sample:
        v = v[:: v.size // sample]
    distinct = sorted_distinct(v)
    if distinct.size < 8:
        return None
    gaps = np.diff(distinct)
    scale = max(float(np.max(np.abs(distinct))), 1e-300)
    gaps = gaps[gaps > 1e-12 * scale]  # float noise from unit conversions
    if gaps.size < 4:
        return None
    step = float(np.min(gaps))
    # a decimal step is written as such (0.0001, not 0.000099999...): snap to it if close
    decimal = 10.0 ** round(math.log10(step))
    if abs(step - decimal) <= 1e-6 * decimal:
        step = decimal
    multiples = gaps / step
    on_grid = np.abs(multiples - np.round(multiples)) <= 1e-3 * np.maximum(1.0, multiples)
    if on_grid.mean() < 0.999:
        return None
    # a grid far finer than the spread of the values is no real rounding (e.g. 17 digits)
    if step < 1e-9 * scale:
        return None
    return step


def clipped_sigma(residual: np.ndarray, start: float = 0.0) -> float:
    """Self-consistent 3-sigma-clipped standard deviation of `residual` about its clipped mean
    (corrected for the Gaussian truncation), iterated down from `start`, or when none is given
    from the standard deviation of the central 99% of values: from above, the iteration cannot
    collapse on rounded (discrete) data the way a median of absolute deviations sits on the
    rounding step."""
    r = residual
    if r.size > _SIGMA_SAMPLE:
        r = r[:: r.size // _SIGMA_SAMPLE]
    if r.size < 8:
        return float(np.std(r)) if r.size else 0.0
    centre = float(np.mean(r))
    sigma = start
    if sigma <= 0.0:
        low, high = percentiles(r, (0.5, 99.5))
        central = r[(r >= low) & (r <= high)]
        centre, sigma = float(np.mean(central)), float(np.std(central))
    if sigma == 0.0:
        return 0.0
    for _ in range(50):
        kept = r[np.abs(r - centre) <= CLIP_SIGMAS * sigma]
        if kept.size:
            # np.mean, then np.std's own arithmetic about that mean (one pass fewer, same bits)
            centre = float(np.add.reduce(kept)) / kept.size
            deviation = kept - centre
            new = math.sqrt(float(np.add.reduce(deviation * deviation)) / kept.size) / _TRUNCATED_STD_AT_3
        else:
            centre, new = math.nan, math.nan
        if new == 0.0 or abs(new - sigma) <= 1e-3 * new:
            return new
        sigma = new
    return sigma


def lagged_sigma(values: np.ndarray, lag: int = 24, sample: int = _SIGMA_SAMPLE) -> float:
    """A first guess of the per-point noise before any baseline exists: the MAD of
    differences `lag` points apart (beyond the correlation of apodized noise, calc), / sqrt(2).
    Lines occupy a minority of points, so the median ignores them."""
    v = np.asarray(values, dtype=np.float64)
    if v.size <= lag + 8:
        lag = 1
    if v.size < 8:
        return 0.0
    d = v[lag:] - v[:-lag]
    if d.size > sample:
        d = d[:: d.size // sample]
    return float(1.4826 * median(np.abs(d - median(d))) / math.sqrt(2.0))


MIN_PAIRS = 32  # point pairs needed to measure the correlation at one lag


@dataclass(frozen=True)
class _Correlation:
    sigma_ratio: float  # noise sigma / residual sigma (> 1 when the baseline took some noise)
    rho: np.ndarray  # autocorrelation of the noise, lags 0 .. MAX_LAG
    tau: float  # integrated autocorrelation, points
    source: str  # "measured", "derived from ..."


def noise_correlation(residual: np.ndarray, mask: np.ndarray, sigma: float, baseline_block: int | None) -> _Correlation | None:
    """The noise's autocorrelation and integrated correlation from the residual's power
    spectrum, on at most `_CORRELATION_SAMPLE` consecutive points from the middle of the
    spectrum (points outside `mask` or beyond 3 sigma count as gaps).

    A baseline drawn through medians of blocks of `baseline_block` points takes the noise's
    lowest frequencies with it, which would make the residual look less correlated than the
    noise is. The noise's power spectrum follows the square of the apodization window: flat near
    zero frequency. So the power below twice the block frequency is restored to the mean level
    between two and four times it, and the correlations follow from that spectrum. With fewer
    than 4 x MAX_LAG free points only the short lags are measured; with too few pairs even for
    those, None."""
    n = residual.size
    if n > _CORRELATION_SAMPLE:
        start = (n - _CORRELATION_SAMPLE) // 2
        residual = residual[start : start + _CORRELATION_SAMPLE]
        mask = mask[start : start + _CORRELATION_SAMPLE]
    use = mask & (np.abs(residual) <= CLIP_SIGMAS * sigma) if sigma > 0 else mask.copy()
    free = int(use.sum())
    if free < 2:  # nothing line-free to measure (e.g. every point saturated)
        return None
    r = np.where(use, residual - np.mean(residual[use]), 0.0)
    size = 1 << int(math.ceil(math.log2(2 * r.size)))
    power = np.abs(np.fft.rfft(r, size)) ** 2 / max(free, 1)  # mean over all bins = residual variance
    pairs = np.rint(np.fft.irfft(np.abs(np.fft.rfft(use.astype(np.float64), size)) ** 2, size)[: MAX_LAG + 1])
    covariance = np.fft.irfft(power, size)[: MAX_LAG + 1] * free / np.maximum(pairs, 1.0)
    variance = float(covariance[0])
    if variance <= 0 or pairs[1] < MIN_PAIRS:
        return None
    if free < 4 * MAX_LAG:
        # fragments between dense lines: the short lags only, summed while positive
        rho = np.where(pairs >= MIN_PAIRS, covariance / variance, 0.0)
        rho[0] = 1.0
        negative = np.flatnonzero(rho[1:] <= 0)
        reach = int(negative[0]) + 1 if negative.size else rho.size
        return _Correlation(1.0, rho, max(1.0, 1.0 + 2.0 * float(rho[1:reach].sum())), "measured on short line-free stretches")
    low_power = float(power[1 : max(2, size // 64)].mean())  # no baseline notch known
    if baseline_block and baseline_block >= 16:
        first, last = int(math.ceil(2 * size / baseline_block)), int(4 * size / baseline_block)
        if last - first >= 4 and last < size // 4:
            low_power = float(power[first:last].mean())
            deficit = np.zeros_like(power)
            deficit[:first] = np.clip(low_power - power[:first], 0.0, None)
            covariance = covariance + np.fft.irfft(deficit, size)[: MAX_LAG + 1]
    noise_variance = float(covariance[0])
    rho = covariance / noise_variance
    return _Correlation(math.sqrt(noise_variance / variance), rho, max(1.0, low_power / noise_variance), "measured")


def is_smooth(lag1: float, tau: float) -> bool:
    """True when the residual varies too slowly from point to point to be instrument noise:
    neighbours correlated above SMOOTH_LAG1 while the noise would need tau > SMOOTH_TAU points
    for that, or more than band-limited noise of the measured tau allows (rho(1) ~
    exp(-pi / tau^2) for a Gaussian-shaped correlation, within ~0.03 for the FTIR windows, calc)."""
    return lag1 > SMOOTH_LAG1 and (tau > SMOOTH_TAU or lag1 > math.exp(-math.pi / tau**2) + 0.1)


def agrees(measured_tau: float, derived_tau: float) -> bool:
    """A measured correlation length within a factor 1.6 of the one the stated apodization and
    resolution imply (a resolution stated as a FWHM rather than 1/L differs by 1.1-1.9x)."""
    return abs(math.log(measured_tau / derived_tau)) < math.log(1.6)


@functools.lru_cache(maxsize=64)
def derived_correlation(apodization: str | None, resolution_cm1: float | None, spacing_cm1: float) -> _Correlation | None:
    """rho(k) and tau of interferogram noise for a stated apodization and resolution
    R = 1/L: rho(k) = integral_0^1 w(u)^2 cos(2 pi k (spacing/R) u) du / integral_0^1 w(u)^2,
    tau = R / (2 spacing mean(w^2)) (calc). None when either is not stated or not ours."""
    name = window_name(apodization)
    if name is None or not resolution_cm1 or resolution_cm1 <= 0 or spacing_cm1 <= 0:
        return None
    u = np.linspace(0.0, 1.0, 2001)
    weight = np.full(u.size, u[1])
    weight[[0, -1]] *= 0.5
    power = apodization_window(name, u) ** 2 * weight
    lags = np.arange(MAX_LAG + 1)
    rho = np.cos(2.0 * np.pi * np.outer(lags, u) * spacing_cm1 / resolution_cm1) @ power / power.sum()
    tau = resolution_cm1 / (2.0 * spacing_cm1 * power.sum())
    return _Correlation(1.0, rho, max(1.0, float(tau)), f"derived from the stated {name} apodization and resolution")


def estimate_noise(
    residual: np.ndarray,
    line_free: np.ndarray,
    sigma: float,
    step: float | None,
    floor_absorbance: float | None,
    baseline_block: int | None = None,
    stated: tuple[str | None, float | None, float] | None = None,
) -> NoiseEstimate:
    """The noise of a baseline-corrected spectrum from its line-free points, given the clipped
    sigma found with the baseline, the rounding grid of the file, the baseline's block size in
    points and the file's stated (apodization, resolution, spacing) (see module docstring)."""
    correlation = noise_correlation(residual, line_free, sigma, baseline_block)
    measured_lag1 = float(correlation.rho[1]) if correlation is not None else 0.0
    measured_tau = correlation.tau if correlation is not None else 1.0
    derived = derived_correlation(*stated) if stated else None
    if derived is not None and (correlation is None or correlation.source != "measured" or agrees(correlation.tau, derived.tau)):
        # the stated instrument explains the measured correlation: its exact shape is free of
        # the line wings and sidelobes that creep into any measured residual
        ratio = correlation.sigma_ratio if correlation is not None else 1.0
        correlation = _Correlation(ratio, derived.rho, derived.tau, derived.source)
    if correlation is None:
        rho = np.zeros(MAX_LAG + 1)
        rho[0] = 1.0
        correlation = _Correlation(1.0, rho, 1.0, "not measurable (too few line-free points); points taken as independent")
    rho, tau = correlation.rho, correlation.tau
    sigma = sigma * correlation.sigma_ratio
    floor = floor_absorbance or 0.0
    scale = float(np.max(np.abs(residual))) if residual.size else 0.0
    if sigma <= 1e-7 * scale or not math.isfinite(sigma):
        why = f"the values sit on the export's rounding grid ({step:g})" if step else "the residual is exactly flat"
        return NoiseEstimate(max(floor, 0.0), tau, rho, step, floor_absorbance, False, f"no measurable noise: {why}")
    if is_smooth(measured_lag1, measured_tau):
        return NoiseEstimate(max(sigma, floor), tau, rho, step, floor_absorbance, False,
                             f"no measurable noise: the residual is smooth over ~{tau:.0f} points (digitised or smoothed trace)")
    if floor and sigma <= AT_FLOOR * floor:
        return NoiseEstimate(max(sigma, floor), tau, rho, step, floor_absorbance, False,
                             f"no measurable noise beyond the export's rounding ({step:g})")
    described = f"from the line-free residual; one independent sample per {tau:.1f} points ({correlation.source})"
    return NoiseEstimate(max(sigma, floor), tau, rho, step, floor_absorbance, True, described)
