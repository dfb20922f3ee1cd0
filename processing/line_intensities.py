"""Intensities: equivalent widths, rotational temperature, abundance ratios.

Line area = equivalent width W = integral (1 - T) d(nu), with T = 10^-(A - baseline). The
instrument line shape has unit area, so W is the same before and after the instrument (the
absorbance area is not, once lines are strong). For an optically thin line W = S N L.

Rotational temperature (per band): Boltzmann plot of ln(W / (L_HL nu)) against E''/k, with
L_HL = J''+1 (R) or J'' (P) (Hoenl-London), E'' from the band's fitted B'' and D''. The slope
is -1/T. P and R lines get separate intercepts (absorbs Herman-Wallis differences between
branches). Saturated, blended, ringing and weak (< 10 sigma) lines are left out.

All of this assumes optically thin lines. Gas lines are far narrower than the resolution, so
their centres can be black while the spectrum looks moderate; a check (`optically_thin`)
compares matched 35/37 (or 79/81) equivalent-width ratios with the natural abundance ratio.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from processing.estimate import Estimate
from processing.index_ranges import expand_ranges
from processing.line_shape import transmittance_depth
from processing.linear_fit import weighted_least_squares
from processing.noise import white_noise
from processing.order_stats import median
from processing.physical_constants import C2_CM_K
from processing.results import AbundanceRatio, HydrogenFraction, RotationalTemperature

if TYPE_CHECKING:
    from processing.assign import AssignmentResult
    from processing.baseline import BaselineResult
    from processing.lines import LineTable
    from processing.pipeline import Analysis
    from processing.species import Library
    from processing.spectrum import Spectrum

# measured/natural isotopologue ratio (plus twice its standard error) above which lines count
# as optically thin: a 10% deficit already biased the plain Boltzmann plot by 3-6 sigma (305
# +- 3 K at 296 K, 724 +- 4 K at 700 K on simulated HCl, calc), 5% leaves it to the
# first-order optical-depth term below
THIN_LIMIT = 0.95
# beyond this first-order deficit of the strongest line the correction is not trusted
KAPPA_LIMIT = 0.3
@dataclass(frozen=True)
class IntensityResult:
    equivalent_width_cm1: np.ndarray  # per line of the LineTable (nan where not measured)
    equivalent_width_sigma_cm1: np.ndarray
    temperatures: tuple[RotationalTemperature, ...]
    ratios: tuple[AbundanceRatio, ...]
    optically_thin: bool | None  # None: no isotopologue pair to tell
    thinness: float | None  # measured/natural ratio of the best-measured pair (1 = thin)
    hydrogen_fractions: tuple[HydrogenFraction, ...] = ()
    notes: tuple[str, ...] = field(default=())


# Lines closer than this many widths share their wings: their equivalent width is measured as
# one group and shared out (an isotopologue partner 2 cm-1 away at 0.5 cm-1 resolution puts a
# few % of its area into a window cut half-way between them, and the cut grows with J).
GROUP_WIDTHS = 8.0
GROUP_REACH_WIDTHS = 4.0  # a group's window extends this far beyond its outer lines


def equivalent_widths(spectrum: Spectrum, baseline: BaselineResult, lines: LineTable) -> tuple[np.ndarray, np.ndarray]:
    """W and its standard error for every line, W = integral of 1 - 10^-(A - baseline).

    Lines within GROUP_WIDTHS widths of each other form a group; the group's W is integrated
    from GROUP_REACH_WIDTHS widths below its first line to as far above its last (cut half-way
    to the next group) and shared among its lines in proportion to their fitted profile areas
    (lines of one band share their shape, so a share is right however much of the wings the
    window holds). The error is the larger of the group's noise times the share and the noise
    over the line's own +-2.5 widths, summed with the noise's correlation (apodized,
    zero-filled noise is correlated over several points: independent points would understate
    it by ~sqrt(tau))."""
    x = spectrum.wavenumber_cm1
    n = lines.count
    if n == 0:
        return np.full(0, np.nan), np.full(0, np.nan)
    centre = lines.position_cm1
    width = np.where(np.isfinite(lines.width_cm1), lines.width_cm1, lines.typical_width_cm1)
    area = np.where(np.isfinite(lines.area_cm1) & (lines.area_cm1 > 0), lines.area_cm1, np.maximum(lines.height, 0.0) * width)
    joined = np.diff(centre) < GROUP_WIDTHS * np.maximum(width[1:], width[:-1])
    group = np.concatenate([[0], np.cumsum(~joined)])
    groups = int(group[-1]) + 1
    first = np.flatnonzero(np.concatenate([[True], ~joined]))
    last = np.flatnonzero(np.concatenate([~joined, [True]]))
    left = centre[first] - GROUP_REACH_WIDTHS * width[first]
    right = centre[last] + GROUP_REACH_WIDTHS * width[last]
    if groups > 1:
        middle = 0.5 * (centre[last[:-1]] + centre[first[1:]])
        left[1:] = np.maximum(left[1:], middle)
        right[:-1] = np.minimum(right[:-1], middle)
    group_w = _integrated_depth(x, baseline.corrected, left, right)
    total_area = np.bincount(group, weights=area, minlength=groups)
    share = np.where(total_area[group] > 0, area / np.where(total_area[group] > 0, total_area[group], 1.0), 0.0)
    widths = group_w[group] * share
    # noise: the group's, shared; at least that over the line's own +-2.5 widths
    spacing = spectrum.spacing_cm1
    noise_t = baseline.noise_transmittance  # transmittance noise near the baseline
    noise = baseline.noise or white_noise(baseline.noise_sigma)
    lo = np.searchsorted(x, left)
    hi = np.searchsorted(x, right)
    group_sigma = noise_t * spacing * np.sqrt(noise.sum_variance_points(np.maximum(hi - lo, 1)))
    own = np.maximum(np.searchsorted(x, centre + 2.5 * width) - np.searchsorted(x, centre - 2.5 * width), 1)
    own_sigma = noise_t * spacing * np.sqrt(noise.sum_variance_points(own))
    return widths, np.maximum(group_sigma[group] * share, own_sigma)


def _integrated_depth(x: np.ndarray, corrected: np.ndarray, left: np.ndarray, right: np.ndarray) -> np.ndarray:
    """Trapezoid integral of 1 - 10^-A over each [left, right] (only the points inside the
    windows are converted, all windows at once: the points of every window are gathered into
    one array, the trapezoids between windows zeroed, and the rest summed window by window)."""
    last = x.size - 1
    lo = np.minimum(np.maximum(np.searchsorted(x, left), 0), last)
    hi = np.minimum(np.maximum(np.searchsorted(x, right), 0), last)
    out = np.zeros(lo.size)
    windows = np.flatnonzero(hi > lo)
    if windows.size == 0:
        return out
    points = hi[windows] - lo[windows] + 1
    offsets = np.cumsum(points) - points
    _, index = expand_ranges(lo[windows], hi[windows] + 1)  # every window's points, one after another
    depth = transmittance_depth(corrected[index])
    x_points = x[index]
    area = 0.5 * (depth[1:] + depth[:-1]) * (x_points[1:] - x_points[:-1])
    area[offsets[1:] - 1] = 0.0  # from one window's last point to the next window's first
    out[windows] = np.add.reduceat(area, offsets)
    return out


def _boltzmann_lines(lines: LineTable, assignment: AssignmentResult, widths: np.ndarray,
                     width_sigmas: np.ndarray) -> dict[tuple[str, int, int], list[tuple[float, float, int, bool, float]]]:
    """Per band (isotopologue, v', v''), its lines fit for a Boltzmann plot, in line order:
    (ln(W / (L_HL nu)), sigma_W / W, J'', R branch, W). Saturated, blended, ringing, unused
    and weak (< 10 sigma) lines are left out."""
    saturated = lines.saturated.tolist()
    ringing = lines.ringing.tolist()
    position = lines.position_cm1.tolist()
    width_list = widths.tolist()
    sigma_list = width_sigmas.tolist()
    out: dict[tuple[str, int, int], list[tuple[float, float, int, bool, float]]] = {}
    for i, assigned in enumerate(assignment.per_line):
        if assigned is None or saturated[i] or assigned.blended or ringing[i] or not assigned.used_in_fit:
            continue
        W, sW = width_list[i], sigma_list[i]
        if not (math.isfinite(W) and W > 10.0 * sW and W > 0 and position[i] > 0):
            continue  # (the logarithm below needs a positive width and position)
        J = assigned.J_lower
        is_r = assigned.branch == "R"
        hoenl_london = J + 1 if is_r else J
        if hoenl_london <= 0:
            continue
        row = (math.log(W / (hoenl_london * position[i])), sW / W, J, is_r, W)
        out.setdefault((assigned.isotopologue, assigned.v_upper, assigned.v_lower), []).append(row)
    return out


def rotational_temperatures(lines: LineTable, assignment: AssignmentResult, widths: np.ndarray, width_sigmas: np.ndarray) -> list[RotationalTemperature]:
    out = []
    per_band = _boltzmann_lines(lines, assignment, widths, width_sigmas)
    for fit in assignment.bands:
        rows = per_band.get((fit.isotopologue, fit.v_upper, fit.v_lower), [])
        if len(rows) < 6:
            continue
        y, sy, J, is_r, w = (np.array(c) for c in zip(*rows))
        x = J * (J + 1.0)
        D = fit.D_lower.value if fit.D_lower else 0.0
        e = C2_CM_K * (fit.B_lower.value * x - D * x * x)
        if is_r.all() or (~is_r).all():
            design = np.column_stack([np.ones_like(e), -e])
            names: tuple[str, ...] = ("intercept", "inverse_T")
        else:
            design = np.column_stack([is_r.astype(float), (~is_r).astype(float), -e])
            names = ("intercept_R", "intercept_P", "inverse_T")
        if e.max() - e.min() <= 0:
            continue
        weights = np.maximum(sy, 1e-3)
        plain = weighted_least_squares(design, y, weights, names)
        if plain.value("inverse_T") <= 0:
            continue
        uncorrected = Estimate(1.0 / plain.value("inverse_T"), plain.sigma("inverse_T") / plain.value("inverse_T") ** 2, "K")
        if y.size < design.shape[1] + 3:
            out.append(RotationalTemperature(fit.isotopologue, fit.v_upper, fit.v_lower, uncorrected, int(plain.used.sum()), plain.rms, None, uncorrected))
            continue
        # optical-depth systematic: a first-order curve-of-growth term, ln W = ln(S N) - kappa
        # W / W_max (kappa: the strongest line's relative deficit; W peaks at mid J, so it is
        # not degenerate with 1/T), fitted alongside; the temperature it would move to is
        # the systematic (the same curvature can also come from line-area errors, so the
        # plain plot's value is kept and the shift goes into sigma)
        result = weighted_least_squares(np.column_stack([design, -w / w.max()]), y, weights, names + ("kappa",))
        inverse = result.value("inverse_T")
        if inverse <= 0:
            continue
        shift = 1.0 / inverse - uncorrected.value
        sigma = math.hypot(uncorrected.sigma or 0.0, shift)
        out.append(RotationalTemperature(fit.isotopologue, fit.v_upper, fit.v_lower, Estimate(uncorrected.value, sigma, "K"), int(plain.used.sum()), plain.rms,
                                         Estimate(result.value("kappa"), result.sigma("kappa"), "1"), uncorrected))
    return out


def _pairs(assignment: AssignmentResult, a: str, b: str, band: tuple[int, int]) -> list[tuple[int, int]]:
    index: dict[tuple[str, int], dict[str, int]] = {}
    for i, assigned in enumerate(assignment.per_line):
        if assigned and (assigned.v_upper, assigned.v_lower) == band and assigned.isotopologue in (a, b) and not assigned.blended:
            index.setdefault((assigned.branch, assigned.J_lower), {})[assigned.isotopologue] = i
    return [(d[a], d[b]) for d in index.values() if a in d and b in d]


def abundance_ratios(lines: LineTable, assignment: AssignmentResult, widths: np.ndarray, width_sigmas: np.ndarray, library: Library, temperature_K: float) -> list[AbundanceRatio]:
    """Heavy-atom isotope ratios (e.g. H35Cl/H37Cl) from matched lines of one band: median of
    the fitted peak-height ratios (both isotopologues' lines have the same shape, so heights
    scale as strengths for thin lines, and a neighbour's pressure-broadened wing barely
    reaches the other's peak), divided by the predicted per-molecule strength ratio (nu and
    Boltzmann factors, ~1%) so that what is left is the abundance ratio."""
    found = sorted({(f.isotopologue, f.v_upper, f.v_lower) for f in assignment.bands})
    out = []
    by_band: dict[tuple[int, int], list[str]] = {}
    for label, v_upper, v_lower in found:
        by_band.setdefault((v_upper, v_lower), []).append(label)
    known = {iso.label for iso in library.isotopologues()}
    clear = (~np.asarray(lines.saturated, dtype=bool) & (widths > 10 * width_sigmas)).tolist()  # unsaturated, W above 10 sigma
    for band, labels in by_band.items():
        for a in labels:
            for b in labels:
                if a >= b or a not in known or b not in known:
                    continue
                iso_a, iso_b = library.isotopologue(a), library.isotopologue(b)
                if iso_a.molecule != iso_b.molecule:
                    continue
                pairs = [(i, j) for i, j in _pairs(assignment, a, b, band) if clear[i] and clear[j]]
                if len(pairs) < 3:
                    continue
                # predicted per-molecule strength ratio for the same lines
                table_a = band_strength_table(library, a, band[0], band[1], float(temperature_K), False)
                table_b = band_strength_table(library, b, band[0], band[1], float(temperature_K), False)
                ratios = []
                for i, j in pairs:
                    assigned = assignment.per_line[i]
                    key = (assigned.branch, assigned.J_lower)
                    if table_a.get(key, 0.0) > 0 and table_b.get(key, 0.0) > 0:
                        ratios.append((lines.height[i] / lines.height[j]) / (table_a[key] / table_b[key]))
                if len(ratios) < 3:
                    continue
                ratios_array = np.array(ratios)
                ratio = median(ratios_array)
                sigma = float(1.2533 * np.std(ratios_array) / math.sqrt(len(ratios)))  # std error of a median
                natural = iso_a.abundance / iso_b.abundance if iso_b.abundance > 0 else None
                major, minor = (a, b) if (natural or 1) >= 1 else (b, a)
                if major != a:
                    ratio, sigma, natural = 1.0 / ratio, sigma / ratio**2, (1.0 / natural if natural else None)
                out.append(AbundanceRatio(major, minor, Estimate(ratio, sigma, "1"), natural, len(pairs), f"median of matched {band[0]}-{band[1]} peak-height ratios"))
    return out


def analyse_intensities(analysis: Analysis, library: Library, temperature_K: float = 296.0) -> IntensityResult | None:
    """Equivalent widths, rotational temperatures and abundance ratios (spectra only)."""
    if analysis.baseline is None:
        return None
    widths, sigmas = equivalent_widths(analysis.data, analysis.baseline, analysis.lines)
    temperatures = rotational_temperatures(analysis.lines, analysis.assignment, widths, sigmas)
    ratios = abundance_ratios(analysis.lines, analysis.assignment, widths, sigmas, library, temperature_K)
    notes = ["line areas are equivalent widths (transmittance); valid for optically thin lines"]
    # only a pair with a large natural contrast (35/37: 3.1, 12C/13C: 92) shows optical depth;
    # 79Br/81Br (~1) saturate alike and keep their ratio
    natural_pairs = [r for r in ratios if r.natural and r.natural >= 2.0]
    thinness = None
    thin = None
    if natural_pairs:
        best = max(natural_pairs, key=lambda r: r.n_pairs)
        thinness = best.ratio.value / best.natural
        # a pair of the same molecule at natural abundance: its ratio is the natural one only
        # while the stronger line is still thin (within THIN_LIMIT, allowing for its noise)
        thin = thinness + 2.0 * (best.ratio.sigma or 0.0) / best.natural >= THIN_LIMIT
        if not thin:
            notes.append(
                f"lines are optically thick at their centres: {best.numerator}/{best.denominator} = "
                f"{best.ratio.value:.2f} against natural {best.natural:.2f}; intensities are not linear in strength"
            )
    fractions = hydrogen_fractions(analysis.lines, analysis.assignment, library, temperature_K)
    return IntensityResult(widths, sigmas, tuple(temperatures), tuple(ratios), thin, thinness, tuple(fractions), tuple(notes))


@functools.lru_cache(maxsize=256)
def band_strength_table(library: Library, label: str, v_upper: int, v_lower: int, temperature_K: float, include_abundance: bool) -> dict[tuple[str, int], float]:
    """Predicted strength of every line of a band up to J'' = 40, by (branch, J'') (cached:
    the library and temperature fix it)."""
    from processing.intensities import line_strengths
    from processing.levels import band_lines

    iso = library.isotopologue(label)
    lines = band_lines(iso.dunham, v_upper, v_lower, 40)
    strengths = line_strengths(iso, lines, temperature_K, include_abundance=include_abundance)
    return {(str(b), int(j)): float(s) for b, j, s in zip(lines.branch, lines.J_lower, strengths)}


def _column_per_line(lines: LineTable, assignment: AssignmentResult, library: Library, labels: set[str], temperature_K: float) -> np.ndarray:
    """height / predicted strength per molecule of the isotopologue (no abundance: a deuterated
    sample is not natural) for the clean assigned fundamental lines of `labels`: proportional
    to the isotopologue's column while lines are thin (all lines share the instrument's shape)."""
    values = []
    for i, assigned in enumerate(assignment.per_line):
        if assigned is None or assigned.isotopologue not in labels or (assigned.v_upper, assigned.v_lower) != (1, 0):
            continue
        if lines.saturated[i] or assigned.blended:
            continue
        table = band_strength_table(library, assigned.isotopologue, 1, 0, float(temperature_K), False)
        strength = table.get((assigned.branch, assigned.J_lower), 0.0)
        if strength > 0:
            values.append(lines.height[i] / strength)
    return np.array(values)


@functools.lru_cache(maxsize=64)
def _light_and_heavy(library: Library, molecule: str) -> tuple[str, str] | None:
    """`Library.light_and_heavy`, cached: the library fixes it, and finding it walks the library."""
    return library.light_and_heavy(molecule)


@functools.lru_cache(maxsize=64)
def _partner_isotopologue(library: Library, label: str) -> str | None:
    """`Library.partner_isotopologue`, cached as `_light_and_heavy`."""
    return library.partner_isotopologue(label)


def hydrogen_fractions(lines: LineTable, assignment: AssignmentResult, library: Library, temperature_K: float) -> list[HydrogenFraction]:
    """Hydrogen fraction when H and D forms of one molecule are both assigned (e.g. HCl in a
    DCl cell). Relies on the library's absolute band strengths, which are approximate (the
    deuterated ones estimated from the hydride), so this is an estimate to ~20-30%."""
    known = {iso.label: iso for iso in library.isotopologues()}
    found: dict[str, set[str]] = {}
    for a in assignment.per_line:
        if a and a.isotopologue in known:
            found.setdefault(known[a.isotopologue].molecule, set()).add(a.isotopologue)
    pairs = dict.fromkeys(pair for molecule in found if (pair := _light_and_heavy(library, molecule)) is not None)
    out = []
    for molecule_h, molecule_d in pairs:
        if molecule_h not in found or molecule_d not in found:
            continue
        # compare isotopologues that differ only in the hydrogen isotope (e.g. H35Cl with D35Cl)
        main_h = max(found[molecule_h], key=lambda label: known[label].abundance)
        partner = _partner_isotopologue(library, main_h)
        main_d = [label for label in found[molecule_d] if label == partner]
        if not main_d:
            continue
        column_h = _column_per_line(lines, assignment, library, {main_h}, temperature_K)
        column_d = _column_per_line(lines, assignment, library, set(main_d), temperature_K)
        if column_h.size < 3 or column_d.size < 3:
            continue
        median_h, median_d = median(column_h), median(column_d)
        ratio = float(median_h / median_d)
        relative = math.hypot(1.2533 * np.std(column_h) / median_h / math.sqrt(column_h.size), 1.2533 * np.std(column_d) / median_d / math.sqrt(column_d.size))
        fraction = ratio / (1.0 + ratio)
        sigma = fraction * (1 - fraction) * relative
        out.append(HydrogenFraction(molecule_h, molecule_d, Estimate(fraction, sigma, "1"), int(column_h.size + column_d.size),
                                    f"{main_h} against {main_d[0]}: line heights over library line strengths (approximate band strengths; thin lines)"))
    return out

