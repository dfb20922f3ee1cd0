"""Automatic assignment of measured lines to isotopologue, band, branch and J.

Two routes, both without operator input:

1. **Library route.** For each molecule (all library molecules, or the expected ones and
   their H/D partners) and each band (1-0, 2-0, 3-0, 2-1) the library predicts P and R lines
   with relative intensities. One common wavenumber shift (a calibration offset, within
   +-`max_shift_cm1`) is searched for all isotopologues of the molecule together, so that a
   37Cl line cannot pose as a shifted 35Cl line. A band counts as present when enough of its
   strong lines match, well beyond chance. Then, per band: fit, predict every line from the
   fitted constants with its propagated uncertainty, match again, extend to high J, and
   repeat until the assignment no longer changes. One measured line goes to one prediction:
   the closest in units of its tolerance; two predictions inside one line make a blend.

2. **Pattern route** (no prior constants). Strong lines left over are searched for chains of
   near-evenly spaced lines; a P/R band is recognised by the gap of about twice the spacing
   at its centre, where the numbering starts (m = -1 below the gap, m = +1 above). Every
   candidate centre is tried and the numbering whose smooth polynomial nu(m) fits best wins.
   The band is then named after the library isotopologue whose constants it matches, or left
   "unidentified".

Each assignment carries a confidence in [0, 1]; lines left over get a likely cause.
"""
from __future__ import annotations

import bisect
import functools
import itertools
import math
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Callable, Iterator, NamedTuple

import numpy as np

from processing.fit import BandFit, BandModel, fit_band, fit_band_model
from processing.index_ranges import expand_ranges
from processing.levels import P_BRANCH, R_BRANCH, band_lines, band_m, branch_from_m, centrifugal_constant, m_from_branch, sextic_constant
from processing.lines import LineTable, fit_sigma_factor
from processing.order_stats import median, median_of_sorted, percentile_of_sorted, sorted_distinct
from processing.physical_constants import C2_CM_K

if TYPE_CHECKING:
    from processing.intensities import BandIntensities
    from processing.levels import DunhamCoefficients
    from processing.species import InterferentRegion, Isotopologue, Library

CANDIDATE_BANDS: tuple[tuple[int, int], ...] = ((1, 0), (2, 0), (3, 0), (2, 1))
MIN_BAND_LINES = 5
# How well the library places a band's lines relative to one another once a common shift is
# applied (main isotopologues ~0.01 cm-1 to J'' ~15, mass-scaled ones a few hundredths; calc
# from the library's stated uncertainties): the floor of the first matching tolerance.
LIBRARY_LINE_ACCURACY_CM1 = 0.03
COARSE_SHIFT_TOLERANCE = 0.15  # the calibration shift is first searched with this tolerance
# A blended partner weaker than this (relative intensity) cannot be measured beside its host:
# the host's position is corrected by the predicted blend pull instead of a doublet fit.
DOUBLET_MIN_RATIO = 0.1


@dataclass(frozen=True)
class AssignSettings:
    """What the assignment may assume; every field has a working default."""

    species: tuple[str, ...] = ()  # molecules/isotopologues expected; () = try the whole library
    max_shift_cm1: float = 5.0  # largest calibration offset searched
    temperature_K: float = 296.0  # for predicted relative intensities
    bands: tuple[tuple[int, int], ...] = CANDIDATE_BANDS
    # operator corrections: (isotopologue, v_upper, v_lower, branch, offset added to J'')
    j_offsets: tuple[tuple[str, int, int, str, int], ...] = ()
    excluded_positions_cm1: tuple[float, ...] = ()  # lines to leave out (nearest line each)
    pattern_route: bool = True


@dataclass(frozen=True)
class LineAssignment:
    isotopologue: str
    v_upper: int
    v_lower: int
    branch: str
    J_lower: int
    calc: float
    residual: float
    confidence: float
    method: str  # "library" or "pattern"
    blended: bool
    used_in_fit: bool
    blend_pull: float = 0.0  # shift of an unresolved blend's centre from this line (in calc)


@dataclass(frozen=True)
class AssignmentResult:
    per_line: tuple[LineAssignment | None, ...]  # aligned with the LineTable
    likely_cause: tuple[str | None, ...]  # for unassigned lines
    bands: tuple[BandFit, ...]
    species_found: tuple[str, ...]
    band_shifts_cm1: dict[str, float] = field(default_factory=dict)  # library route offsets
    notes: tuple[str, ...] = ()

    @property
    def assigned_count(self) -> int:
        return sum(a is not None for a in self.per_line)


# ----------------------------------------------------------------------------- predictions
@dataclass
class _Band:
    """A band being assigned: its predictions, then its fit."""

    isotopologue: str
    v_upper: int
    v_lower: int
    method: str
    m: np.ndarray  # candidate lines (running index)
    position: np.ndarray  # current predictions
    sigma: np.ndarray  # prediction uncertainty
    weight: np.ndarray  # predicted relative intensity (molecule-band scale, 1 = strongest)
    fit: BandModel | None = None  # the latest fit while refining
    # unresolved isotopologue partners: m -> shift of the blend centre from this line
    pull: dict[int, float] = field(default_factory=dict)
    # the same lines' partner: m -> (separation from this line, intensity ratio partner/this)
    partner: dict[int, tuple[float, float]] = field(default_factory=dict)
    library_centrifugal: tuple[float, float, float, float] | None = None  # the library's (D', D'', H', H'')
    # where the predicted relative intensity of every line the library knows (to J'' where it
    # falls under 1e-7 of the strongest) comes from: (library, temperature, scale of `weight`)
    weights_source: tuple[Library, float, float] | None = None
    dropped: set[int] = field(default_factory=set)  # lines merged into a stronger partner's blend

    @functools.cached_property
    def all_weights(self) -> dict[int, float]:
        """Predicted relative intensity of every line (same scale as `weight`), computed when
        first needed: only bands found in the spectrum ever need it."""
        if self.weights_source is None:
            return {}
        library, temperature_K, scale = self.weights_source
        return _all_weights(library, self.isotopologue, self.v_upper, self.v_lower, temperature_K, scale)

    def pull_of(self, m: np.ndarray) -> np.ndarray:
        m = np.atleast_1d(m)
        if not self.pull:
            return np.zeros(m.shape)
        return np.array([self.pull.get(k, 0.0) for k in m.tolist()])

    @property
    def matched_position(self) -> np.ndarray:
        """Where the measured line should sit: the prediction plus any blend pull (read only)."""
        return self.position + self.pull_of(self.m) if self.pull else self.position

    @property
    def key(self) -> tuple[str, int, int]:
        return (self.isotopologue, self.v_upper, self.v_lower)

    @property
    def label(self) -> str:
        return f"{self.isotopologue} {self.v_upper}-{self.v_lower}"


@functools.lru_cache(maxsize=512)
def _predicted_band(library: Library, label: str, v_upper: int, v_lower: int, temperature_K: float, min_relative: float = 1e-3) -> BandIntensities | None:
    """Library lines with relative intensities down to `min_relative` of the band's strongest
    (cached: they do not depend on the spectrum)."""
    from processing.intensities import lines_for

    try:
        return lines_for(library.isotopologue(label), v_upper, v_lower, temperature_K, min_relative)
    except ValueError:
        return None


@functools.lru_cache(maxsize=512)
def _all_weights(library: Library, label: str, v_upper: int, v_lower: int, temperature_K: float, scale: float) -> dict[int, float]:
    """m -> predicted relative intensity (divided by `scale`) of every line down to 1e-7 of the
    band's strongest (cached; callers only read it)."""
    every = _predicted_band(library, label, v_upper, v_lower, temperature_K, 1e-7)
    if every is None:
        return {}
    return {int(m): float(w) / scale for m, w in zip(every.lines.m.tolist(), every.strength_cm_per_molecule.tolist())}


