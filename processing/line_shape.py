"""The instrument line shape (ILS) of a spectrum, and the ringing its lines make.

Gas lines here are far narrower than the resolution, so each line's transmittance dip is its
equivalent width W times the ILS: depth(nu) = W ILS(nu - nu0), ILS(d) = 2 L f(d L),
f(s) = integral_0^1 w(u) cos(2 pi s u) du for a window w over path differences 0..L.
Beyond the main lobe the ILS rings: boxcar sidelobes reach -21.7% and +12.8% of the peak and
fall as 1/d; apodized windows ring far less (Happ-Genzel ~0.7%, falling fast). A strong line's
lobes appear as weak positive "lines" and as negative dips beside it. Predicting them from the
ILS actually in the file (the stated apodization and resolution, else the window that best
explains the strongest lines) tells them from real weak lines: a peak is a line when what is
left after the predicted ringing is subtracted still stands above the noise.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from processing.apodization import APODIZATIONS, window_name
from processing.index_ranges import expand_ranges
from processing.line_shape_tables import full_table, near_table, table_reaching
from processing.order_stats import percentile

STATED_MISFIT_FACTOR = 4.0  # a stated line shape yields only to one that fits this much better
STATED_WIDTH_TOLERANCE = 1.25  # measured lines this much wider (or narrower) than stated: another convention
# The prediction of a lobe's depth is good to about this fraction (line shapes not exactly
# narrow, neighbours, equivalent widths from the main lobe): a peak must exceed its predicted
# ringing by more.
RINGING_MODEL_ERROR = 0.35


@dataclass(frozen=True)
class LineShapeModel:
    """An FTIR instrument line shape: window and maximum optical path difference L (cm)."""

    window: str
    opd_cm: float
    source: str  # how it was found: "stated ...", "inferred ..."

    def shape(self, offset_cm1: np.ndarray) -> np.ndarray:
        """ILS at the given offsets, unit area (1/cm-1)."""
        scaled = np.abs(np.asarray(offset_cm1, dtype=np.float64)) * self.opd_cm
        s, f = table_reaching(self.window, float(scaled.max()) if scaled.size else 0.0)
        return np.interp(scaled, s, f, right=0.0) * self.opd_cm

    def relative(self, offset_cm1: np.ndarray) -> np.ndarray:
        """ILS(d) / ILS(0): a lobe's depth relative to a narrow line's peak."""
        _, f = near_table(self.window)
        return self.shape(offset_cm1) / (f[0] * self.opd_cm)

    @functools.cached_property
    def fwhm_cm1(self) -> float:
        return float(_fwhm_times_opd(self.window) / self.opd_cm)

    @functools.cached_property
    def main_lobe_cm1(self) -> float:
        """Half-width of the main lobe: the first offset where the ILS falls to zero or, for
        windows without zeros, to 1% of its peak."""
        lobe = _main_lobe_times_opd(self.window)
        return float(lobe / self.opd_cm) if lobe is not None else 2.0 * self.fwhm_cm1

    def central_share(self, half_width_cm1: np.ndarray) -> np.ndarray:
        """Share of a narrow line's area the ILS puts within +-half_width of its centre."""
        scaled = np.asarray(half_width_cm1) * self.opd_cm
        s, f = table_reaching(self.window, float(np.max(scaled)) if scaled.size else 0.0)
        cumulative = np.concatenate([[0.0], np.cumsum(0.5 * (f[1:] + f[:-1]) * np.diff(s))])
        return 2.0 * np.interp(scaled, s, cumulative)

    def reach_cm1(self, level: float) -> float:
        """Offset beyond which every lobe stays under `level` x the peak."""
        return float(_reach_times_opd(self.window, level) / self.opd_cm)


# The line shape's widths in units of 1/L, once per window (a model's are these / L).
@functools.lru_cache(maxsize=16)
def _fwhm_times_opd(window: str) -> float:
    s, f = near_table(window)
    below = int(np.flatnonzero(f < 0.5 * f[0])[0])
    s0, s1, f0, f1 = s[below - 1], s[below], f[below - 1], f[below]
    return float(2.0 * (s0 + (0.5 * f[0] - f0) * (s1 - s0) / (f1 - f0)))


@functools.lru_cache(maxsize=16)
def _main_lobe_times_opd(window: str) -> float | None:
    s, f = near_table(window)
    low = np.flatnonzero(f <= 0.01 * f[0])
    if not low.size:
        s, f = full_table(window)
        low = np.flatnonzero(f <= 0.01 * f[0])
    return float(s[low[0]]) if low.size else None


