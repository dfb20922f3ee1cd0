"""Line finding and profile fits on a baseline-corrected absorbance spectrum.

Peaks: local maxima above `threshold_sigma` x noise that are the highest point within half a
line width and rise that far above the lowest points within 1.5 widths on both sides. Only
points above threshold are examined, so the cost does not grow with noise.

The threshold is `threshold_sigma` x the per-point noise, raised where the spectrum holds so
many independent noise samples that one would pass it by chance (fewer than 0.05 expected
per spectrum, counting one sample per noise correlation length, `processing.noise`).

Profiles: lines here are far narrower than the instrument resolution, so each observed shape
is the instrument line shape. Its core is fitted with a Gaussian (height, centre, FWHM) over
the points within ~0.6 FWHM of the top, by batched Gauss-Newton over all lines at once. A
symmetric model on a symmetric shape gives an unbiased centre whatever the apodization.
Neighbours are handled by refitting each line after subtracting the fitted neighbours
(blends such as 35/37 doublets). The centre's standard error propagates the noise through the
fit with the noise's measured point-to-point correlation (apodized, zero-filled noise is
correlated over several points, so counting points as independent would understate it), scaled
by the larger of the local noise sigma and the fit's own residual rms. A fit needs at least 4
points for its 3 parameters; a line drawn on fewer (coarse grids) keeps its fitted or
parabola centre with the conservative FWHM / (SNR x sqrt(N_eff)) as its uncertainty, N_eff the
independent noise samples across its FWHM, and is marked `few_points`.
"""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from processing.baseline import BaselineResult
from processing.index_ranges import expand_ranges
from processing.line_shape import (
    LineShapeModel,
    equivalent_width_estimates,
    explained_by_ringing,
    infer_line_shape,
    predicted_ringing,
    stated_line_shape,
    transmittance_depth,
)
from processing.noise import NoiseEstimate, white_noise
from processing.order_stats import median, percentile
from processing.spectrum import Spectrum

FOUR_LN2 = 4.0 * np.log(2.0)
GAUSS_AREA = float(np.sqrt(np.pi / FOUR_LN2))  # area = GAUSS_AREA x height x FWHM


@dataclass(frozen=True)
class LineTable:
    """Lines found in one spectrum, arrays aligned and sorted by position."""

    position_cm1: np.ndarray
    position_sigma_cm1: np.ndarray
    height: np.ndarray  # baseline-corrected absorbance at the top (fitted)
    width_cm1: np.ndarray  # FWHM of the fitted core
    area_cm1: np.ndarray  # integrated absorbance of the fitted shape, absorbance x cm-1
    snr: np.ndarray  # height / noise sigma
    saturated: np.ndarray  # top beyond the usable absorbance, flat or unmeasurable
    blended: np.ndarray  # a neighbour closer than 1.5 widths shares the profile
    ringing: np.ndarray  # explained by the lobes of other lines' instrument line shape
    typical_width_cm1: float = 0.0
    notes: tuple[str, ...] = field(default=())
    sigma_known: bool = True  # False for a line list: position_sigma_cm1 is only a weight
    few_points: np.ndarray | None = None  # profile drawn on < 4 points: conservative sigma
    line_shape: LineShapeModel | None = None  # the instrument line shape the ringing flags used
    equivalent_width_estimate: np.ndarray | None = None  # T-depth x cm-1, from the main lobe

    def __post_init__(self) -> None:
        if self.few_points is None:
            object.__setattr__(self, "few_points", np.zeros(self.position_cm1.size, dtype=bool))

    @property
    def count(self) -> int:
        return int(self.position_cm1.size)

    @classmethod
    def from_positions(
        cls, positions: np.ndarray, intensities: np.ndarray | None = None, sigma_cm1: float = 1e-3
    ) -> LineTable:
        """A table from a line list (no shapes): nominal sigma, unknown widths."""
        positions = np.asarray(positions, dtype=np.float64)
        order = np.argsort(positions)
        positions = positions[order]
        n = positions.size
        heights = np.ones(n) if intensities is None else np.asarray(intensities, dtype=np.float64)[order]
        false = np.zeros(n, dtype=bool)
        return cls(
            position_cm1=positions,
            position_sigma_cm1=np.full(n, sigma_cm1),
            height=heights,
            width_cm1=np.full(n, np.nan),
            area_cm1=np.full(n, np.nan),
            snr=np.full(n, np.inf),
            saturated=false,
            blended=false.copy(),
            ringing=false.copy(),
            notes=("line list: positions as given, uncertainties from the fit scatter",),
            sigma_known=False,
        )


SATURATED_WEIGHT_FACTOR = 3.0  # a flat or black top locates its centre less well
BLENDED_WEIGHT_FACTOR = 5.0  # a line sharing its profile with a neighbour


def fit_sigma_factor(saturated: np.ndarray | bool, blended: np.ndarray | bool) -> np.ndarray:
    """How much a line's position uncertainty is widened when it enters a fit (the one rule
    used by band fits, term-value fits and the assignment)."""
    return np.where(saturated, SATURATED_WEIGHT_FACTOR, 1.0) * np.where(blended, BLENDED_WEIGHT_FACTOR, 1.0)