def library_centrifugal(dunham: DunhamCoefficients, v_upper: int, v_lower: int) -> tuple[float, float, float, float]:
    """The library's (D', D'', H', H'') of a band."""
    return (centrifugal_constant(dunham, v_upper), centrifugal_constant(dunham, v_lower),
            sextic_constant(dunham, v_upper), sextic_constant(dunham, v_lower))


@functools.lru_cache(maxsize=1024)
def _band_extent(library: Library, label: str, v_upper: int, v_lower: int) -> tuple[float, float]:
    """Lowest and highest line of the band up to J'' = 40 (cached)."""
    lines = band_lines(library.isotopologue(label).dunham, v_upper, v_lower, 40)
    position = lines.wavenumber_cm1[np.isfinite(lines.wavenumber_cm1)]
    return (float(position.min()), float(position.max())) if position.size else (np.inf, -np.inf)


def _band_may_overlap(library: Library, iso: Isotopologue, v_upper: int, v_lower: int, first: float, last: float) -> bool:
    """Cheap test before predicting intensities: the band's lines up to J'' = 40 reach the range."""
    low, high = _band_extent(library, iso.label, v_upper, v_lower)
    return high > first - 10.0 and low < last + 10.0


@dataclass(frozen=True)
class _Predicted:
    """One isotopologue's library lines of a band near a spectrum's range (read-only arrays;
    weights on the molecule-band scale, 1 = strongest)."""

    isotopologue: str
    m: np.ndarray
    position: np.ndarray
    weight: np.ndarray
    centrifugal: tuple[float, float, float, float]


@dataclass(frozen=True)
class _PredictionSet:
    """A molecule's band predicted for one spectrum range and temperature, with what the shift
    search needs: the positions and weights of every line at 2% of the strongest or more."""

    bands: tuple[_Predicted, ...]
    scale: float  # the strongest line's intensity (what the weights are divided by)
    search_position: np.ndarray
    search_weight: np.ndarray
    search_total: float


def _read_only(array: np.ndarray) -> np.ndarray:
    array.flags.writeable = False
    return array


@functools.lru_cache(maxsize=256)
def _prediction_set(library: Library, molecule: str, v_upper: int, v_lower: int, temperature_K: float, first: float, last: float) -> _PredictionSet | None:
    """The library's lines of a molecule's band within 10 cm-1 of first..last (cached: they do
    not depend on the spectrum's values, only on its range)."""
    found: list[tuple[str, np.ndarray, np.ndarray, np.ndarray, tuple[float, float, float, float]]] = []
    for iso in library.molecule(molecule):
        if not _band_may_overlap(library, iso, v_upper, v_lower, first, last):
            continue
        predicted = _predicted_band(library, iso.label, v_upper, v_lower, temperature_K)
        if predicted is None:
            continue
        lines = predicted.lines
        inside = (lines.wavenumber_cm1 > first - 10.0) & (lines.wavenumber_cm1 < last + 10.0)
        if not inside.any():
            continue
        found.append((iso.label, lines.m[inside], lines.wavenumber_cm1[inside], predicted.strength_cm_per_molecule[inside],
                      library_centrifugal(iso.dunham, v_upper, v_lower)))
    if not found:
        return None
    strongest = max(float(weight.max()) for _, _, _, weight, _ in found)
    bands = tuple(
        _Predicted(label, _read_only(m), _read_only(position), _read_only(weight / strongest), centrifugal)
        for label, m, position, weight, centrifugal in found
    )
    positions = np.concatenate([b.position for b in bands])
    weights = np.concatenate([b.weight for b in bands])
    keep = weights >= 0.02
    search_weight = weights[keep]
    return _PredictionSet(bands, strongest, _read_only(positions[keep]), _read_only(search_weight), float(search_weight.sum()))


@dataclass(frozen=True)
class _SearchPlan:
    """Every molecule band with library lines near a spectrum's range, in the order searched,
    with the strong lines (weight >= 0.05) of each band that has at least MIN_BAND_LINES of
    them, grouped by band, for `_may_be_present` (read-only arrays)."""

    sets: tuple[tuple[str, int, int, _PredictionSet], ...]  # (molecule, v', v'', predictions)
    strong_position: np.ndarray
    strong_group: np.ndarray  # the group (band) of each strong line, ascending
    group_set: np.ndarray  # the index in `sets` of each group


@functools.lru_cache(maxsize=64)
def _search_plan(
    library: Library, molecules: tuple[str, ...], bands: tuple[tuple[int, int], ...], temperature_K: float, first: float, last: float
) -> _SearchPlan:
    """The search plan of a spectrum range (cached: one look-up per spectrum)."""
    sets = []
    positions: list[np.ndarray] = []
    group_set: list[int] = []
    for molecule in molecules:
        for v_upper, v_lower in bands:
            predictions = _prediction_set(library, molecule, v_upper, v_lower, temperature_K, first, last)
            if predictions is None:
                continue
            for band in predictions.bands:
                strong = band.position[band.weight >= 0.05]
                if strong.size >= MIN_BAND_LINES:
                    positions.append(strong)
                    group_set.append(len(sets))
            sets.append((molecule, v_upper, v_lower, predictions))
    group = np.repeat(np.arange(len(positions)), [p.size for p in positions]) if positions else np.zeros(0, dtype=np.intp)
    return _SearchPlan(
        tuple(sets),
        _read_only(np.concatenate(positions) if positions else np.zeros(0)),
        _read_only(group),
        _read_only(np.array(group_set, dtype=np.intp)),
    )


def _library_predictions(predictions: _PredictionSet, library: Library, v_upper: int, v_lower: int, temperature_K: float) -> list[_Band]:
    """Fresh bands (they are refined in place) from a cached prediction set."""
    return [
        _Band(
            isotopologue=b.isotopologue,
            v_upper=v_upper,
            v_lower=v_lower,
            method="library",
            m=b.m,
            position=b.position,
            sigma=np.zeros(b.m.size),
            weight=b.weight,
            library_centrifugal=b.centrifugal,
            weights_source=(library, temperature_K, predictions.scale),
        )
        for b in predictions.bands
    ]


def _match_count(peaks: np.ndarray, targets: np.ndarray, tol: float) -> np.ndarray:
    """Bool per target: a peak lies within tol of it (`peaks` ascending)."""
    # between -inf and +inf every target has a peak at or above it and one below it: the
    # distances to both need no clipping and no absolute value
    above = np.concatenate((peaks, [np.inf]))  # the first peak at or above each target
    below = np.concatenate(([-np.inf], peaks))  # the last peak below it
    idx = peaks.searchsorted(targets)
    nearest = above[idx] - targets
    np.minimum(nearest, targets - below[idx], out=nearest)
    return nearest <= tol


@functools.lru_cache(maxsize=64)
def _shift_grid(max_shift: float, step: float) -> np.ndarray:
    """-max_shift..+max_shift in `step`s (cached, read-only)."""
    return _read_only(np.arange(-max_shift, max_shift + step / 2, step))


def _best_shift(peaks: np.ndarray, predictions: _PredictionSet, tol: float, max_shift: float, first: float, last: float) -> tuple[float, float]:
    """Common shift maximising matched minus missed predicted intensity; (shift, score).

    A predicted line that lands inside the measured range on no peak counts against its
    shift: this is what tells the true numbering from one shifted by a whole line spacing
    (the alias puts a line into the empty band-centre gap)."""
    positions, weights = predictions.search_position, predictions.search_weight
    if positions.size == 0:
        return 0.0, 0.0
    def scores_at(shifts: np.ndarray, tolerance: float) -> np.ndarray:
        targets = positions[None, :] + shifts[:, None]
        matched = _match_count(peaks, targets.ravel(), tolerance).reshape(targets.shape)
        missed = targets >= first
        missed &= targets <= last
        missed = missed > matched  # inside the range and on no peak
        return matched @ weights - missed @ weights

    if tol < COARSE_SHIFT_TOLERANCE:
        # a coarse search first (a fine step over +-5 cm-1 is slow), then a fine one around
        # its three best shifts
        coarse = _shift_grid(max_shift, COARSE_SHIFT_TOLERANCE / 2)
        rough = scores_at(coarse, COARSE_SHIFT_TOLERANCE)
        centres = coarse[np.lexsort((np.abs(coarse), -rough))[:3]]
        around = _shift_grid(COARSE_SHIFT_TOLERANCE, tol / 2)
        shifts = sorted_distinct(np.concatenate([c + around for c in centres]))
    else:
        shifts = _shift_grid(max_shift, tol / 2)
    scores = scores_at(shifts, tol)
    # prefer the smallest shift among equal scores
    best = int(np.lexsort((np.abs(shifts), -scores))[0])
    return float(shifts[best]), float(scores[best] / predictions.search_total)