@functools.lru_cache(maxsize=64)
def _reach_times_opd(window: str, level: float) -> float:
    s, f = full_table(window)
    above = np.flatnonzero(np.abs(f) > level * f[0])
    return float(s[above[-1]]) if above.size else 0.0


def stated_line_shape(apodization: str | None, resolution_cm1: float | None) -> LineShapeModel | None:
    """The line shape a file states (apodization and resolution R = 1/L), or None."""
    window = window_name(apodization)
    if window is None or not resolution_cm1 or resolution_cm1 <= 0:
        return None
    return LineShapeModel(window, 1.0 / resolution_cm1, f"stated: {window}, resolution {resolution_cm1:g} cm-1")


def transmittance_depth(absorbance: np.ndarray | float) -> np.ndarray:
    """1 - T of a (baseline-corrected, decadic) absorbance, clipped to a finite range."""
    return 1.0 - np.power(10.0, -np.clip(absorbance, -3.0, 12.0))


def infer_line_shape(
    x: np.ndarray, absorbance: np.ndarray, centres: np.ndarray, widths: np.ndarray, strengths: np.ndarray, noise_t: float,
    stated: LineShapeModel | None = None,
) -> LineShapeModel | None:
    """The line shape that best explains the transmittance-depth profiles around the strongest
    lines (none stronger within reach), out to 12 FWHM: each window with L set by the
    measured width of the narrower lines (the stated resolution's convention varies between
    vendors), every line in the window drawn with it at its measured centre. The stated shape,
    when there is one, wins unless another explains the profiles far better (residual under
    1 / STATED_MISFIT_FACTOR)."""
    if centres.size < 3:
        return stated
    typical = percentile(widths[np.isfinite(widths)], 25) if np.isfinite(widths).any() else 0.0
    if not typical > 0:
        return stated
    reach = 12.0 * typical
    order = np.argsort(strengths)[::-1]
    chosen: list[int] = []
    for i in order[:40].tolist():
        # not within reach of a stronger line (its lobes would dominate the window)
        others = np.abs(centres - centres[i])
        stronger = (others > 0) & (others < reach) & (strengths > strengths[i])
        if not stronger.any() and strengths[i] > 50 * noise_t:
            chosen.append(i)
        if len(chosen) == 6:
            break
    if len(chosen) < 2:
        return stated
    windows = []
    for i in chosen:
        lo, hi = np.searchsorted(x, centres[i] - reach), np.searchsorted(x, centres[i] + reach)
        near = np.flatnonzero(np.abs(centres - centres[i]) < reach + 2.0 * typical)
        windows.append((x[lo:hi], transmittance_depth(absorbance[lo:hi]), centres[near], centres[i]))

    def misfit(model: LineShapeModel) -> float:
        """Residual of the windows' depth profiles against every line in them drawn with this
        shape (equivalent widths by linear least squares), outside the main lobe of the
        window's strong line, relative to its peak."""
        total = 0.0
        for xs, observed, near, centre in windows:
            basis = model.shape(xs[:, None] - near[None, :])
            widths_fit, *_ = np.linalg.lstsq(basis, observed, rcond=None)
            outside = np.abs(xs - centre) > model.main_lobe_cm1
            total += float(np.sum((observed - basis @ widths_fit)[outside] ** 2)) / max(float(observed.max()) ** 2, 1e-300)
        return total

    candidates = []
    for window in APODIZATIONS:
        width_per_opd = LineShapeModel(window, 1.0, "").fwhm_cm1
        candidates.append(LineShapeModel(window, width_per_opd / typical, f"inferred: {window} from the strongest lines' profiles"))
    scored = sorted((misfit(model), model.window, model) for model in candidates)
    best_score, _, best = scored[0]
    if stated is None:
        return best
    # the file's own statement stands unless it plainly cannot be right (lines with some
    # width of their own fit a wider window a little better whatever was used)
    if misfit(stated) <= STATED_MISFIT_FACTOR * best_score:
        return stated
    same_window_score = next(score for score, window, _ in scored if window == stated.window)
    if same_window_score > STATED_MISFIT_FACTOR * best_score:
        return best  # another window altogether: the apodization is not what the file says
    if abs(math.log(typical / stated.fwhm_cm1)) > math.log(STATED_WIDTH_TOLERANCE):
        # lines plainly wider (their own width: pressure, Doppler) or narrower (a resolution
        # stated in another convention) than stated: the shape that best describes them
        return best
    # the stated window at about the stated width, merely fitting worse than a wider one: the
    # profiles hold unresolved partners (an isotopologue doublet under one peak), which widen
    # them; the instrument is as stated
    return stated


