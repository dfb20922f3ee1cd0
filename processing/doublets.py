"""A line measured beside an unresolved partner (e.g. 79Br/81Br, 35Cl/37Cl at low resolution).

The doublet fit (`lines.measure_doublet`) separates the two when it can. When it cannot (the
pair is closer than the line width, or the fit wanders), the single peak a line finder sees
may sit on either component: with near-equal partners the taller sample is a matter of noise
and sampling, so correcting that peak by the predicted blend pull can be off by the whole
separation. The blend's centroid does not have that ambiguity: over the doublet's upper
profile it sits at c + s r / (1 + r) for components at c and c + s with height ratio r.

Both assume the partner's height ratio is the thin-line one (the abundance ratio). At a coarse
resolution a strong line's core is saturated far below the resolution (HCl in a 10 cm cell at
4 cm-1: an optical depth of hundreds at the true line centre, an apparent absorbance of 0.07):
its apparent height grows like the square root of its strength, so 37Cl's lines look 0.57 as
tall as 35Cl's, not 0.32, and the thin-ratio centroid misplaces every line by ~0.2 cm-1 the
same way. Where a band has such a partner under every line, the pair is drawn with the lines'
own shape (the instrument line shape) and the apparent ratio is measured and modelled across
the band (`measure_blended_lines`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from collections.abc import Callable

import numpy as np

from processing.lines import measure_doublet
from processing.noise import NoiseEstimate, white_noise


def blend_centre(
    wavenumber_cm1: np.ndarray, absorbance: np.ndarray, noise_sigma: float, width_cm1: float,
    centre_guess: float, separation_cm1: float, ratio: float, spacing_cm1: float,
) -> tuple[float, float] | None:
    """(c, standard error) of the line at c from the centroid of the doublet's upper profile
    (points above 20% of its top), the error at least 1% of the point spacing; None when the
    window holds too few points."""
    low = min(centre_guess, centre_guess + separation_cm1) - width_cm1
    high = max(centre_guess, centre_guess + separation_cm1) + width_cm1
    lo, hi = np.searchsorted(wavenumber_cm1, low), np.searchsorted(wavenumber_cm1, high)
    x, y = wavenumber_cm1[lo:hi], absorbance[lo:hi]
    if x.size < 5 or not np.any(y > 0):
        return None
    upper = y > 0.2 * y.max()
    x, y = x[upper], y[upper]
    total = float(y.sum())
    if x.size < 3 or total <= 0:
        return None
    centroid = float(np.sum(x * y) / total)
    share = ratio / (1.0 + ratio)
    # noise on each point moves the centroid by (x - centroid) sigma / total
    sigma = math.sqrt(float(np.sum((x - centroid) ** 2))) * noise_sigma / total
    return centroid - share * separation_cm1, max(sigma, 0.01 * spacing_cm1)


@dataclass(frozen=True)
class _ShapeFit:
    centre: float
    centre_sigma: float
    height: float  # the line's
    ratio: float  # partner / line height
    ratio_sigma: float


def _window(wavenumber_cm1: np.ndarray, centre: float, separation: float, width: float) -> slice:
    lo = int(np.searchsorted(wavenumber_cm1, min(centre, centre + separation) - 1.5 * width))
    hi = int(np.searchsorted(wavenumber_cm1, max(centre, centre + separation) + 1.5 * width))
    return slice(lo, hi)


def _shape_fit(
    x: np.ndarray, y: np.ndarray, noise: NoiseEstimate, profile: Callable[[np.ndarray], np.ndarray],
    centre_guess: float, separation: float, width: float, ratio: float | None = None,
) -> _ShapeFit | None:
    """The pair drawn with `profile`: heights (both free, or the partner's at `ratio` times the
    line's) and a constant by linear least squares for each trial centre; the centre minimises
    the residual. Standard errors from the residual's curvature and the heights' covariance,
    for noise of the spectrum's sigma with one independent sample per `correlation_points`."""
    if x.size < 6:
        return None

    def basis_at(c: float) -> np.ndarray:
        line, partner = profile(x - c), profile(x - c - separation)
        if ratio is None:
            return np.column_stack([line, partner, np.ones(x.size)])
        return np.column_stack([line + ratio * partner, np.ones(x.size)])

    def residual(c: float) -> float:
        basis = basis_at(c)
        heights, *_ = np.linalg.lstsq(basis, y, rcond=None)
        return float(np.sum((y - basis @ heights) ** 2))

    span = 0.5 * max(abs(separation), 0.5 * width)
    trials = centre_guess + np.linspace(-span, span, 41)
    residuals = np.array([residual(float(c)) for c in trials])
    best = int(np.argmin(residuals))
    if best in (0, trials.size - 1):
        return None  # the minimum is not inside the searched range
    step = float(trials[1] - trials[0])
    r0, r1, r2 = residuals[best - 1], residuals[best], residuals[best + 1]
    curvature = (r0 - 2.0 * r1 + r2) / step**2  # d2(residual)/dc2
    if not curvature > 0:
        return None
    centre = float(trials[best] + 0.5 * step * (r0 - r2) / (r0 - 2.0 * r1 + r2))
    basis = basis_at(centre)
    heights, *_ = np.linalg.lstsq(basis, y, rcond=None)
    variance = noise.sigma**2 * max(noise.correlation_points, 1.0)
    # chi2 = residual / variance: sigma_c^2 = 2 variance / curvature
    centre_sigma = math.sqrt(2.0 * variance / curvature)
    if not heights[0] > 0:
        return None
    if ratio is not None:
        return _ShapeFit(centre, centre_sigma, float(heights[0]), ratio, 0.0)
    covariance = np.linalg.pinv(basis.T @ basis) * variance
    found = float(heights[1] / heights[0])
    # d(h2/h1): (1/h1, -h2/h1^2)
    gradient = np.array([-heights[1] / heights[0] ** 2, 1.0 / heights[0]])
    ratio_sigma = math.sqrt(max(float(gradient @ covariance[:2, :2] @ gradient), 0.0))
    return _ShapeFit(centre, centre_sigma, float(heights[0]), found, ratio_sigma)


# Partners up to this thin-line ratio are drawn with the line shape; nearer-equal pairs (79/81Br)
# are symmetric under swapping the two (either minimum fits), so they keep the Gaussian doublet
# fit or the blend centroid, which do not need to tell them apart.
MAX_SHAPE_RATIO = 0.6
# Drawn with the line shape only when a band has this many such pairs (an isotopologue doublet
# under every line, as HCl and DCl at a coarse resolution): the apparent ratio is then modelled
# across the band; a few chance overlaps (CO's minor isotopologues) keep the older measures.
MIN_SHAPE_PAIRS = 8
# The apparent partner/line height ratio is modelled across a band from this many free fits
MIN_RATIO_FITS = 3


def _apparent_ratio_model(fits: list[tuple[float, float, _ShapeFit]]) -> Callable[[float, float], tuple[float, float]] | None:
    """From free-ratio fits (thin-line ratio, separation, fit): the apparent ratio as a
    function of (thin ratio, line height). Lines whose cores are saturated below the
    resolution lose height more than their weaker partners (a curve of growth), so the
    apparent ratio rises above the thin one with the line's strength: log(apparent / thin) is
    fitted as a straight line in the line's measured height (weighted), and kept between the
    thin ratio and 1. Returns (ratio, its standard error) for a line, or None with too few fits."""
    rows = [(thin, fit) for thin, _, fit in fits if fit.ratio > 0 and fit.ratio_sigma > 0 and np.isfinite(fit.ratio_sigma)]
    if len(rows) < MIN_RATIO_FITS:
        return None
    heights = np.array([fit.height for _, fit in rows])
    excess = np.array([math.log(fit.ratio / thin) for thin, fit in rows])
    sigma = np.array([fit.ratio_sigma / fit.ratio for _, fit in rows])
    design = np.column_stack([np.ones(heights.size), heights])
    weights = 1.0 / sigma**2
    normal = design.T @ (design * weights[:, None])
    covariance = np.linalg.pinv(normal)
    coefficients = covariance @ (design.T @ (weights * excess))
    scatter = float(np.sum(weights * (excess - design @ coefficients) ** 2)) / max(heights.size - 2, 1)
    covariance = covariance * max(1.0, scatter)

    def model(thin: float, height: float) -> tuple[float, float]:
        row = np.array([1.0, height])
        log_excess = float(np.clip(row @ coefficients, 0.0, -math.log(max(thin, 1e-12))))
        return thin * math.exp(log_excess), thin * math.exp(log_excess) * math.sqrt(max(float(row @ covariance @ row), 0.0))

    return model


def measure_blended_lines(
    spectrum, baseline, width_cm1: float, centres: np.ndarray, separations: np.ndarray, ratios: np.ndarray,
    profile: Callable[[np.ndarray], np.ndarray] | None = None,
) -> list[tuple[float, float] | None]:
    """(centre, standard error) of each of a band's lines that have an unresolved partner
    (`ratios`: the thin-line partner/line ratios), or None where none can be measured.

    Pairs closer than 1.5 widths with a partner clearly the weaker (MAX_SHAPE_RATIO), with the
    lines' `profile` known, are drawn with it: first
    with both heights free, which says how the apparent ratio follows the line's strength
    across the band (`_apparent_ratio_model`), then again with the ratio that model gives
    (the centre is then as well determined as a single line's; the model's own uncertainty
    joins the centre's). Other pairs: `measure_blended_line`."""
    x_all, y_all = spectrum.wavenumber_cm1, baseline.corrected
    noise = baseline.noise or white_noise(baseline.noise_sigma)
    out: list[tuple[float, float] | None] = [None] * len(centres)
    close = [k for k in range(len(centres)) if profile is not None and abs(separations[k]) < 1.5 * width_cm1
             and ratios[k] <= MAX_SHAPE_RATIO]
    if len(close) < MIN_SHAPE_PAIRS:
        close = []  # a few chance overlaps, not a band-wide doublet pattern: no ratio to model
    free: dict[int, _ShapeFit] = {}
    for k in close:
        window = _window(x_all, float(centres[k]), float(separations[k]), width_cm1)
        fit = _shape_fit(x_all[window], y_all[window], noise, profile, float(centres[k]), float(separations[k]), width_cm1)
        if fit is not None:
            free[k] = fit
    model = _apparent_ratio_model([(float(ratios[k]), float(separations[k]), fit) for k, fit in free.items()])
    for k in close:
        first = free.get(k)
        if first is None:
            continue
        if model is None:
            out[k] = (first.centre, first.centre_sigma)
            continue
        ratio, ratio_sigma = model(float(ratios[k]), first.height)
        window = _window(x_all, float(centres[k]), float(separations[k]), width_cm1)
        x, y = x_all[window], y_all[window]
        fixed = _shape_fit(x, y, noise, profile, first.centre, float(separations[k]), width_cm1, ratio)
        if fixed is None:
            out[k] = (first.centre, first.centre_sigma)
            continue
        # how far the ratio model's own uncertainty moves the centre. That error is common to
        # all the band's modelled lines (one model): a fit of N such lines does not average it
        # down, so each line carries it sqrt(N) times (the band's constants then carry it once)
        moved = _shape_fit(x, y, noise, profile, fixed.centre, float(separations[k]), width_cm1, ratio + ratio_sigma)
        shift = abs(moved.centre - fixed.centre) if moved is not None else first.centre_sigma
        out[k] = (fixed.centre, math.hypot(fixed.centre_sigma, shift * math.sqrt(len(free))))
    for k in range(len(centres)):
        if k not in close:
            out[k] = measure_blended_line(spectrum, baseline, width_cm1, float(centres[k]), float(separations[k]), float(ratios[k]))
    return out


def measure_blended_line(spectrum, baseline, width_cm1: float, centre_guess: float, separation_cm1: float, ratio: float) -> tuple[float, float] | None:
    """The doublet fit where it holds (it moves the line by less than half the separation
    from the guess); the blend centroid otherwise."""
    measured = measure_doublet(spectrum, baseline, width_cm1, centre_guess, separation_cm1, ratio)
    if measured is not None and abs(measured[0] - centre_guess) < 0.5 * abs(separation_cm1):
        return measured
    return blend_centre(spectrum.wavenumber_cm1, baseline.corrected, baseline.noise_sigma, width_cm1, centre_guess,
                        separation_cm1, ratio, spectrum.spacing_cm1)