def _may_be_present(peaks: np.ndarray, plan: _SearchPlan, tol: float, max_shift: float) -> np.ndarray:
    """Per prediction set of the plan: False when no band of it can pass `_band_is_present` at
    any shift the search may choose. That needs MIN_BAND_LINES of a band's strong lines on
    peaks within `tol` of one common shift, so MIN_BAND_LINES (line, peak) pairs whose
    separations lie within 2 tol of one another. Counting pairs is cheap; most of a library's
    bands fail here, and their shift search (the costly part) is skipped with the same outcome."""
    possible = np.zeros(len(plan.sets), dtype=bool)
    strong = plan.strong_position
    if strong.size == 0 or peaks.size == 0:
        return possible
    # every shift searched lies within max_shift + the fine search's reach around a coarse one
    reach = max_shift + COARSE_SHIFT_TOLERANCE + 2.0 * tol + 1.0
    window = 2.0 * tol + 1e-6  # with a margin far above rounding at a few thousand cm-1
    low = peaks.searchsorted(strong - reach)
    counts = peaks.searchsorted(strong + reach, side="right") - low
    total = int(counts.sum())
    if total < MIN_BAND_LINES:
        return possible
    line, peak = expand_ranges(low, low + counts)
    # separations by band, the bands kept apart by far more than a window (groups ascend with
    # the lines, and each group's separations lie within +-reach)
    group = plan.strong_group[line]
    key = (peaks[peak] - strong[line]) + group * (4.0 * reach + 4.0 * window + 10.0)
    order = np.argsort(key, kind="stable")
    key = key[order]
    together = key.searchsorted(key + window, side="right") - np.arange(total)
    possible[plan.group_set[sorted_distinct(group[order][together >= MIN_BAND_LINES])]] = True
    return possible


def _band_is_present(peaks: np.ndarray, band: _Band, shift: float, tol: float, first: float, last: float) -> bool:
    """Enough strong predicted lines inside the measured range matched, well beyond chance.
    The chance of a match counts the peaks that can be matched (not ringing) in the band's own
    region, other than those it matched: lines or lobes elsewhere in the spectrum do not change
    whether this band is here."""
    shifted = band.position + shift
    strong = (band.weight >= 0.05) & (shifted >= first) & (shifted <= last)
    n_expected = int(np.count_nonzero(strong))
    if n_expected < MIN_BAND_LINES:
        return False
    matched = _match_count(peaks, band.position[strong] + shift, tol)
    n_matched = int(np.count_nonzero(matched))
    # the band's own lines are no chance matches: the rate counts the other peaks there
    low, high = float(shifted[strong].min()) - 1.0, float(shifted[strong].max()) + 1.0
    below_low, below_high = peaks.searchsorted([low, high]).tolist()
    others = float(below_high - below_low) - n_matched
    chance = n_expected * min(1.0, 2.0 * tol * max(others, 0.0) / (high - low))
    return n_matched >= MIN_BAND_LINES and n_matched >= 0.5 * n_expected and n_matched >= 3.0 * chance + 3


# ------------------------------------------------------------------------------- matching
class _Claim(NamedTuple):
    band: int
    line: int
    m: int
    distance: float  # |obs - pred| / tol
    weight: float  # the band line's predicted relative intensity when claimed


def _claims(
    peaks: np.ndarray, usable: np.ndarray, bands: list[_Band], tolerances: list[np.ndarray], refused: set[tuple[int, int]] = frozenset()
) -> list[_Claim]:
    """Every (band line, measured line) pair within tolerance, except the `refused` (band,
    line) pairs; by band, then band line, then measured line (the lower one first)."""
    if peaks.size == 0 or not bands:
        return []
    targets = np.concatenate([band.matched_position for band in bands])
    tolerance = np.concatenate(tolerances)
    band_of = np.repeat(np.arange(len(bands)), [band.m.size for band in bands])
    idx = np.clip(np.searchsorted(peaks, targets), 1, max(peaks.size - 1, 1))
    # the measured lines either side of each prediction: (band line, side)
    candidates = idx[:, None] + np.array([-1, 0])
    inside = None
    if peaks.size == 1:  # the only measured line is on the left of every prediction
        inside = candidates < peaks.size
        candidates[~inside] = 0
    distance = np.abs(peaks[candidates] - targets[:, None]) / tolerance[:, None]
    keep = usable[candidates] & (distance <= 1.0)
    if inside is not None:
        keep &= inside
    for refused_band, refused_line in refused:
        keep &= (candidates != refused_line) | (band_of != refused_band)[:, None]
    k, side = np.nonzero(keep)
    m = np.concatenate([band.m for band in bands])
    weight = np.concatenate([band.weight for band in bands])
    fields = zip(band_of[k].tolist(), candidates[k, side].tolist(), m[k].tolist(), distance[k, side].tolist(), weight[k].tolist())
    return list(map(tuple.__new__, itertools.repeat(_Claim), fields))  # _Claim(*f) without its Python-level __new__


def _claim_order(claim: _Claim) -> tuple[float, float]:
    """Closest in tolerance units first, then the strongest."""
    return (claim.distance, -claim.weight)


def _resolve(claims: list[_Claim], bands: list[_Band]) -> tuple[dict[int, _Claim], set[int]]:
    """One line -> one claim (closest in tolerance units, then strongest); one band line ->
    one measured line. Returns winners by line and the set of blended lines."""
    by_line: dict[int, list[_Claim]] = {}
    for claim in claims:
        by_line.setdefault(claim.line, []).append(claim)
    winners: dict[int, _Claim] = {}
    blended: set[int] = set()
    for line, options in by_line.items():
        if len(options) > 1:
            options.sort(key=_claim_order)
            best = options[0]
            isotopologue = bands[best.band].isotopologue
            if any(c.weight > 0.05 * best.weight for c in options[1:] if bands[c.band].isotopologue != isotopologue):
                blended.add(line)
        winners[line] = options[0]
    # a band line claimed by two measured lines keeps the closer one
    by_band_line: dict[tuple[int, int], _Claim] = {}
    for claim in winners.values():
        key = (claim.band, claim.m)
        if key not in by_band_line or claim.distance < by_band_line[key].distance:
            by_band_line[key] = claim
    kept = {c.line: c for c in by_band_line.values()}
    return kept, blended & set(kept)


def _fit_band_lines(
    band: _Band, claims: list[_Claim], lines: LineTable, blended: set[int]
) -> BandModel | None:
    if len(claims) < 4:
        return None
    m = np.array([c.m for c in claims], dtype=np.int64)
    branch, J_lower = _branches(m.tobytes())
    idx = np.array([c.line for c in claims])
    inflate = fit_sigma_factor(lines.saturated[idx], np.array([c.line in blended for c in claims], dtype=bool))
    # blended lines carry little weight when enough clean lines exist
    sigma = lines.position_sigma_cm1[idx] * inflate
    try:
        return fit_band_model(band.isotopologue, band.v_upper, band.v_lower, branch, J_lower, lines.position_cm1[idx] - band.pull_of(m), sigma, lines.sigma_known, sextic=False, library_centrifugal=band.library_centrifugal)
    except (ValueError, np.linalg.LinAlgError):
        return None


