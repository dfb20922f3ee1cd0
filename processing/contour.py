"""Bands the resolution cannot split into lines: found as P/R contours, B from a contour fit.

At a resolution close to or coarser than a band's line spacing (CO at 4 cm-1: lines 3.8 cm-1
apart) no line can be measured, but the band still shows its P and R branches as two humps,
whose maxima sit where the rotational populations times the line strengths peak. For a rigid
rotor J_max = sqrt(kT / 2hcB) - 1/2 and delta_nu_max = 2 (2 k T B / h c)^(1/2) ~ sqrt(8 B T / c2)
(common practice). That formula ignores B' != B'', the discrete lines and the line shape, and
where the resolution is near the line spacing the maxima lock onto single lines: it errs by
5-15%. So the contour itself is fitted: every line of the band (origin and B'' free, B' - B''
held at the library's value, line areas ~ (|m| nu exp(-c2 E'' / T))^g with the curve-of-growth
power g between 0.5 (black cores) and 1 (thin) fitted too) drawn with the instrument line shape
and scaled by least squares over the band's region. The temperature
is an assumption (the cell at room temperature unless told) and carries most of the
uncertainty: for a given contour, B ~ 1 / T.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from processing.estimate import Estimate
from processing.levels import band_origin, rotational_constant
from processing.line_shape import LineShapeModel
from processing.order_stats import median
from processing.physical_constants import C2_CM_K
from processing.results import BandContour

if TYPE_CHECKING:
    from processing.species import Library

ROOM_TEMPERATURE_SIGMA_K = 10.0  # the assumption "room temperature" is good to about this
MIN_CONTOUR_SNR = 10.0  # each branch maximum must stand this far above the noise
UNRESOLVED_SPACING_FWHM = 1.2  # lines closer than this many line-shape FWHM are not split


def _lines(origin: float, B_lower: float, B_upper: float, temperature_K: float) -> tuple[np.ndarray, np.ndarray]:
    """(positions, thin-line strengths) of every P and R line of the band with population above
    1e-6 of the most populated level."""
    J = np.arange(0, 200)
    population = np.exp(-C2_CM_K * B_lower * J * (J + 1.0) / temperature_K)
    keep = population > 1e-6 * population.max()
    J, population = J[keep], population[keep]
    r_lines = origin + B_upper * (J + 1) * (J + 2) - B_lower * J * (J + 1)
    p_J = J[J >= 1]
    p_lines = origin + B_upper * (p_J - 1) * p_J - B_lower * p_J * (p_J + 1)
    positions = np.concatenate([r_lines, p_lines])
    return positions, np.concatenate([(J + 1) * population, p_J * population[J >= 1]]) * positions


def _contour(
    origin: float, B_lower: float, B_upper: float, temperature_K: float, shape: LineShapeModel, x: np.ndarray, growth: float = 1.0
) -> np.ndarray:
    """The band's absorption contour on `x` (arbitrary scale): every P and R line drawn with
    the instrument line shape, each line's area its strength to the power `growth` (1 for thin
    lines; a line much narrower than the resolution whose core is black grows more slowly, as
    the square root of its strength in the limit: the curve of growth, common practice)."""
    positions, strengths = _lines(origin, B_lower, B_upper, temperature_K)
    return shape.shape(x[:, None] - positions[None, :]) @ strengths**growth


def _maxima(x: np.ndarray, y: np.ndarray, origin: float) -> tuple[float, float] | None:
    """Positions of the largest value below and above `origin`."""
    out = []
    for side in (x < origin, x > origin):
        index = np.flatnonzero(side)
        if index.size < 3:
            return None
        out.append(float(x[int(index[np.argmax(y[index])])]))
    return out[0], out[1]


GROWTH_POWERS = (0.5, 0.6, 0.7, 0.8, 0.9, 1.0)  # curve-of-growth powers tried by the contour fit


def fit_contour(
    x: np.ndarray, y: np.ndarray, noise_sigma: float, origin_guess: float, B_guess: float, alpha_over_B: float,
    temperature_K: float, shape: LineShapeModel,
) -> tuple[Estimate, Estimate, float, float]:
    """(origin, B'', reduced chi-square, curve-of-growth power) of the contour model that best
    fits y(x) by least squares (amplitude free): each growth power in turn, a grid in (B,
    origin), then finer grids around the minimum; uncertainties from the chi-square's
    curvature, scaled by the misfit and widened to cover the growth powers within one unit of
    reduced chi-square of the best."""

    # the origin only shifts the contour: drawn once per (B, growth) on a fine grid, it is
    # moved by interpolation
    step = min(median(np.diff(x)) / 4.0, shape.fwhm_cm1 / 20.0)
    fine = np.arange(x[0] - 2.0, x[-1] + 2.0, step)

    def chi2_grid(B: float, origins: np.ndarray) -> np.ndarray:
        """chi-square for each growth power (rows) and origin (columns) at this B: the line
        shapes are drawn once, the powers only reweight them."""
        positions, strengths = _lines(origin_guess, B, B * (1.0 - alpha_over_B), temperature_K)
        drawn = shape.shape(fine[:, None] - positions[None, :])
        out = np.empty((len(GROWTH_POWERS), origins.size))
        for g, growth in enumerate(GROWTH_POWERS):
            base = drawn @ strengths**growth
            for k, origin in enumerate(origins):
                model = np.interp(x - (origin - origin_guess), fine, base)
                scale = float(model @ y / max(model @ model, 1e-300))
                out[g, k] = float(np.sum((y - scale * model) ** 2)) / noise_sigma**2
        return out

    Bs = B_guess * np.linspace(0.7, 1.3, 31)
    origins = origin_guess + np.linspace(-1.5, 1.5, 31)
    cube = np.array([chi2_grid(B, origins) for B in Bs])  # B x growth x origin
    i, g, j = np.unravel_index(int(np.argmin(cube)), cube.shape)
    per_growth_B = {GROWTH_POWERS[k]: (float(cube[:, k, :].min()), float(Bs[np.unravel_index(int(np.argmin(cube[:, k, :])), cube[:, k, :].shape)[0]])) for k in range(len(GROWTH_POWERS))}
    growth = GROWTH_POWERS[g]
    B_best, origin_best = float(Bs[i]), float(origins[j])
    for _ in range(3):
        dB, do = (Bs[1] - Bs[0]) / 2.0, (origins[1] - origins[0]) / 2.0
        Bs = B_best + dB * np.arange(-4, 5)
        origins = origin_best + do * np.arange(-4, 5)
        grid = np.array([chi2_grid(B, origins)[g] for B in Bs])
        i, j = np.unravel_index(int(np.argmin(grid)), grid.shape)
        B_best, origin_best = float(Bs[i]), float(origins[j])
    best = float(grid[i, j])
    dof = max(x.size - 4, 1)
    reduced = best / dof

    def sigma_from(values: np.ndarray, curve: np.ndarray, k: int) -> float:
        if 0 < k < values.size - 1:
            step = values[1] - values[0]
            second = (curve[k - 1] - 2.0 * curve[k] + curve[k + 1]) / step**2
            if second > 0:
                return float(math.sqrt(2.0 / second * max(reduced, 1.0)))
        return float(abs(values[1] - values[0]))

    near = [B for chi, B in per_growth_B.values() if (chi - best) / dof <= 1.0]
    spread_B = 0.5 * (max(near) - min(near)) if near else 0.0
    sigma_B = math.hypot(sigma_from(Bs, grid[:, j], i), spread_B)
    return Estimate(origin_best, sigma_from(origins, grid[i, :], j)), Estimate(B_best, sigma_B), reduced, growth


def unresolved(spacing_cm1: float, shape: LineShapeModel) -> bool:
    """Lines this far apart cannot be split by the line shape."""
    return spacing_cm1 < UNRESOLVED_SPACING_FWHM * shape.fwhm_cm1


def find_unresolved_bands(
    x: np.ndarray, corrected: np.ndarray, noise_sigma: float, shape: LineShapeModel, library: Library,
    temperature_K: float, assigned: set[tuple[str, int, int]], bands: tuple[tuple[int, int], ...] = ((1, 0), (2, 0)),
) -> list[BandContour]:
    """Library bands (main isotopologue of each molecule) whose lines the line shape cannot
    split (`unresolved`) but whose P and R contours stand in the spectrum, not assigned line by
    line; each with B'' from a contour fit."""
    out: list[BandContour] = []
    for molecule in library.molecules():
        iso = library.molecule(molecule)[0]
        for v_upper, v_lower in bands:
            if (iso.label, v_upper, v_lower) in assigned:
                continue
            B_lower = rotational_constant(iso.dunham, v_lower)
            spacing = 2.0 * B_lower
            if not unresolved(spacing, shape):
                continue  # the line-by-line route handles it
            origin = band_origin(iso.dunham, v_upper, v_lower)
            expected = math.sqrt(8.0 * B_lower * temperature_K / C2_CM_K)
            if x[0] > origin - expected or x[-1] < origin + expected:
                continue
            window = (x > origin - 1.5 * expected) & (x < origin + 1.5 * expected)
            found = _maxima(x[window], corrected[window], origin) if window.sum() >= 10 else None
            if found is None:
                continue
            p_max, r_max = found
            heights = np.interp([p_max, r_max], x, corrected)
            middle = float(np.interp(origin, x, corrected))
            if heights.min() < MIN_CONTOUR_SNR * noise_sigma or middle > 0.9 * heights.min():
                continue  # no band, or no dip between two humps
            if not (0.5 * expected < r_max - p_max < 1.6 * expected):
                continue  # not this band's contour
            if not noise_sigma > 0:
                continue
            alpha_over_B = (B_lower - rotational_constant(iso.dunham, v_upper)) / B_lower
            region = (x > origin - 2.0 * expected) & (x < origin + 2.0 * expected)
            fitted_origin, B, reduced, growth = fit_contour(x[region], corrected[region], noise_sigma, origin, B_lower, alpha_over_B, temperature_K, shape)
            if not B.value > 0:
                continue
            # B ~ 1/T for a given contour: the assumed temperature's uncertainty enters as such
            relative = math.hypot((B.sigma or 0.0) / B.value, ROOM_TEMPERATURE_SIGMA_K / temperature_K)
            separation = r_max - p_max
            out.append(BandContour(
                iso.label, v_upper, v_lower, p_max, r_max, spacing, shape.fwhm_cm1, fitted_origin,
                Estimate(B.value, B.value * relative), temperature_K,
                f"contour fit: every line drawn with the {shape.window} line shape, {temperature_K:.0f} K "
                f"(+-{ROOM_TEMPERATURE_SIGMA_K:.0f} K assumed), line areas as strength^{growth:.1f} (curve of growth), "
                f"B' - B'' from the library "
                f"(reduced chi-square {reduced:.1f}); the rigid-rotor formula sqrt(8 B T / c2) on the branch "
                f"maxima {separation:.1f} cm-1 apart gives B = {separation**2 * C2_CM_K / (8.0 * temperature_K):.3f}",
            ))
    return out