class _Negated:
    """-values, read only where asked (a gather): no negated copy of a whole spectrum."""

    def __init__(self, values: np.ndarray) -> None:
        self.values = values
        self.size = values.size

    def __getitem__(self, index: np.ndarray) -> np.ndarray:
        return -self.values[index]


def _gather(values: np.ndarray | _Negated, centres: np.ndarray, half: int) -> tuple[np.ndarray, np.ndarray]:
    """values[centre-half .. centre+half] for each centre (clipped at the ends) and the indices."""
    offsets = np.arange(-half, half + 1)
    index = np.clip(centres[:, None] + offsets[None, :], 0, values.size - 1)
    return values[index], index


def _estimate_width_points(y: np.ndarray | _Negated, peaks: np.ndarray) -> float:
    """Median FWHM, in points, of the strongest peaks (half-maximum crossings, interpolated)."""
    strongest = peaks[np.argsort(y[peaks])[::-1][:30]]
    half_window = 32
    for _ in range(4):
        window, _ = _gather(y, strongest, half_window)
        top = window[:, half_window][:, None]
        below = window < top / 2.0
        left = below[:, :half_window][:, ::-1]
        right = below[:, half_window + 1 :]
        has_both = left.any(axis=1) & right.any(axis=1)
        if has_both.sum() >= max(1, strongest.size // 2):
            widths = []
            for row, ok in enumerate(has_both):
                if not ok:
                    continue
                li = int(np.argmax(left[row]))  # first index below half, counting outwards
                ri = int(np.argmax(right[row]))
                t = float(top[row, 0])
                # interpolate each crossing between the last point above and the first below
                yl_in, yl_out = window[row, half_window - li], window[row, half_window - li - 1]
                yr_in, yr_out = window[row, half_window + 1 + ri - 1], window[row, half_window + 1 + ri]
                frac_l = (yl_in - t / 2) / max(yl_in - yl_out, 1e-300)
                frac_r = (yr_in - t / 2) / max(yr_in - yr_out, 1e-300)
                widths.append((li + frac_l) + (ri + frac_r))
            # the narrow end: merged isotopologue pairs and blends only ever widen a line
            return percentile(widths, 25)
        half_window *= 4
    return 3.0


def find_peaks(
    corrected: np.ndarray, sigma: float, threshold_sigma: float, width_points: float | None, dips: bool = False
) -> tuple[np.ndarray, float]:
    """Indices of accepted peaks (with `dips`: of -corrected, read without making it) and the
    width estimate (points) used."""
    floor = 1e-4 * max(float(np.max(corrected)), -float(np.min(corrected))) if corrected.size else 0.0
    threshold = max(threshold_sigma * sigma, floor)
    inner = corrected[1:-1]
    above = np.flatnonzero(inner < -threshold if dips else inner > threshold) + 1
    y: np.ndarray | _Negated = _Negated(corrected) if dips else corrected
    if above.size == 0:
        return above, width_points or 3.0
    centre = y[above]
    is_max = (centre > y[above - 1]) & (centre >= y[above + 1])
    peaks = above[is_max]
    if peaks.size == 0:
        return peaks, width_points or 3.0
    if width_points is None:
        width_points = _estimate_width_points(y, peaks)
    local = max(1, int(round(0.5 * width_points)))
    window, _ = _gather(y, peaks, local)
    peaks = peaks[y[peaks] >= window.max(axis=1)]
    # keep one of a flat pair
    if peaks.size > 1:
        keep = np.concatenate([[True], np.diff(peaks) > local])
        peaks = peaks[keep]
    reach = max(2, int(round(1.5 * width_points)))
    window, _ = _gather(y, peaks, reach)
    left_min = window[:, :reach].min(axis=1)
    right_min = window[:, reach + 1 :].min(axis=1)
    prominence = y[peaks] - np.maximum(left_min, right_min)
    peaks = peaks[prominence > threshold * local_noise_factor(np.maximum(left_min, right_min))]
    return peaks, float(width_points)


FALSE_PEAKS_PER_SPECTRUM = 0.05


def gaussian_tail_sigmas(probability: float) -> float:
    """k with P(z > k) = probability for a unit Gaussian (bisection on erfc; no scipy)."""
    low, high = 0.0, 40.0
    for _ in range(80):
        middle = 0.5 * (low + high)
        if 0.5 * math.erfc(middle / math.sqrt(2.0)) > probability:
            low = middle
        else:
            high = middle
    return 0.5 * (low + high)


def detection_sigmas(threshold_sigma: float, points: int, noise: NoiseEstimate) -> float:
    """The detection threshold in noise sigma: at least `threshold_sigma`, and high enough that
    fewer than FALSE_PEAKS_PER_SPECTRUM noise maxima pass it among the spectrum's independent
    noise samples (points / correlation length)."""
    independent = noise.effective_points(points)
    return max(threshold_sigma, gaussian_tail_sigmas(FALSE_PEAKS_PER_SPECTRUM / independent))


def local_noise_factor(absorbance_above_baseline: np.ndarray) -> np.ndarray:
    """How much larger the absorbance noise is than at the baseline: detector noise is
    white in transmittance, so sigma_A = sigma_T / (T ln 10) grows as 10**A (capped at A = 3)."""
    return np.power(10.0, np.clip(absorbance_above_baseline, 0.0, 3.0))


def _gaussian(x: np.ndarray, height: np.ndarray, centre: np.ndarray, fwhm: np.ndarray) -> np.ndarray:
    return height[:, None] * np.exp(-FOUR_LN2 * ((x - centre[:, None]) / fwhm[:, None]) ** 2)


MIN_PROFILE_POINTS = 4  # a 3-parameter profile fit needs positive degrees of freedom
# Neighbours taken out of a line's window are drawn to about this fraction of their true
# shape there (Gaussian cores for close ones, the instrument line shape for far ones): the
# same fraction of the shift their removal causes goes into the line's position uncertainty.
DEBLEND_MODEL_ERROR = 0.35
# a line within WING_WIDTHS widths of one twice as tall stands on its wing: how far a local
# slope under it moves its centre joins its uncertainty; beside one WING_RATIO times taller (a
# weak isotopologue's line beside the main one's) the sloped fit's centre is taken
WING_WIDTHS = 5.0
WING_RATIO = 5.0


def _core_weights(target: np.ndarray, half: int) -> np.ndarray:
    """0/1 weights of the points each line's profile is fitted on: its upper part (above 20% of
    the top), widened to above 5% where that leaves fewer than MIN_PROFILE_POINTS (coarse grids)."""
    top = np.maximum(target.max(axis=1, keepdims=True), 1e-300)
    weight = (target > 0.2 * top).astype(np.float64)
    thin = weight.sum(axis=1) < MIN_PROFILE_POINTS
    if thin.any():
        weight[thin] = (target[thin] > 0.05 * top[thin]).astype(np.float64)
    weight[:, half] = 1.0
    return weight


# Gauss-Newton stops once no step moves a centre, width or height by this fraction of a width
# (or of the height): far below any line's uncertainty.
CONVERGED_STEP = 1e-9


def _jacobian(x: np.ndarray, h: np.ndarray, c: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    u = (x - c[:, None]) / w[:, None]
    g = np.exp(-FOUR_LN2 * u**2)
    jac = np.stack([g, h[:, None] * g * 2 * FOUR_LN2 * u / w[:, None], h[:, None] * g * 2 * FOUR_LN2 * u**2 / w[:, None]], axis=2)
    return g, jac


def _fit_gaussians(
    x: np.ndarray,
    y: np.ndarray,
    weight: np.ndarray,
    height: np.ndarray,
    centre: np.ndarray,
    fwhm: np.ndarray,
    correlation: np.ndarray | None = None,
    iterations: int = 8,
    background: bool = False,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Batched Gauss-Newton for y ~ h exp(-4ln2 ((x-c)/w)^2) per row (plus a + b (x - c0)
    with `background`: a line on the sloping wing of a stronger one); returns h, c, w, the
    per-row covariance for unit per-point noise with the points' `correlation` matrix (identity
    when None: independent points), and the residual rms."""
    h, c, w = height.copy(), centre.copy(), fwhm.copy()
    n = h.size
    size = 5 if background else 3
    offset, slope = np.zeros(n), np.zeros(n)
    reference = centre[:, None]
    eye = np.eye(size)[None, :, :]

    def columns(g: np.ndarray, jac: np.ndarray) -> np.ndarray:
        if not background:
            return jac
        return np.concatenate([jac, np.ones_like(g)[:, :, None], (x - reference)[:, :, None]], axis=2)

    for _ in range(iterations):
        g, jac = _jacobian(x, h, c, w)
        jac = columns(g, jac) * weight[:, :, None]
        r = (y - h[:, None] * g - offset[:, None] - slope[:, None] * (x - reference)) * weight
        jac_t = jac.transpose(0, 2, 1)
        jtj = jac_t @ jac + 1e-12 * eye
        jtr = jac_t @ r[:, :, None]
        try:
            step = np.linalg.solve(jtj, jtr)[:, :, 0]
        except np.linalg.LinAlgError:
            break
        # keep steps modest: centre within half a width, width and height positive
        step[:, 1] = np.clip(step[:, 1], -0.5 * w, 0.5 * w)
        h = np.maximum(h + step[:, 0], 1e-12)
        c = c + step[:, 1]
        w = np.clip(w + step[:, 2], 0.3 * fwhm, 3.0 * fwhm)
        if background:
            offset, slope = offset + step[:, 3], slope + step[:, 4]
        # converged everywhere: the last step moved no centre or width by 1e-9 of a width
        if np.all(np.abs(step[:, 1:3]) <= CONVERGED_STEP * w[:, None]) and np.all(np.abs(step[:, 0]) <= CONVERGED_STEP * h):
            break
    g, jac = _jacobian(x, h, c, w)
    jac = columns(g, jac) * weight[:, :, None]
    normal = jac.transpose(0, 2, 1) @ jac
    # a degenerate window (a line on too few points, a diverged fit) gives an infinite
    # variance, not a warning: the caller replaces it
    degenerate = ~np.all(np.isfinite(normal), axis=(1, 2))
    normal[degenerate] = np.eye(size)
    with np.errstate(all="ignore"):
        inverse = _inverse_normal(normal)
        if correlation is None:
            cov = inverse
        else:
            # sandwich: (J'J)^-1 J' R J (J'J)^-1 for least squares on correlated noise
            finite = np.nan_to_num(jac)
            middle = finite.transpose(0, 2, 1) @ (correlation @ finite)
            cov = inverse @ middle @ inverse
    cov[degenerate] = np.inf
    cov[~np.isfinite(cov)] = np.inf
    used = weight.sum(axis=1)
    resid = ((y - h[:, None] * g - offset[:, None] - slope[:, None] * (x - reference)) * weight) ** 2
    rms = np.sqrt(resid.sum(axis=1) / np.maximum(used - size, 1))
    return h, c, w, cov, rms


def _inverse_normal(normal: np.ndarray) -> np.ndarray:
    """Inverse of each small normal matrix: LU where that is accurate (a few times faster than
    an SVD per matrix), the pseudo-inverse for the singular or ill-conditioned ones."""
    try:
        inverse = np.linalg.inv(normal)
    except np.linalg.LinAlgError:
        return np.linalg.pinv(normal)
    size = normal.shape[-1]
    error = np.abs(normal @ inverse - np.eye(size)).max(axis=(1, 2))
    poor = ~(error <= 1e-9)
    if poor.any():
        inverse[poor] = np.linalg.pinv(normal[poor])
    return inverse


def conservative_position_sigma(
    width_cm1: np.ndarray, height: np.ndarray, local_sigma: np.ndarray, spacing_cm1: float, noise: NoiseEstimate
) -> np.ndarray:
    """FWHM / (SNR x sqrt(N_eff)): a line's centre uncertainty when its profile cannot be fitted,
    N_eff the independent noise samples across its FWHM (at least 1). A least-squares centre
    on a Gaussian does ~1.5x better than this (calc), so it never promises too much."""
    snr = np.maximum(height / np.maximum(local_sigma, 1e-300), 1.0)
    independent = np.maximum(1.0, width_cm1 / spacing_cm1 / noise.correlation_points)
    return width_cm1 / (snr * np.sqrt(independent))


def measure_lines(
    spectrum: Spectrum,
    baseline: BaselineResult,
    threshold_sigma: float = 5.0,
    width_hint_cm1: float | None = None,
) -> LineTable:
    """Find the lines of `spectrum` and fit each one's profile (see module docstring)."""
    x_all = spectrum.wavenumber_cm1
    y_all = baseline.corrected
    spacing = spectrum.spacing_cm1
    sigma = baseline.noise_sigma
    noise = baseline.noise or white_noise(sigma)
    threshold_sigma = detection_sigmas(threshold_sigma, y_all.size, noise)
    width_points_hint = None if width_hint_cm1 is None else width_hint_cm1 / spacing
    peaks, width_points = find_peaks(y_all, sigma, threshold_sigma, width_points_hint)
    peaks, saturated_lines = _collapse_saturated(spectrum, baseline, peaks)
    empty = np.zeros(0)
    if peaks.size == 0 and not saturated_lines:
        f = np.zeros(0, dtype=bool)
        return LineTable(empty, empty, empty, empty, empty, empty, f, f, f, 0.0, ("no peaks above threshold",))
    half = max(2, int(round(0.6 * width_points)))
    if peaks.size == 0:
        peaks = np.zeros(0, dtype=np.int64)
    y_win, index = _gather(y_all, peaks, half)
    x_win = x_all[index]
    top = y_all[peaks]
    # initial centre: three-point parabola on the peak; initial width: the estimate
    y_m, y_0, y_p = y_all[np.maximum(peaks - 1, 0)], top, y_all[np.minimum(peaks + 1, y_all.size - 1)]
    denom = y_m - 2 * y_0 + y_p
    shift = np.where(denom < 0, 0.5 * (y_m - y_p) / np.where(denom < 0, denom, -1.0), 0.0)
    centre0 = x_all[peaks] + np.clip(shift, -0.5, 0.5) * spacing
    fwhm0 = np.full(peaks.size, max(width_points, 1.0) * spacing)
    height0 = top.copy()
    neighbours = [k for k in (-2, -1, 1, 2) if peaks.size > abs(k)]
    h, c, w = height0, centre0, fwhm0
    cov = np.zeros((peaks.size, 3, 3))
    rms = np.zeros(peaks.size)
    weight = np.ones_like(y_win)
    for _ in range(3):
        target = y_win.copy()
        for k in neighbours:
            other = np.clip(np.arange(peaks.size) + k, 0, peaks.size - 1)
            valid = (np.arange(peaks.size) + k >= 0) & (np.arange(peaks.size) + k < peaks.size)
            contribution = _gaussian(x_win, h[other], c[other], w[other])
            target -= np.where(valid[:, None], contribution, 0.0)
        weight = _core_weights(target, half)
        h, c, w, cov, rms = _fit_gaussians(x_win, target, weight, h, c, w, noise.correlation_matrix(2 * half + 1))
        bad = _diverged(h, c, x_all[peaks], y_win, spacing * (half + 1), sigma)
        c = np.where(bad, centre0, c)
        w = np.where(~np.isfinite(w) | bad, fwhm0, w)
        h = np.where(~np.isfinite(h) | bad, height0, h)
    all_c = np.concatenate([c, np.array([s[0] for s in saturated_lines])]) if saturated_lines else c
    all_w = np.concatenate([w, np.array([s[3] for s in saturated_lines])]) if saturated_lines else w
    all_h = np.concatenate([h, np.array([s[2] for s in saturated_lines])]) if saturated_lines else h
    line_shape = line_shape_of(spectrum, baseline, all_c, all_w, all_h) if all_c.size >= 3 else None
    h, c, w, cov, rms, weight, wing_shift = _deblend_far_neighbours(
        spectrum, baseline, x_win, y_win, half, h, c, w, cov, rms, weight, saturated_lines, noise, peaks, line_shape,
        all_c, all_w, all_h)
    # how far taking the neighbours out moved each centre: the neighbours' drawn shapes are
    # good to DEBLEND_MODEL_ERROR of that, which the centre's uncertainty carries
    lone = _fit_gaussians(x_win, y_win, _core_weights(y_win, half), h, c, w)[1]
    deblend_shift = np.where(np.isfinite(lone), c - lone, 0.0)
    bad = _diverged(h, c, x_all[peaks], y_win, spacing * (half + 1), sigma)
    c = np.where(bad, centre0, c)
    w = np.where(~np.isfinite(w) | bad, fwhm0, w)
    h = np.where(~np.isfinite(h) | bad, height0, h)
    used = weight.sum(axis=1)
    local_sigma = sigma * local_noise_factor(0.5 * h)
    # the noise, not the fit's residual rms: on a strong line that rms is the Gaussian core's
    # misfit to the instrument line shape, symmetric about the centre and so no error in it
    # (a line's neighbours, which are not symmetric, enter through the deblending term)
    position_sigma = np.sqrt(np.clip(cov[:, 1, 1], 0, None) * local_sigma**2 + (DEBLEND_MODEL_ERROR * deblend_shift) ** 2 + wing_shift**2)
    position_sigma = np.maximum(np.nan_to_num(position_sigma, nan=np.inf), 0.01 * spacing)
    conservative = conservative_position_sigma(w, h, local_sigma, spacing, noise)
    few_points = used < MIN_PROFILE_POINTS
    position_sigma = np.where(few_points, conservative, position_sigma)
    # a profile fit that cannot place its centre to 10% of a width has failed (e.g. a
    # distorted blend): keep the three-point parabola centre, with at least that 10% as its
    # uncertainty
    limit = 0.1 * median(w) if w.size else spacing
    failed = (position_sigma > limit) & ~few_points
    c = np.where(failed, centre0, c)
    position_sigma = np.where(failed, np.maximum(limit, conservative), position_sigma)
    raw_top = spectrum.absorbance[peaks]
    sat_window, _ = _gather(spectrum.saturated.astype(np.int8), peaks, half)
    saturated = (raw_top > baseline.usable_absorbance) | (sat_window.max(axis=1) > 0)
    if saturated_lines:
        extra = np.array(saturated_lines)  # centre, sigma, height, width
        c = np.concatenate([c, extra[:, 0]])
        position_sigma = np.concatenate([position_sigma, extra[:, 1]])
        h = np.concatenate([h, extra[:, 2]])
        w = np.concatenate([w, extra[:, 3]])
        saturated = np.concatenate([saturated, np.ones(extra.shape[0], dtype=bool)])
        few_points = np.concatenate([few_points, np.zeros(extra.shape[0], dtype=bool)])
    order = np.argsort(c)
    c, h, w, position_sigma, saturated = c[order], h[order], w[order], position_sigma[order], saturated[order]
    few_points = few_points[order]
    gaps = np.diff(c)
    strong = (snr_of(h, sigma) >= 10.0) & ~saturated
    typical = percentile(w[strong] if strong.sum() >= 3 else w, 25)
    close = gaps < 1.5 * typical
    blended = np.zeros(c.size, dtype=bool)
    blended[:-1] |= close
    blended[1:] |= close
    ringing, line_shape, equivalent = ringing_flags(spectrum, baseline, c, h, w, saturated, threshold_sigma, line_shape)
    snr = snr_of(h, sigma)
    return LineTable(
        position_cm1=c,
        position_sigma_cm1=position_sigma,
        height=h,
        width_cm1=w,
        area_cm1=GAUSS_AREA * h * w,
        snr=snr,
        saturated=saturated,
        blended=blended,
        ringing=ringing,
        typical_width_cm1=typical,
        notes=(f"threshold {threshold_sigma:.3g} x noise sigma {sigma:.3g}", f"typical FWHM {typical:.4f} cm-1")
        + ((f"line shape {line_shape.source}",) if line_shape else ()),
        few_points=few_points,
        line_shape=line_shape,
        equivalent_width_estimate=equivalent,
    )


def line_profile(lines: LineTable) -> Callable[[np.ndarray], np.ndarray] | None:
    """A narrow line's measured profile relative to its peak, as a function of the offset
    (cm-1): the instrument line shape when it sets the width (its FWHM at least half the
    lines' typical width), else a Gaussian of that width; None without widths (a line list)."""
    width = lines.typical_width_cm1
    if not width > 0 or not np.isfinite(width):
        return None
    model = lines.line_shape
    if model is not None and model.fwhm_cm1 >= 0.5 * width:
        return model.relative
    return lambda offset: np.exp(-FOUR_LN2 * (np.asarray(offset) / width) ** 2)


def _diverged(h: np.ndarray, c: np.ndarray, peak_x: np.ndarray, y_win: np.ndarray, reach: float, sigma: float) -> np.ndarray:
    """Profile fits that ran away: centre off its peak by more than `reach`, or a height far
    above anything in its window (a weak feature drawn as a tall, broad Gaussian would then be
    taken out of its neighbours' windows)."""
    too_tall = h > 1.5 * np.max(y_win, axis=1) + 5.0 * sigma
    return ~np.isfinite(c) | ~np.isfinite(h) | (np.abs(c - peak_x) > reach) | too_tall


def _deblend_far_neighbours(
    spectrum: Spectrum, baseline: BaselineResult, x_win: np.ndarray, y_win: np.ndarray, half: int,
    h: np.ndarray, c: np.ndarray, w: np.ndarray, cov: np.ndarray, rms: np.ndarray, weight: np.ndarray,
    saturated_lines: list[tuple[float, float, float, float]], noise: NoiseEstimate, peaks: np.ndarray,
    model: LineShapeModel | None, centres: np.ndarray, widths: np.ndarray, heights: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """One more profile fit of every line with its neighbours taken out as the instrument line
    shape draws them (their wings and sidelobes, whose shape a Gaussian core does not follow:
    a line beside a 10x stronger one 2 widths away is otherwise pulled by ~0.1 of a width).
    Neighbours whose main lobe reaches the window are taken out as Gaussians, as before.
    `centres`, `widths`, `heights`: the fitted lines followed by the saturated ones."""
    if model is None or c.size < 2:
        return h, c, w, cov, rms, weight, np.zeros(c.size)
    x = spectrum.wavenumber_cm1
    top_depth = transmittance_depth(np.clip(heights, 0.0, None))
    equivalent = equivalent_width_estimates(x, baseline.corrected, centres, model, widths)
    saturated = np.concatenate([np.zeros(c.size, dtype=bool), np.ones(len(saturated_lines), dtype=bool)])
    # features that are other lines' lobes ring onto nothing and are no neighbours to take out
    lobe = explained_by_ringing(top_depth, predicted_ringing(centres, equivalent, model, centres, saturated),
                                np.full(centres.size, baseline.noise_transmittance), 5.0)
    # a line much wider than the instrument's line shape (resolved: a black Doppler core at
    # high resolution) does not ring like a narrow one: it is left as it is
    resolved = widths > 1.3 * model.fwhm_cm1
    sources = ~resolved & ~lobe
    far_depth, _ = predicted_ringing(centres[sources], equivalent[sources], model, x_win.ravel())
    far = -np.log10(np.clip(1.0 - far_depth.reshape(x_win.shape), 1e-6, None))
    target = y_win - far
    reach = model.main_lobe_cm1 + float(np.max(np.abs(x_win - c[:, None]))) if c.size else 0.0
    order = np.argsort(centres)
    sorted_c = centres[order]
    row, j = _neighbour_pairs(sorted_c, order, c - reach, c + reach)
    take = (j < c.size) & (j != row) & ~lobe[j]
    row, j = row[take], j[take]
    _take_out_gaussians(target, x_win, row, j, h, c, w)
    weight = _core_weights(target, half)
    h, c, w, cov, rms = _fit_gaussians(x_win, target, weight, h, c, w, noise.correlation_matrix(2 * half + 1))
    wing_shift = np.zeros(c.size)
    # a line on the wing of a much stronger one (WING_RATIO, WING_WIDTHS) stands on a slope the
    # drawn shapes do not follow exactly (a thick line's pressure-broadened wings): refitted on
    # a wider window with a local straight background under it
    row, j = _neighbour_pairs(sorted_c, order, c - WING_WIDTHS * w, c + WING_WIDTHS * w)
    row, j = row[j != row], j[j != row]
    stronger = np.bincount(row, weights=heights[j] > WING_RATIO * h[row], minlength=c.size) > 0
    beside = np.bincount(row, weights=heights[j] > 2.0 * h[row], minlength=c.size) > 0
    if beside.any():
        wide = max(half + 2, int(round(1.1 * median(w) / spectrum.spacing_cm1)))
        pick = np.flatnonzero(beside)
        y_wide, index = _gather(baseline.corrected, peaks[pick], wide)
        x_wide = x[index]
        far_wide, _ = predicted_ringing(centres[sources], equivalent[sources], model, x_wide.ravel())
        target_wide = y_wide + np.log10(np.clip(1.0 - far_wide.reshape(x_wide.shape), 1e-6, None))
        margin = wide * spectrum.spacing_cm1
        row, j = _neighbour_pairs(sorted_c, order, c[pick] - reach - margin, c[pick] + reach + margin)
        i = pick[row]
        take = (j < c.size) & (j != i)
        row, i, j = row[take], i[take], j[take]
        take = ~lobe[j] & (np.abs(c[j] - c[i]) < model.main_lobe_cm1 + margin)
        _take_out_gaussians(target_wide, x_wide, row[take], j[take], h, c, w)
        near_core = (np.abs(x_wide - c[pick][:, None]) <= 1.1 * w[pick][:, None]).astype(np.float64)
        _, cb, _, covb, _ = _fit_gaussians(x_wide, target_wide, near_core, h[pick], c[pick], w[pick],
                                                noise.correlation_matrix(2 * wide + 1), background=True)
        good = np.isfinite(cb) & (np.abs(cb - c[pick]) < 0.5 * w[pick]) & (near_core.sum(axis=1) >= 6)
        # how far the slope under it moves the centre is an uncertainty of the centre; beside a
        # much stronger line (WING_RATIO) the sloped fit's centre is taken. Height and width stay
        # those of the core fit (the background's offset would take part of the height).
        keep = pick[good]
        moved = cb[good] - c[keep]
        take = stronger[keep]
        c[keep] = np.where(take, cb[good], c[keep])
        cov[keep, 1, 1] = np.where(take, covb[good][:, 1, 1], cov[keep, 1, 1])
        wing_shift[keep] = np.abs(moved)
    return h, c, w, cov, rms, weight, wing_shift


def _neighbour_pairs(sorted_centres: np.ndarray, order: np.ndarray, low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(row, line) for every line whose centre lies in [low[row], high[row]), rows ascending and
    each row's lines in order of centre (`order` sorts the centres into `sorted_centres`)."""
    row, position = expand_ranges(np.searchsorted(sorted_centres, low), np.searchsorted(sorted_centres, high))
    return row, order[position]


def _take_out_gaussians(target: np.ndarray, x: np.ndarray, row: np.ndarray, line: np.ndarray,
                        h: np.ndarray, c: np.ndarray, w: np.ndarray) -> None:
    """Subtract, in place and pair by pair in the order given, line `line`'s Gaussian from
    window `row` of `target` (sampled at `x[row]`)."""
    if row.size:
        np.subtract.at(target, row, _gaussian(x[row], h[line], c[line], w[line]))


def _collapse_saturated(spectrum: Spectrum, baseline: BaselineResult, peaks: np.ndarray) -> tuple[np.ndarray, list[tuple[float, float, float, float]]]:
    """Peaks inside a saturated region (unmeasurable or flat top) are noise on a line that has
    bottomed out: they are replaced by one line at the region's centre, which is where a
    symmetric line's centre is. Its uncertainty is half a point spacing (the edges are known
    to about a point each). Returns the remaining peak indices and (centre, sigma, height,
    width) of each collapsed line."""
    x = spectrum.wavenumber_cm1
    spacing = spectrum.spacing_cm1
    keep = np.ones(peaks.size, dtype=bool)
    collapsed: list[tuple[float, float, float, float]] = []
    peak_x = x[peaks]
    for region in baseline.saturated_regions:
        lo = np.searchsorted(peak_x, region.first_cm1 - 2 * spacing)
        hi = np.searchsorted(peak_x, region.last_cm1 + 2 * spacing, side="right")
        keep[lo:hi] = False
        centre = 0.5 * (region.first_cm1 + region.last_cm1)
        k = min(int(np.searchsorted(x, centre)), x.size - 1)
        height = float(region.peak_absorbance - baseline.baseline[k])
        collapsed.append((centre, 0.5 * spacing, height, region.last_cm1 - region.first_cm1 + spacing))
    return peaks[keep], collapsed


def snr_of(height: np.ndarray, sigma: float) -> np.ndarray:
    return height / sigma if sigma > 0 else np.full(height.size, np.inf)


def line_shape_of(spectrum: Spectrum, baseline: BaselineResult, centres: np.ndarray, widths: np.ndarray, heights: np.ndarray) -> LineShapeModel | None:
    """The instrument line shape of a spectrum: the stated one (apodization, resolution) unless
    the strongest lines plainly show another (`processing.line_shape.infer_line_shape`)."""
    top_depth = transmittance_depth(np.clip(heights, 0.0, None))
    stated = stated_line_shape(spectrum.meta.apodization, spectrum.meta.resolution_cm1)
    return infer_line_shape(spectrum.wavenumber_cm1, baseline.corrected, centres, widths, top_depth, baseline.noise_transmittance, stated)


def ringing_flags(
    spectrum: Spectrum, baseline: BaselineResult, centres: np.ndarray, heights: np.ndarray, widths: np.ndarray,
    saturated: np.ndarray, threshold_sigma: float, model: LineShapeModel | None = None,
) -> tuple[np.ndarray, LineShapeModel | None, np.ndarray]:
    """(flag per line, the line shape used, equivalent width per line): a line is flagged as
    ringing when the lobes the spectrum's lines put at its position explain its depth (see
    `processing.line_shape`). The line shape is the stated one (apodization, resolution) or
    the window that best explains the strongest lines' profiles (`line_shape_of`) unless given."""
    flags = np.zeros(centres.size, dtype=bool)
    x = spectrum.wavenumber_cm1
    noise_t = baseline.noise_transmittance
    top_depth = transmittance_depth(np.clip(heights, 0.0, None))
    model = model or line_shape_of(spectrum, baseline, centres, widths, heights)
    if model is None or centres.size < 2:
        return flags, model, np.zeros(centres.size)
    equivalent = equivalent_width_estimates(x, baseline.corrected, centres, model, widths)
    lobes = predicted_ringing(centres, equivalent, model, centres, saturated)
    # in transmittance the detector noise is the same everywhere
    flags = explained_by_ringing(top_depth, lobes, np.full(centres.size, noise_t), threshold_sigma)
    return flags, model, equivalent


NEGATIVE_THRESHOLD_SIGMA = 8.0


def negative_features(spectrum: Spectrum, baseline: BaselineResult, lines: LineTable) -> np.ndarray:
    """Positions of dips below the baseline (negative absorbance: an absorber that was in the
    background beam, or an inverted axis) that the lines' own ringing does not explain. With
    no line shape known, dips within 20 widths of a line 20x deeper are taken as ringing."""
    peaks, _ = find_peaks(baseline.corrected, baseline.noise_sigma, NEGATIVE_THRESHOLD_SIGMA, None, dips=True)
    if peaks.size == 0:
        return np.zeros(0)
    positions = spectrum.wavenumber_cm1[peaks]
    if lines.count and lines.line_shape is not None and lines.equivalent_width_estimate is not None:
        depth = transmittance_depth(baseline.corrected[peaks])  # negative
        lobes = predicted_ringing(lines.position_cm1, lines.equivalent_width_estimate, lines.line_shape, positions, lines.saturated)
        noise_t = np.full(peaks.size, baseline.noise_transmittance)
        return positions[~explained_by_ringing(depth, lobes, noise_t, NEGATIVE_THRESHOLD_SIGMA)]
    strong = lines.position_cm1[lines.height > 20 * -baseline.corrected[peaks].min()] if lines.count else np.zeros(0)
    width = lines.typical_width_cm1 or 1.0
    return np.array([p for p in positions if strong.size == 0 or np.min(np.abs(strong - p)) > 20 * width])


def measure_doublet(
    spectrum: Spectrum,
    baseline: BaselineResult,
    width_cm1: float,
    centre_guess: float,
    separation_cm1: float,
    ratio: float,
) -> tuple[float, float] | None:
    """Re-measure a line whose partner (e.g. the other chlorine isotopologue) lies
    `separation_cm1` away, too close to be measured apart: fit h1 G(x - c) + h2 G(x - c -
    separation) with the separation fixed (mass scaling predicts it to ~0.01 cm-1) and the two
    heights, the centre and the width free (`ratio` h2/h1 only starts the fit: optically thick
    lines do not keep the abundance ratio). Returns (c, standard error) of this line, or None
    when the fit does not converge."""
    x_all = spectrum.wavenumber_cm1
    y_all = baseline.corrected
    width = max(width_cm1, 2.0 * spectrum.spacing_cm1)
    if abs(separation_cm1) < 0.6 * width:
        # closer than this the second height and the centre cannot be told apart: the caller's
        # intensity-weighted blend centre is the better estimate
        return None
    low = min(centre_guess, centre_guess + separation_cm1) - 1.2 * width
    high = max(centre_guess, centre_guess + separation_cm1) + 1.2 * width
    lo, hi = np.searchsorted(x_all, low), np.searchsorted(x_all, high)
    if hi - lo < 6:
        return None
    x = x_all[lo:hi]
    y = y_all[lo:hi]
    # the upper part of the profile only, as for single lines: the wings are where the
    # instrument line shape departs most from a Gaussian
    upper = y > 0.2 * y.max()
    if upper.sum() < 5:
        return None
    x, y = x[upper], y[upper]
    h1 = float(max(y.max(), 1e-12)) / (1.0 + ratio)
    h2 = ratio * h1
    c, w = float(centre_guess), float(width)
    jac = np.zeros((x.size, 4))
    for _ in range(15):
        u1 = (x - c) / w
        u2 = (x - c - separation_cm1) / w
        g1 = np.exp(-FOUR_LN2 * u1**2)
        g2 = np.exp(-FOUR_LN2 * u2**2)
        model = h1 * g1 + h2 * g2
        jac = np.column_stack(
            [
                g1,
                g2,
                2 * FOUR_LN2 * (h1 * u1 * g1 + h2 * u2 * g2) / w,
                2 * FOUR_LN2 * (h1 * u1**2 * g1 + h2 * u2**2 * g2) / w,
            ]
        )
        try:
            step, *_ = np.linalg.lstsq(jac, y - model, rcond=None)
        except np.linalg.LinAlgError:
            return None
        h1 += step[0]
        h2 = max(h2 + step[1], 0.0)
        c += float(np.clip(step[2], -0.5 * w, 0.5 * w))
        w = float(np.clip(w + step[3], 0.3 * width, 3.0 * width))
        if abs(step[2]) < 1e-6 * w:
            break
    if not (h1 > 0 and np.isfinite(c) and abs(c - centre_guess) < width):
        return None
    residual = y - (h1 * np.exp(-FOUR_LN2 * ((x - c) / w) ** 2) + h2 * np.exp(-FOUR_LN2 * ((x - c - separation_cm1) / w) ** 2))
    scatter = max(baseline.noise_sigma * float(local_noise_factor(np.array(0.5 * h1))), float(np.sqrt(np.mean(residual**2))))
    inverse = np.linalg.pinv(jac.T @ jac)
    noise = baseline.noise or white_noise(baseline.noise_sigma)
    # the fitted points sit on the uniform grid between lo and hi: their noise correlation
    index = np.flatnonzero(upper)
    correlation = noise.correlation_matrix(int(index[-1]) + 1)[np.ix_(index, index)]
    covariance = inverse @ (jac.T @ correlation @ jac) @ inverse
    sigma = float(np.sqrt(max(covariance[2, 2], 0.0)) * scatter)
    return c, max(sigma, 0.01 * spectrum.spacing_cm1)