@functools.lru_cache(maxsize=256)
def _branches(m: bytes) -> tuple[np.ndarray, np.ndarray]:
    """`branch_from_m` of an int64 array given as bytes (cached, read-only: a band is refitted
    on the same lines, and successive spectra of one sample assign the same ones)."""
    branch, J_lower = branch_from_m(np.frombuffer(m, dtype=np.int64))
    return _read_only(branch), _read_only(J_lower)


def _merge_unresolved_partners(bands: list[_Band], width: float, peaks: np.ndarray, shift: float, notes: list[str]) -> None:
    """Lines of different bands of one molecule (isotopologue partners of the same J, or any
    two lines that happen to fall together, e.g. 13C16O P(7) on 12C18O P(6)) that the spectrum
    shows as one peak are treated as one blend: the weaker line is dropped and the stronger
    one's expected position becomes the intensity-weighted blend centre (relative positions
    come from the library, exact to ~0.01 cm-1). A pair closer than one line width is always
    one blend (the final fit measures it as a doublet); isotopologue partners of the same J
    between one and two widths apart are one blend where the spectrum shows a single peak
    across them, and two lines where it shows two."""
    if len(bands) < 2 or not width:
        return
    band_of = np.concatenate([np.full(b.m.size, i) for i, b in enumerate(bands)])
    index_of = np.concatenate([np.arange(b.m.size) for b in bands])
    position = np.concatenate([b.position for b in bands])
    weight = np.concatenate([b.weight for b in bands])
    order = np.argsort(position)
    band_of, index_of, position, weight = band_of[order], index_of[order], position[order], weight[order]
    dropped: dict[int, set[int]] = {}
    merged_count: dict[tuple[int, int], int] = {}
    for a in range(position.size - 1):
        for b in range(a + 1, position.size):
            separation_ab = position[b] - position[a]
            if separation_ab >= 2.0 * width:
                break
            if band_of[a] == band_of[b]:
                continue
            major, minor = (a, b) if weight[a] >= weight[b] else (b, a)
            if index_of[minor] in dropped.get(int(band_of[minor]), set()) or index_of[major] in dropped.get(int(band_of[major]), set()):
                continue
            same_J = bands[int(band_of[a])].m[index_of[a]] == bands[int(band_of[b])].m[index_of[b]]
            if separation_ab >= 0.5 * width and not same_J:
                continue  # lines of unrelated J falling near each other: only when truly on top
            if separation_ab >= 1.0 * width:
                low = position[a] + shift - 0.5 * separation_ab
                high = position[b] + shift + 0.5 * separation_ab
                found = int(np.searchsorted(peaks, high) - np.searchsorted(peaks, low))
                if found >= 2 or found == 0:
                    continue  # two peaks there: resolved (or partly), each measured on its own
            host = bands[int(band_of[major])]
            m = int(host.m[index_of[major]])
            separation = float(position[minor] - position[major])
            w_major, w_minor = float(weight[major]), float(weight[minor])
            host.pull[m] = host.pull.get(m, 0.0) + w_minor / (w_major + w_minor) * separation
            host.partner[m] = (separation, w_minor / max(w_major, 1e-300))
            dropped.setdefault(int(band_of[minor]), set()).add(int(index_of[minor]))
            key = (int(band_of[major]), int(band_of[minor]))
            merged_count[key] = merged_count.get(key, 0) + 1
    for bi, indices in dropped.items():
        band = bands[bi]
        band.dropped |= {int(band.m[i]) for i in indices}
        keep = ~np.isin(np.arange(band.m.size), list(indices))
        band.m, band.position, band.sigma, band.weight = band.m[keep], band.position[keep], band.sigma[keep], band.weight[keep]
    for (host_index, guest_index), count in merged_count.items():
        notes.append(
            f"{bands[host_index].label}: {count} lines unresolved from {bands[guest_index].isotopologue}; positions "
            "corrected for the predicted blend centre"
        )


def _drop_undetectable(bands: list[_Band], winners: dict[int, _Claim], lines: LineTable, threshold_sigma: float = 5.0) -> set[int]:
    """Bands whose own lines could not have been seen: fewer than MIN_BAND_LINES predicted
    lines reach the detection threshold at the intensity scale the assigned lines of that
    vibrational band show, or under half of those were found. Returns the band indices to
    drop."""
    weight_of: dict[int, dict[int, float]] = {}
    found: dict[int, int] = {}
    snr = lines.snr.tolist()
    scale_of: dict[tuple[int, int], list[float]] = {}
    for claim in winners.values():
        found[claim.band] = found.get(claim.band, 0) + 1
        band = bands[claim.band]
        if claim.band not in weight_of:
            weight_of[claim.band] = dict(zip(band.m.tolist(), band.weight.tolist()))
        w = weight_of[claim.band].get(claim.m, 0.0)
        if w > 0.05 and math.isfinite(snr[claim.line]):
            scale_of.setdefault((band.v_upper, band.v_lower), []).append(snr[claim.line] / w)
    # optically thick lines fall short of their weight, thin ones do not: the upper quartile
    # of SNR per unit weight is the scale a thin (weak) band's lines reach
    snr_per_weight = {key: percentile_of_sorted(sorted(scales), 75) for key, scales in scale_of.items()}
    drop: set[int] = set()
    for bi, band in enumerate(bands):
        scale = snr_per_weight.get((band.v_upper, band.v_lower))
        if scale is None:
            continue
        detectable = int(np.count_nonzero(band.weight * scale >= threshold_sigma))
        if detectable < MIN_BAND_LINES or found.get(bi, 0) < 0.5 * detectable:
            drop.add(bi)
    return drop


def _tolerances(bands: list[_Band], line_sigma: float, tol0: float) -> list[np.ndarray]:
    """Each band line's matching tolerance: `tol0` before the band is fitted, then five times
    the spread of prediction, line position (`line_sigma`, the typical one) and fit."""
    out = []
    for band in bands:
        if band.fit is None:
            out.append(np.full(band.position.size, tol0))
        else:
            spread = np.sqrt(band.sigma**2 + line_sigma**2 + band.fit.rms**2)
            out.append(np.clip(5.0 * spread, 0.2 * tol0, tol0))
    return out


# Lines are predicted out to where the band's intensity falls to this fraction of its strongest
# line (a strong, hot band shows lines at 1e-4 of its peak above 10 noise sigma); the intensity
# check refuses what the spectrum cannot show.
J_CAP_RELATIVE = 1e-5


def _J_cap(band: _Band) -> int:
    """Highest J'' to predict: where the band's predicted intensity stays above J_CAP_RELATIVE
    of its strongest line (+2)."""
    highest = None
    if band.weights_source is not None:
        library, temperature_K, scale = band.weights_source
        highest = _highest_J_seen(library, band.isotopologue, band.v_upper, band.v_lower, temperature_K, scale)
    return highest + 2 if highest is not None else int(np.max(np.abs(band.m))) + 2


@functools.lru_cache(maxsize=512)
def _highest_J_seen(library: Library, label: str, v_upper: int, v_lower: int, temperature_K: float, scale: float) -> int | None:
    """Highest J'' whose predicted intensity is at least J_CAP_RELATIVE of the band's strongest
    (None without predictions; cached with them)."""
    weights = _all_weights(library, label, v_upper, v_lower, temperature_K, scale)
    if not weights:
        return None
    strongest = max(weights.values())
    strong = [m for m, w in weights.items() if w >= J_CAP_RELATIVE * strongest]
    return int(branch_from_m(np.array(strong, dtype=np.int64))[1].max()) if strong else None