def equivalent_width_estimates(x: np.ndarray, absorbance: np.ndarray, centres: np.ndarray, model: LineShapeModel, widths: np.ndarray) -> np.ndarray:
    """Each line's equivalent width (T-depth x cm-1) from its main lobe: the depth (of the
    baseline-corrected `absorbance`) integrated by trapezoids over +-1 FWHM (or the line's own
    width, if wider), divided by the share of a line's area the ILS puts there. Only the points
    inside the lines' windows are read."""
    half = np.maximum(model.fwhm_cm1, np.nan_to_num(widths, nan=model.fwhm_cm1))
    lo = np.clip(np.searchsorted(x, centres - half), 0, x.size - 1)
    hi = np.clip(np.searchsorted(x, centres + half) - 1, 0, x.size - 1)
    owner, left = expand_ranges(lo, hi)
    depth_left, depth_right = transmittance_depth(absorbance[left]), transmittance_depth(absorbance[left + 1])
    area = np.bincount(owner, weights=0.5 * (depth_left + depth_right) * (x[left + 1] - x[left]), minlength=centres.size)
    return area / np.maximum(model.central_share(half), 0.05)


# Lobes of a saturated line are predicted less well still: its black core is resolved or
# nearly so, and a resolved box rings differently from a narrow line.
RINGING_MODEL_ERROR_SATURATED = 1.0


def predicted_ringing(
    centres: np.ndarray, widths: np.ndarray, model: LineShapeModel, targets: np.ndarray,
    saturated: np.ndarray | None = None, level: float = 1e-3,
) -> tuple[np.ndarray, np.ndarray]:
    """(depth, its uncertainty) that every line's lobes put at each target, in transmittance
    (their main lobes left out: a line does not ring onto itself), summed over lines within
    reach (the offset where the lobes fall under `level` of the peak). The uncertainty is
    RINGING_MODEL_ERROR of each contribution (RINGING_MODEL_ERROR_SATURATED for saturated
    lines)."""
    reach = model.reach_cm1(level)
    main = model.main_lobe_cm1
    depth = np.zeros(targets.size)
    error = np.zeros(targets.size)
    if centres.size == 0 or reach <= main:
        return depth, error
    order = np.argsort(centres)
    c, w = centres[order], widths[order]
    relative_error = np.full(c.size, RINGING_MODEL_ERROR)
    if saturated is not None:
        relative_error[np.asarray(saturated, dtype=bool)[order]] = RINGING_MODEL_ERROR_SATURATED
    lo = np.searchsorted(c, targets - reach)
    hi = np.searchsorted(c, targets + reach)
    # every (target, line within reach) pair at once
    pair_target, pair_line = expand_ranges(lo, hi)
    offsets = targets[pair_target] - c[pair_line]
    lobes = np.abs(offsets) > main
    contribution = np.where(lobes, w[pair_line] * model.shape(offsets), 0.0)
    depth = np.bincount(pair_target, weights=contribution, minlength=targets.size)
    error = np.bincount(pair_target, weights=relative_error[pair_line] * np.abs(contribution), minlength=targets.size)
    return depth, error


def explained_by_ringing(observed_depth: np.ndarray, ringing: tuple[np.ndarray, np.ndarray], noise_t: np.ndarray, threshold_sigma: float) -> np.ndarray:
    """True where a feature of `observed_depth` is no more than the predicted ringing allows:
    of the predicted sign and no deeper than the prediction plus its uncertainty, or (many
    lobes summed can cancel to either sign) within that uncertainty of the prediction; both
    with `threshold_sigma` of the noise to spare."""
    depth, error = ringing
    allowed = threshold_sigma * noise_t + error
    same_sign = (np.sign(observed_depth) == np.sign(depth)) & (np.abs(observed_depth) <= np.abs(depth) + allowed)
    return (same_sign | (np.abs(observed_depth - depth) <= allowed)) & (error > 0)


def lobe_positions(model: LineShapeModel, count: int = 3) -> np.ndarray:
    """Offsets of the first `count` extrema beyond the main lobe (for tests and documents)."""
    s, f = full_table(model.window)
    interior = (np.diff(np.sign(np.diff(f))) != 0).nonzero()[0] + 1
    interior = interior[s[interior] * 1.0 > model.main_lobe_cm1 * model.opd_cm]
    return s[interior[:count]] / model.opd_cm
