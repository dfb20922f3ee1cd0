"""A line measured beside an unresolved partner (e.g. 79Br/81Br, 35Cl/37Cl at low resolution).

The doublet fit (`lines.measure_doublet`) separates the two when it can. When it cannot (the
pair is closer than the line width, or the fit wanders), the single peak a line finder sees
may sit on either component: with near-equal partners the taller sample is a matter of noise
and sampling, so correcting that peak by the predicted blend pull can be off by the whole
separation. The blend's centroid does not have that ambiguity: over the doublet's upper
profile it sits at c + s r / (1 + r) for components at c and c + s with height ratio r.
"""
from __future__ import annotations

import math

import numpy as np

from processing.lines import measure_doublet


def blend_centre(
    wavenumber_cm1: np.ndarray, absorbance: np.ndarray, noise_sigma: float, width_cm1: float,
    centre_guess: float, separation_cm1: float, ratio: float,
) -> tuple[float, float] | None:
    """(c, standard error) of the line at c from the centroid of the doublet's upper profile
    (points above 20% of its top); None when the window holds too few points."""
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
    return centroid - share * separation_cm1, max(sigma, 0.01 * float(np.median(np.diff(wavenumber_cm1))))


def measure_blended_line(spectrum, baseline, width_cm1: float, centre_guess: float, separation_cm1: float, ratio: float) -> tuple[float, float] | None:
    """The doublet fit where it holds (it moves the line by less than half the separation
    from the guess); the blend centroid otherwise."""
    measured = measure_doublet(spectrum, baseline, width_cm1, centre_guess, separation_cm1, ratio)
    if measured is not None and abs(measured[0] - centre_guess) < 0.5 * abs(separation_cm1):
        return measured
    return blend_centre(spectrum.wavenumber_cm1, baseline.corrected, baseline.noise_sigma, width_cm1, centre_guess, separation_cm1, ratio)