def _extend_predictions(band: _Band, J_cap: int) -> None:
    """After a fit, predict every line up to J'' = J_cap from the fitted constants (lines
    merged into a stronger partner's blend stay out)."""
    assert band.fit is not None
    dropped = frozenset(band.dropped)
    m, branch, J_lower = _band_lines_to(J_cap, dropped)
    position, sigma = band.fit.predict(branch, J_lower)
    weight = None
    if band.weights_source is not None:
        library, temperature_K, scale = band.weights_source
        weight = _library_weights_to(library, band.isotopologue, band.v_upper, band.v_lower, temperature_K, scale, J_cap, dropped)
    if weight is None:  # a line the library does not predict keeps its weight (or 1e-8)
        old_weight = dict(zip(band.m.tolist(), band.weight.tolist()))
        all_weights = band.all_weights
        weight = np.array([all_weights.get(k, old_weight.get(k, 1e-8)) for k in m.tolist()])
    band.m = m
    band.position = position
    band.sigma = sigma
    band.weight = weight


@functools.lru_cache(maxsize=256)
def _library_weights_to(
    library: Library, label: str, v_upper: int, v_lower: int, temperature_K: float, scale: float, J_cap: int, dropped: frozenset[int]
) -> np.ndarray | None:
    """The predicted relative intensity of every line of `_band_lines_to(J_cap, dropped)`, or
    None when the library predicts some of them not (cached, read-only)."""
    weights = _all_weights(library, label, v_upper, v_lower, temperature_K, scale)
    m = _band_lines_to(J_cap, dropped)[0].tolist()
    if not all(k in weights for k in m):
        return None
    return _read_only(np.array([weights[k] for k in m]))


@functools.lru_cache(maxsize=256)
def _band_lines_to(J_cap: int, dropped: frozenset[int]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(m, branch, J'') of every line to J'' = J_cap but the `dropped` m (cached, read-only)."""
    m = band_m(J_cap)
    if dropped:
        m = m[~np.isin(m, list(dropped))]
    branch, J_lower = branch_from_m(m)
    return _read_only(m), _read_only(branch), _read_only(J_lower)


# A line more than this many times as tall as its band's own intensity pattern predicts (plus
# three noise sigma) is another absorber's line or noise that happens to sit on a prediction.
INTENSITY_OUTLIER_FACTOR = 5.0
INTENSITY_ALLOWANCE_SIGMA = 3.0


def _expected_snr(bands: list[_Band], winners: dict[int, _Claim], snr: list[float]) -> Iterator[tuple[int, float]]:
    """(line, expected) for each claimed line, band by band: the signal-to-noise its band's
    intensity pattern predicts, the line's predicted relative intensity (its blended
    partner's included) times the band's SNR per unit intensity for thin lines, the upper
    quartile over the weaker half of its measured lines (optically thick lines fall short of
    their intensity; a band's weaker lines are its thinnest). `snr` is the line table's."""
    per_band: dict[int, list[tuple[int, float]]] = {}
    for line, claim in winners.items():
        band = bands[claim.band]
        weight = band.all_weights.get(claim.m, claim.weight)
        partner = band.partner.get(claim.m)
        per_band.setdefault(claim.band, []).append((line, weight * (1.0 + partner[1]) if partner else weight))
    for members in per_band.values():
        measured = [(w, snr[line]) for line, w in members if math.isfinite(snr[line]) and w > 0 and snr[line] >= 10.0]
        if len(measured) < 4:
            continue
        middle = median_of_sorted(sorted(w for w, _ in measured))
        scale = percentile_of_sorted(sorted(s / w for w, s in measured if w <= middle), 75)
        for line, w in members:
            yield line, w * scale


def _intensity_outliers(bands: list[_Band], winners: dict[int, _Claim], lines: LineTable) -> dict[int, float]:
    """Claimed lines far taller than their band's intensity pattern allows: line -> observed
    over expected signal-to-noise."""
    out: dict[int, float] = {}
    snr = lines.snr.tolist()
    for line, expected in _expected_snr(bands, winners, snr):
        observed = snr[line]
        if math.isfinite(observed) and observed > INTENSITY_OUTLIER_FACTOR * expected + INTENSITY_ALLOWANCE_SIGMA:
            out[line] = observed / max(expected, 1e-3)
    return out


def _refine(
    bands: list[_Band], lines: LineTable, usable: np.ndarray, tol0: float, J_caps: dict[tuple[str, int, int], int]
) -> tuple[dict[int, _Claim], set[int], dict[int, float]]:
    """Match, fit, predict and match again until the assignment no longer changes. Returns the
    winning claims by line, the blended lines and the lines refused for their intensity (line ->
    how many times taller than predicted)."""
    peaks = lines.position_cm1
    previous: dict[int, tuple[int, int]] | None = None
    winners: dict[int, _Claim] = {}
    blended: set[int] = set()
    refused: dict[tuple[int, int], float] = {}
    members_before: dict[int, frozenset[tuple[int, int]]] = {}
    line_sigma = median(lines.position_sigma_cm1) if lines.count else 0.0
    for _ in range(8):
        claims = _claims(peaks, usable, bands, _tolerances(bands, line_sigma, tol0), set(refused))
        winners, blended = _resolve(claims, bands)
        if np.all(np.isfinite(lines.snr)):
            for line, ratio in _intensity_outliers(bands, winners, lines).items():
                refused[(winners[line].band, line)] = ratio
                del winners[line]
            blended &= set(winners)
        state = {line: (c.band, c.m) for line, c in winners.items()}
        if state == previous:
            break
        previous = state
        claims_of: dict[int, list[_Claim]] = {}
        for claim in winners.values():
            claims_of.setdefault(claim.band, []).append(claim)
        for bi, band in enumerate(bands):
            mine = claims_of.get(bi, [])
            members = frozenset((c.line, c.m) for c in mine)
            if members_before.get(bi) == members:
                continue  # same lines as last pass: the fit would not change
            members_before[bi] = members
            fit = _fit_band_lines(band, mine, lines, blended)
            if fit is not None and fit.n_lines >= 4:
                band.fit = fit
                _extend_predictions(band, J_caps.get(band.key, 40))
    refused_lines = {line: ratio for (_, line), ratio in refused.items() if line not in winners}
    return winners, blended, refused_lines


# ------------------------------------------------------------------------------ pattern route
MAX_CHAIN_STEPS = 200_000  # all walks of one search together; real spectra need a few thousand


def _walk(positions: list[float], chain: list[int], direction: int, budget: list[int]) -> None:
    """Extend `chain` in `direction` (+1 up, -1 down) while the next line sits where the
    spacing trend puts it; one or two lines may be skipped (a gap, or the band centre).

    `positions` ascend; the line nearest a target is found by binary search. Each step spends
    one unit of `budget` (a one-element list shared by all walks of a search)."""
    end = chain[-1] if direction > 0 else chain[0]
    spacing = abs(positions[chain[-1]] - positions[chain[-2]]) if direction > 0 else abs(positions[chain[1]] - positions[chain[0]])
    trend = 0.0
    misses = 0
    members = set(chain)
    while misses < 2 and budget[0] > 0:
        budget[0] -= 1
        steps = misses + 1
        expected = sum(spacing + trend * k for k in range(1, steps + 1))
        target = positions[end] + direction * expected
        above = bisect.bisect_left(positions, target)
        k = above if above == 0 or (above < len(positions) and positions[above] - target < target - positions[above - 1]) else above - 1
        if abs(positions[k] - target) < 0.08 * spacing * steps and k not in members:
            new_spacing = abs(positions[k] - positions[end]) / steps
            if abs(new_spacing - spacing) > 0.15 * spacing:
                return
            trend = 0.5 * trend + 0.5 * (new_spacing - spacing)
            spacing = new_spacing
            end = k
            misses = 0
            members.add(k)
            if direction > 0:
                chain.append(k)
            else:
                chain.insert(0, k)
        else:
            misses += 1


def _find_chain(positions: np.ndarray, order_by_height: np.ndarray) -> list[int] | None:
    """The longest chain of near-evenly spaced lines (a line may be skipped), as indices.

    Bounded for any number of lines: seeds are the 40 strongest lines, each paired with the
    lines 0.4-50 cm-1 above it (found by binary search); a pair already consecutive in a chain
    walked before is not walked again (it would give the same chain), and all walks share
    MAX_CHAIN_STEPS steps. A spectrum of a million points finishes in well under a second here.
    """
    order = np.argsort(positions, kind="stable")
    ascending = positions[order].tolist()
    rank = np.empty(order.size, dtype=np.intp)
    rank[order] = np.arange(order.size)
    best: list[int] = []
    walked: set[tuple[int, int]] = set()
    budget = [MAX_CHAIN_STEPS]
    seeds = order_by_height[: min(40, order_by_height.size)]
    for seed in seeds:
        i = int(rank[seed])
        first = bisect.bisect_right(ascending, ascending[i] + 0.4)
        last = bisect.bisect_left(ascending, ascending[i] + 50.0)
        for j in range(first, last):
            if (i, j) in walked or budget[0] <= 0:
                continue
            chain = [i, j]
            _walk(ascending, chain, +1, budget)
            _walk(ascending, chain, -1, budget)
            walked.update(zip(chain[:-1], chain[1:]))
            if len(chain) > len(best):
                best = chain
    return [int(order[k]) for k in best] if len(best) >= 8 else None


def _number_chain(positions: np.ndarray, heights: np.ndarray) -> tuple[np.ndarray, float] | None:
    """m for each chained line: every gap of ~2 steps is tried as the band centre.

    Shifting all m by a constant fits nu(m) equally well, so the fit alone cannot place the
    centre when another line is missing. What does: the lines beside the true centre, P(1) and
    R(0), are the weakest of their branches' first lines (Hoenl-London factor 1 against 2, 3,
    ...; common practice). Among numberings whose polynomial rms is within 2x the best, the one
    whose gap-side lines are weakest relative to the next ones wins."""
    steps = np.diff(positions)
    # each step against its neighbours' (a skipped line or the centre gap shows as ~2x)
    reference = np.empty_like(steps)
    for i in range(steps.size):
        around = np.concatenate([steps[max(0, i - 2) : i], steps[i + 1 : i + 3]])
        reference[i] = np.min(around) if around.size else steps[i]
    units = np.maximum(1, np.round(steps / reference).astype(int))
    n = np.concatenate([[0], np.cumsum(units)])
    candidates: list[tuple[float, float, np.ndarray]] = []
    for gap in np.flatnonzero(units == 2):
        m = n - (n[gap] + 1)
        if not ((m < 0).sum() >= 3 and (m > 0).sum() >= 3):
            continue
        design = np.column_stack([np.ones_like(m, dtype=float), m, m**2, m**3])
        coef, *_ = np.linalg.lstsq(design, positions, rcond=None)
        rms = float(np.sqrt(np.mean((design @ coef - positions) ** 2)))
        if coef[1] <= 0 or coef[2] > 0:
            continue
        beside = heights[np.abs(m) == 1]
        further = heights[(np.abs(m) >= 2) & (np.abs(m) <= 4)]
        contrast = float(beside.mean() / further.mean()) if beside.size and further.size else 1.0
        candidates.append((rms, contrast, m))
    if not candidates:
        return None
    best_rms = min(c[0] for c in candidates)
    rms, _, m = min((c for c in candidates if c[0] <= 2.0 * best_rms + 1e-9), key=lambda c: c[1])
    return m, rms


def _identify(fit: BandFit, library: Library) -> tuple[str, int, int] | None:
    """Library isotopologue and band whose origin and B'' this fitted band matches."""
    best: tuple[float, tuple[str, int, int]] | None = None
    from processing.levels import band_origin, rotational_constant

    for iso in library.isotopologues():
        for v_upper, v_lower in CANDIDATE_BANDS:
            origin = band_origin(iso.dunham, v_upper, v_lower)
            B_lower = rotational_constant(iso.dunham, v_lower)
            d_origin = abs(fit.origin.value - origin) / origin
            d_B = abs(fit.B_lower.value - B_lower) / B_lower
            if abs(fit.origin.value - origin) < 10.0 and d_B < 0.01:
                score = d_origin + d_B
                if best is None or score < best[0]:
                    best = (score, (iso.label, v_upper, v_lower))
    return best[1] if best else None


def _looks_like_a_band(fit: BandFit, width_cm1: float) -> bool:
    """A vibration-rotation band, not a comb: its lines follow the band formula to a fraction
    of a line width (chance chains of ringing lobes or noise do not), and its spacing changes
    across the band, B' != B'' (window fringes and other periodic baseline features keep an
    even spacing: B' = B'' within their errors)."""
    if width_cm1 and np.isfinite(width_cm1) and fit.rms > 0.25 * width_cm1:
        return False
    difference = fit.B_upper.value - fit.B_lower.value
    i, j = fit.parameter_names.index("B_upper"), fit.parameter_names.index("B_lower")
    variance = fit.covariance[i, i] + fit.covariance[j, j] - 2.0 * fit.covariance[i, j]
    return variance > 0 and abs(difference) > 5.0 * float(np.sqrt(variance))


def _pattern_bands(lines: LineTable, available: np.ndarray, library: Library) -> list[tuple[_Band, dict[int, int]]]:
    """Bands found by the pattern route: (band, {line index: m})."""
    found: list[tuple[_Band, dict[int, int]]] = []
    strong = available & (lines.snr >= 10.0) & ~lines.ringing
    for _ in range(4):
        index = np.flatnonzero(strong)
        if index.size < 8:
            break
        positions = lines.position_cm1[index]
        order = np.argsort(lines.height[index])[::-1]
        chain = _find_chain(positions, order)
        if chain is None:
            break
        chain_index = index[np.array(chain)]
        numbered = _number_chain(lines.position_cm1[chain_index], lines.height[chain_index])
        strong[chain_index] = False
        if numbered is None:
            continue
        m, rms = numbered
        spacing = median(np.abs(np.diff(lines.position_cm1[chain_index]) / np.maximum(np.abs(np.diff(m)), 1)))
        # a real band follows its smooth nu(m) to ~1e-3 of a spacing; chance chains of
        # unrelated lines (dense water-like regions) scatter by a few percent
        if rms > 0.01 * spacing or (m < 0).sum() < 4 or (m > 0).sum() < 4:
            continue
        branch, J_lower = branch_from_m(m)
        try:
            fit = fit_band("unidentified", 1, 0, branch, J_lower, lines.position_cm1[chain_index], lines.position_sigma_cm1[chain_index], lines.sigma_known)
        except (ValueError, np.linalg.LinAlgError):
            continue
        if not _looks_like_a_band(fit, lines.typical_width_cm1):
            continue
        identity = _identify(fit, library)
        label, v_upper, v_lower = identity if identity else (f"unidentified-{fit.origin.value:.0f}", 1, 0)
        band = _Band(label, v_upper, v_lower, "pattern", m, lines.position_cm1[chain_index], np.zeros(m.size), np.ones(m.size))
        if identity:
            band.library_centrifugal = library_centrifugal(library.isotopologue(label).dunham, v_upper, v_lower)
        found.append((band, dict(zip(chain_index.tolist(), m.tolist()))))
    return found


# ------------------------------------------------------------------------------- main entry
def _likely_cause(
    lines: LineTable, i: int, first_fit_regions: list[tuple[float, float]], refused: dict[int, float],
    interferent_region: Callable[[float], InterferentRegion | None] | None = None,
) -> str:
    if i in refused:
        return f"{refused[i]:.0f}x taller than its band's intensity pattern allows (another absorber or noise on a predicted line)"
    if lines.ringing[i]:
        return "ringing beside a strong line"
    x = lines.position_cm1[i]
    # where atmospheric absorbers left in the beam put their lines (the library's regions)
    region = interferent_region(x) if interferent_region is not None else None
    if region is not None and not any(a <= x <= b for a, b in first_fit_regions):
        return f"interferent ({region.description})"
    if lines.snr[i] < 8.0:
        return "noise"
    return "unknown"


EXCLUDED_CAUSE = "excluded by the operator"  # a line the redo request left out (never "noise")


def _excluded_mask(lines: LineTable, excluded: tuple[float, ...]) -> np.ndarray:
    mask = np.zeros(lines.count, dtype=bool)
    for position in excluded:
        if lines.count:
            mask[int(np.argmin(np.abs(lines.position_cm1 - position)))] = True
    return mask


# (centre guesses, separations, thin-line ratios) of one band's lines with unresolved partners
# -> (centre, standard error) or None for each
DoubletMeasure = Callable[[np.ndarray, np.ndarray, np.ndarray], "list[tuple[float, float] | None]"]


def assign_lines(
    lines: LineTable,
    first_cm1: float,
    last_cm1: float,
    settings: AssignSettings | None = None,
    library: Library | None = None,
    measure_doublet: DoubletMeasure | None = None,
) -> AssignmentResult:
    """Assign `lines` (measured in a spectrum covering first..last cm-1); see module docstring.

    `measure_doublet(centre_guesses, separations, ratios) -> [(centre, sigma) or None]` re-measures a band's lines
    blended with an isotopologue partner from the spectrum itself (see
    `lines.measure_doublet`); without it (a line list) the blend centre is corrected by the
    predicted intensity-weighted shift.

    Predicted intensities, the J range and which hot bands can show follow the rotational
    temperature: the assignment made at `settings.temperature_K` gives one (a Boltzmann plot of
    its strongest band's line heights); when that differs by more than TEMPERATURE_REDO the
    assignment is made again at it (a hot cell shows high-J lines and v'' = 1, 2 bands that a
    296 K prediction leaves out)."""
    from processing.species import load_library

    settings = settings or AssignSettings()
    library = library or load_library()
    result = _assign_at(lines, first_cm1, last_cm1, settings, library, measure_doublet)
    measured = rotational_temperature_estimate(lines, result)
    if measured is not None and abs(measured / settings.temperature_K - 1.0) > TEMPERATURE_REDO:
        redo = replace(settings, temperature_K=float(round(measured / 10.0) * 10.0))
        again = _assign_at(lines, first_cm1, last_cm1, redo, library, measure_doublet)
        # the estimate is rough (thick lines bias it high): the second pass stands only if it
        # explains more of the spectrum
        if _explained(again, lines) > _explained(result, lines):
            result = replace(again, notes=again.notes + (
                f"predictions made at {redo.temperature_K:.0f} K, the rotational temperature the lines show "
                f"(first pass at {settings.temperature_K:.0f} K)",))
    return result


def _explained(result: AssignmentResult, lines: LineTable) -> int:
    """Lines assigned to bands that fit them to a quarter of a line width: how much of a
    spectrum an assignment explains."""
    width = lines.typical_width_cm1 if np.isfinite(lines.typical_width_cm1) and lines.typical_width_cm1 > 0 else np.inf
    return sum(fit.n_lines for fit in result.bands if fit.rms <= 0.25 * width)


# A measured rotational temperature this far (relative) from the one predictions were made at
# makes the assignment run again at it.
TEMPERATURE_REDO = 0.15


def rotational_temperature_estimate(lines: LineTable, result: AssignmentResult) -> float | None:
    """A working estimate of the rotational temperature for predictions: a Boltzmann plot,
    ln(h / (L nu)) against the lower state's energy, of the peak heights of the band whose
    lines are weakest among those with at least 8 clean lines and a fit good to a tenth of the
    line width (thick lines flatten the plot: the thinnest band says most; good to ~20% for
    choosing which lines to predict, not a result)."""
    if not result.bands or not np.all(np.isfinite(lines.snr)):
        return None
    rows_of: dict[tuple[str, int, int], list[tuple[float, float, float]]] = {}
    width = lines.typical_width_cm1 if np.isfinite(lines.typical_width_cm1) and lines.typical_width_cm1 > 0 else np.inf
    B_of = {(b.isotopologue, b.v_upper, b.v_lower): b.B_lower.value for b in result.bands if b.rms <= 0.1 * width}
    saturated, snr = lines.saturated.tolist(), lines.snr.tolist()
    height, position = lines.height.tolist(), lines.position_cm1.tolist()
    for i, assigned in enumerate(result.per_line):
        if assigned is None or saturated[i] or snr[i] < 10.0 or assigned.blended:
            continue
        key = (assigned.isotopologue, assigned.v_upper, assigned.v_lower)
        if key not in B_of:
            continue
        J = assigned.J_lower
        hoenl_london = J + 1 if assigned.branch == R_BRANCH else J
        if hoenl_london <= 0:
            continue
        energy = B_of[key] * J * (J + 1.0)
        rows_of.setdefault(key, []).append((energy, math.log(height[i] / (hoenl_london * position[i])), height[i]))
    usable = {key: rows for key, rows in rows_of.items() if len(rows) >= 8}
    if not usable:
        return None
    thinnest = min(usable, key=lambda key: median_of_sorted(sorted(r[2] for r in usable[key])))
    energy, value, _ = np.array(usable[thinnest]).T
    if np.ptp(energy) <= 0:
        return None
    slope = float(np.polyfit(energy, value, 1)[0])
    if slope >= 0:
        return None
    temperature = -C2_CM_K / slope
    return float(np.clip(temperature, 50.0, 3000.0))


def _assign_at(
    lines: LineTable,
    first_cm1: float,
    last_cm1: float,
    settings: AssignSettings,
    library: Library,
    measure_doublet: DoubletMeasure | None,
) -> AssignmentResult:
    """One assignment with predictions at `settings.temperature_K` (see `assign_lines`)."""
    notes: list[str] = []
    peaks = lines.position_cm1
    excluded = _excluded_mask(lines, settings.excluded_positions_cm1)
    # possible ringing stays out of the shift search and the pattern route, but the refined
    # matching (tolerances from the fit) may still claim it: a real weak line beside a strong
    # one (e.g. 13C16O beside 12C16O) is not lost
    usable = ~lines.ringing & ~excluded
    claimable = ~excluded
    width = lines.typical_width_cm1 if np.isfinite(lines.typical_width_cm1) and lines.typical_width_cm1 > 0 else 0.0
    # half a line width, but not below what the library's predictions are good to across a
    # band once a common shift is found (LIBRARY_LINE_ACCURACY_CM1): wider, and at high
    # resolution an instrument line shape's sidelobes a few hundredths away fall inside
    tol0 = float(np.clip(0.5 * width, LIBRARY_LINE_ACCURACY_CM1, 1.0)) if width else 0.3

    molecules = _candidate_molecules(library, settings.species, notes)
    usable_peaks = peaks[usable]
    bands: list[_Band] = []
    shifts: dict[str, float] = {}
    J_caps: dict[tuple[str, int, int], int] = {}
    plan = _search_plan(library, tuple(molecules), tuple((u, l) for u, l in settings.bands), settings.temperature_K, first_cm1, last_cm1)
    possible = _may_be_present(usable_peaks, plan, tol0, settings.max_shift_cm1)
    for (molecule, v_upper, v_lower, prediction_set), may_be_present in zip(plan.sets, possible.tolist()):
        if not may_be_present:
            continue
        predicted = _library_predictions(prediction_set, library, v_upper, v_lower, settings.temperature_K)
        shift, _score = _best_shift(usable_peaks, prediction_set, tol0, settings.max_shift_cm1, first_cm1, last_cm1)
        present = [b for b in predicted if _band_is_present(usable_peaks, b, shift, tol0, first_cm1, last_cm1)]
        if not present:
            continue
        shifts[f"{molecule} {v_upper}-{v_lower}"] = shift
        # minor isotopologues ride on the molecule's shift even when weak
        riding = [b for b in predicted if b in present or float(b.weight.max()) >= 0.001]
        _merge_unresolved_partners(riding, width, usable_peaks, shift, notes)
        for band in riding:
            if band.m.size:
                band.position = band.position + shift
                J_caps[band.key] = _J_cap(band)
                bands.append(band)

    winners, blended, refused = _refine(bands, lines, claimable, tol0, J_caps) if bands else ({}, set(), {})
    if bands and np.all(np.isfinite(lines.snr)):
        dropped = _drop_undetectable(bands, winners, lines)
        if dropped:
            notes.extend(f"{bands[i].label}: too weak to be seen here; not assigned" for i in sorted(dropped) if any(c.band == i for c in winners.values()))
            winners = {line: c for line, c in winners.items() if c.band not in dropped}
    # drop bands with too few lines
    counts: dict[int, int] = {}
    for claim in winners.values():
        counts[claim.band] = counts.get(claim.band, 0) + 1
    winners = {line: c for line, c in winners.items() if counts.get(c.band, 0) >= (4 if bands[c.band].fit else MIN_BAND_LINES)}

    assignment: dict[int, tuple[_Band, int]] = {line: (bands[c.band], c.m) for line, c in winners.items()}
    if settings.pattern_route:
        assigned = np.zeros(lines.count, dtype=bool)
        assigned[list(assignment)] = True
        available = usable & ~assigned
        for band, members in _pattern_bands(lines, available, library):
            notes.append(f"{band.label}: found by its P/R pattern ({len(members)} lines), numbering from the centre gap")
            for line, m in members.items():
                assignment[line] = (band, m)

    # operator corrections to J numbering
    for iso, v_upper, v_lower, branch_name, offset in settings.j_offsets:
        for line, (band, m) in list(assignment.items()):
            if band.key == (iso, v_upper, v_lower):
                b, J = branch_from_m(np.array([m]))
                if b[0] == branch_name:
                    new_J = int(J[0]) + offset
                    if new_J >= (1 if branch_name == P_BRANCH else 0):
                        assignment[line] = (band, int(m_from_branch(branch_name, new_J)))
                    else:
                        del assignment[line]
        notes.append(f"{iso} {v_upper}-{v_lower} {branch_name} branch: J'' shifted by {offset:+d} on request")

    result = _finish(lines, assignment, blended, shifts, notes, measure_doublet, refused, library.interferent_region, excluded)
    if settings.species:
        found_molecules = {library.isotopologue(label).molecule for label in result.species_found if label in {i.label for i in library.isotopologues()}}
        missing = sorted({iso.molecule for iso in library.resolve(settings.species)} - found_molecules)
        if missing:
            result = replace(result, notes=result.notes + tuple(f"expected {name}: no band of it found" for name in missing))
    return result


def _candidate_molecules(library: Library, species: tuple[str, ...], notes: list[str]) -> list[str]:
    if not species:
        return list(library.molecules())
    wanted: list[str] = []
    for iso in library.resolve(species):
        for name in (iso.molecule, library.partner(iso.molecule)):
            if name and name in library.molecules() and name not in wanted:
                wanted.append(name)
    return wanted


def _finish(
    lines: LineTable,
    assignment: dict[int, tuple[_Band, int]],
    blended: set[int],
    shifts: dict[str, float],
    notes: list[str],
    measure_doublet: DoubletMeasure | None = None,
    refused: dict[int, float] | None = None,
    interferent_region: Callable[[float], InterferentRegion | None] | None = None,
    excluded: np.ndarray | None = None,
) -> AssignmentResult:
    """Final fit per band, per-line results with confidence, likely causes for the rest (a
    line the operator excluded says so)."""
    refused = refused or {}
    excluded = excluded if excluded is not None else np.zeros(lines.count, dtype=bool)
    groups: dict[tuple[str, int, int], list[int]] = {}
    band_of: dict[tuple[str, int, int], _Band] = {}
    for line, (band, _m) in assignment.items():
        groups.setdefault(band.key, []).append(line)
        band_of[band.key] = band
    per_line: list[LineAssignment | None] = [None] * lines.count
    fits: list[BandFit] = []
    for key, members in sorted(groups.items(), key=lambda kv: (kv[0][0], kv[0][1], kv[0][2])):
        band = band_of[key]
        members.sort()
        m = np.array([assignment[i][1] for i in members], dtype=np.int64)
        branch, J_lower = _branches(m.tobytes())
        idx = np.array(members)
        pull = band.pull_of(m)
        in_blend = np.array([line in blended for line in members], dtype=bool)
        sigma = lines.position_sigma_cm1[idx] * fit_sigma_factor(lines.saturated[idx], in_blend | (pull != 0))
        if measure_doublet is not None:
            # a saturated top has no doublet shape to fit: its blend centre stands
            pairs = [k for k, m_k in enumerate(m.tolist())
                     if m_k in band.partner and not lines.saturated[idx[k]] and band.partner[m_k][1] >= DOUBLET_MIN_RATIO]
            if pairs:
                guesses = np.array([float(lines.position_cm1[idx[k]] - pull[k]) for k in pairs])
                separations = np.array([band.partner[int(m[k])][0] for k in pairs])
                ratios = np.array([band.partner[int(m[k])][1] for k in pairs])
                for k, measured in zip(pairs, measure_doublet(guesses, separations, ratios)):
                    if measured is not None:
                        # the feature sits `pull` from the line: measured from the doublet fit
                        pull[k] = float(lines.position_cm1[idx[k]] - measured[0])
                        sigma[k] = measured[1] * float(fit_sigma_factor(lines.saturated[idx[k]], False))
        fit: BandFit | None = None
        if idx.size >= 4:
            try:
                fit = fit_band(band.isotopologue, band.v_upper, band.v_lower, branch, J_lower, lines.position_cm1[idx] - pull, sigma, lines.sigma_known, library_centrifugal=band.library_centrifugal)
            except (ValueError, np.linalg.LinAlgError):
                fit = None
        if fit is None:
            notes.append(f"{band.label}: {idx.size} lines, too few to fit; left unassigned")
            continue
        fits.append(fit)
        spread = np.sqrt(fit.rms**2 + lines.position_sigma_cm1[idx] ** 2)
        residuals = fit.residuals
        agreement = np.exp(-0.5 * (residuals / np.maximum(3.0 * spread, 1e-9)) ** 2)
        calc = fit.calc + pull
        for line, residual, confidence, saturated, used, branch_k, J_k, calc_k, pull_k in zip(
            members, residuals.tolist(), agreement.tolist(), lines.saturated[idx].tolist(), fit.used.tolist(),
            branch.tolist(), J_lower.tolist(), calc.tolist(), pull.tolist(),
        ):
            merged = abs(pull_k) > 0
            if line in blended or merged:
                confidence *= 0.5
            if saturated:
                confidence *= 0.8
            if band.method == "pattern":
                confidence *= 0.8
            if not used:
                confidence *= 0.3
            # positional (a hundred or more per spectrum): isotopologue, v', v'', branch, J'',
            # calc, residual, confidence, method, blended, used in the fit, blend pull
            per_line[line] = LineAssignment(
                band.isotopologue, band.v_upper, band.v_lower, branch_k, J_k, calc_k, residual, round(confidence, 3),
                band.method, line in blended or merged, used, pull_k,
            )
    fitted_regions = [(float(f.observed.min()) - 1.0, float(f.observed.max()) + 1.0) for f in fits]
    causes = tuple(
        None if per_line[i] is not None
        else EXCLUDED_CAUSE if excluded[i] else _likely_cause(lines, i, fitted_regions, refused, interferent_region)
        for i in range(lines.count)
    )
    species = tuple(sorted({f.isotopologue for f in fits}))
    return AssignmentResult(
        per_line=tuple(per_line),
        likely_cause=causes,
        bands=tuple(fits),
        species_found=species,
        band_shifts_cm1=shifts,
        notes=tuple(notes),
    )
