"""Run checks: is this scan good enough to keep? Each check says pass, warn or fail with a
one-line reason and the number behind it, or `not_assessed` when the data cannot answer it (a
line list has no noise to measure; thick lines give no temperature); the verdict is the worst
of the checks that were made.

Thresholds live in `CheckThresholds` (defaults below, each with its reason); the station
configuration's [checks] table overrides any of them by name.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from processing.check_thresholds import CheckThresholds as CheckThresholds  # re-exported: callers import it from here
from processing.results import CalibrationBand, CalibrationFit, Check

if TYPE_CHECKING:
    from processing.line_intensities import IntensityResult
    from processing.pipeline import Analysis
    from processing.species import Library

STATUS_ORDER = {"pass": 0, "warn": 1, "fail": 2}
NOT_ASSESSED = "not_assessed"  # the check could not be made; ignored by the verdict


def _grade(value: float, good: float, fair: float, higher_is_better: bool = True) -> str:
    if higher_is_better:
        return "pass" if value >= good else "warn" if value >= fair else "fail"
    return "pass" if value <= good else "warn" if value <= fair else "fail"


def verdict_of(checks: list[Check]) -> str:
    """The worst status among the checks that were made (a check not assessed counts for nothing)."""
    made = [c.status for c in checks if c.status != NOT_ASSESSED]
    return max(made, key=STATUS_ORDER.__getitem__, default="pass")


# ----------------------------------------------------------------------------- the checks
def check_signal_to_noise(analysis: Analysis, t: CheckThresholds) -> Check:
    lines = analysis.lines
    if analysis.baseline is None:
        return Check("signal_to_noise", NOT_ASSESSED, "line list: no spectrum to measure noise on", None)
    sigma = analysis.baseline.noise_sigma
    noise = analysis.baseline.noise
    if noise is not None and not noise.measurable:
        tallest = float(np.max(lines.height)) if lines.count else 0.0
        return Check("signal_to_noise", NOT_ASSESSED, f"not assessed, {noise.description}; tallest line {tallest:.3g} A", None)
    if not (math.isfinite(sigma) and sigma > 0):  # a noiseless (rounded or synthetic) export
        return Check("signal_to_noise", NOT_ASSESSED, f"no noise measured (noise sigma {sigma:.2g} A): no ratio to give", None)
    if lines.count == 0:
        return Check("signal_to_noise", "fail", f"no absorption line above 5x the noise (noise sigma {sigma:.2g} A)", 0.0)
    assigned = np.array([a is not None for a in analysis.assignment.per_line])
    pool = lines.snr[assigned] if assigned.any() else lines.snr
    best = float(np.max(pool))
    what = "strongest assigned line" if assigned.any() else "strongest line (none assigned)"
    return Check("signal_to_noise", _grade(best, t.snr_pass, t.snr_warn), f"{what} {best:.0f}x the noise (noise sigma {sigma:.2g} A)", best)


def check_saturation(analysis: Analysis, intensities: IntensityResult | None, t: CheckThresholds) -> Check:
    lines = analysis.lines
    assigned = np.array([a is not None for a in analysis.assignment.per_line], dtype=bool)
    if analysis.baseline is None:
        return Check("saturation", NOT_ASSESSED, "line list: saturation cannot be judged without the spectrum", None)
    peak = float(np.max(analysis.data.absorbance))
    saturated = int((lines.saturated & assigned).sum()) if lines.count else 0
    n_assigned = int(assigned.sum())
    if saturated and saturated >= max(3, t.saturated_lines_fail_fraction * max(n_assigned, 1)):
        return Check("saturation", "fail", f"{saturated} of {n_assigned} assigned lines saturated or flat-topped (peak absorbance {peak:.2f}): reduce pressure or path", float(saturated))
    if saturated:
        return Check("saturation", "warn", f"{saturated} assigned line(s) saturated (peak absorbance {peak:.2f}); they are down-weighted", float(saturated))
    if intensities is not None and intensities.thinness is not None and intensities.thinness < t.thin_ratio_warn:
        return Check("saturation", "warn", f"line centres strongly optically thick: isotopologue ratio at {intensities.thinness:.2f} of natural (peak absorbance {peak:.2f})", intensities.thinness)
    return Check("saturation", "pass", f"no saturated line (peak absorbance {peak:.2f})", 0.0)


def check_band_lines(analysis: Analysis, t: CheckThresholds) -> Check:
    bands = analysis.assignment.bands
    if not bands:
        contours = analysis.contours
        why = f" line by line ({', '.join(c.label for c in contours)} only as unresolved contours: see resolution)" if contours else ""
        return Check("assigned_lines", "fail", f"no band could be assigned{why}", 0.0)
    fewest = min(bands, key=lambda b: b.n_lines)
    return Check("assigned_lines", _grade(fewest.n_lines, t.band_lines_pass, t.band_lines_warn),
                 f"{len(bands)} band(s); fewest lines: {fewest.label} with {fewest.n_lines}", float(fewest.n_lines))


def check_fit_rms(analysis: Analysis, t: CheckThresholds) -> Check:
    bands = analysis.assignment.bands
    if not bands:
        return Check("fit_rms", "fail", "no band fit", None)
    width = analysis.lines.typical_width_cm1
    if not (width and np.isfinite(width)):
        worst = max(bands, key=lambda b: b.rms)
        return Check("fit_rms", NOT_ASSESSED, f"worst band {worst.label}: rms {worst.rms:.4f} cm-1 (no line width to compare: line list)", worst.rms)
    worst = max(bands, key=lambda b: b.rms / width)
    fraction = worst.rms / width
    return Check("fit_rms", _grade(fraction, t.rms_width_pass, t.rms_width_warn, higher_is_better=False),
                 f"worst band {worst.label}: rms {worst.rms:.4f} cm-1 = {100 * fraction:.1f}% of the {width:.3f} cm-1 line width", fraction)


def _grade_with_noise(value: float, sigma: float, good: float, fair: float) -> str:
    """pass within max(good, 3 sigma), warn within fair, else fail."""
    magnitude = abs(value)
    return "pass" if magnitude <= max(good, 3 * sigma) else "warn" if magnitude <= max(fair, 3 * sigma) else "fail"


def check_calibration(analysis: Analysis, library: Library, t: CheckThresholds) -> Check:
    """Offset and scale of the wavenumber axis from every band the library knows.

    A feature at true nu is shown at nu (1 + s) + a. Each band fit then gives its origin
    (a + s nu0) and its B' and B'' (scaled by 1 + s) against the reference for its model
    (`model_reference`); one generalised least-squares fit of the offset at the bands' mean
    wavenumber and the scale uses them all, with the library's correlated uncertainties
    (isotopologues of one molecule share theirs)."""
    fit = calibration_fit(analysis)
    if fit is None:
        return Check("calibration", NOT_ASSESSED, "no library band to compare with", None)
    offset, offset_sigma = fit.offset_cm1, fit.offset_sigma_cm1
    scale, scale_sigma = fit.scale_ppm, fit.scale_sigma_ppm
    offset_status = _grade_with_noise(offset, offset_sigma, t.calibration_pass_cm1, t.calibration_warn_cm1)
    scale_status = _grade_with_noise(scale, scale_sigma, t.calibration_scale_pass_ppm, t.calibration_scale_warn_ppm)
    status = max(offset_status, scale_status, key=STATUS_ORDER.__getitem__)
    ranked = sorted(fit.bands, key=lambda b: -b.weight)
    named = ", ".join(f"{b.label} {b.offset:+.3f} ({100 * b.weight:.0f}%)" for b in ranked[:4])
    centre = fit.wavenumber_cm1
    offset_text = f"offset {offset:+.3f} +- {offset_sigma:.3f} cm-1 at {centre:.0f} cm-1"
    scale_text = f"scale {scale:+.0f} +- {scale_sigma:.0f} ppm"
    if scale_status != "pass":
        lowest, highest = min(b.wavenumber_cm1 for b in fit.bands), max(b.wavenumber_cm1 for b in fit.bands)
        at = lambda nu: offset + scale * 1e-6 * (nu - centre)  # noqa: E731
        stretch = f" (axis stretched: {at(lowest):+.2f} cm-1 at {lowest:.0f}, {at(highest):+.2f} at {highest:.0f})" if highest - lowest > 100 else ""
        reason = f"wavenumber scale error {scale_text}{stretch}; {offset_text}"
    elif offset_status != "pass":
        reason = f"wavenumber calibration offset: {offset_text}; {scale_text}"
    else:
        reason = f"band origins agree with the library: {offset_text}, {scale_text}"
    return Check("calibration", status, f"{reason}; set by {named}", offset, fit)


def calibration_fit(analysis: Analysis) -> CalibrationFit | None:
    """Offset (at the mean wavenumber) and scale of the axis from the band references;
    None when no band has one."""
    constants = getattr(analysis, "constants", None)
    references = [b for b in (constants.bands if constants is not None else ()) if b.model.reference is not None]
    rows: list[tuple[int, int, float, float]] = []  # (band, parameter index, x of offset, x of scale)
    differences, statistical, sensitivity, per_band = [], [], [], []
    for number, band in enumerate(references):
        model = band.model
        difference = model.values - model.reference
        covariance = model.statistical
        chosen = [name for name in ("origin", "B_upper", "B_lower") if name in model.names]
        indices = [model.names.index(name) for name in chosen]
        for name, i in zip(chosen, indices):
            reference_value = float(model.reference[i])
            rows.append((number, i, 1.0 if name == "origin" else 0.0, reference_value))
            differences.append(float(difference[i]))
            sensitivity.append(model.sensitivity[i] - model.reference_sensitivity[i])
        statistical.append(covariance[np.ix_(indices, indices)])
        origin = model.names.index("origin")
        library_cov = model.library.covariance((model.sensitivity - model.reference_sensitivity)[origin])
        origin_sigma = math.sqrt(max(covariance[origin, origin] + float(library_cov[0, 0]), 0.0))
        per_band.append({
            "label": f"{band.isotopologue} {band.v_upper}-{band.v_lower}",
            "offset": float(difference[origin]),
            "sigma": origin_sigma,
            "wavenumber_cm1": float(model.reference[origin]),
        })
    if not per_band:
        return None
    library = references[0].model.library
    n = len(differences)
    d = np.array(differences)
    blocks = np.zeros((n, n))
    start = 0
    for block in statistical:
        size = block.shape[0]
        blocks[start:start + size, start:start + size] = block
        start += size
    covariance = blocks + library.covariance(np.array(sensitivity))
    origin_weights = np.array([1.0 / max(b["sigma"], 1e-12) ** 2 for b in per_band])
    centre = float(np.sum(origin_weights * np.array([b["wavenumber_cm1"] for b in per_band])) / origin_weights.sum())
    design = np.array([[x_offset, (reference - centre) if x_offset else reference] for _, _, x_offset, reference in rows])
    design[:, 1] *= 1e-6  # scale in ppm
    inverse = np.linalg.pinv(covariance)
    normal = design.T @ inverse @ design
    normal_inverse = np.linalg.pinv(normal)
    parameters = normal_inverse @ design.T @ inverse @ d
    residual = d - design @ parameters
    dof = n - 2
    chi2 = float(residual @ inverse @ residual)
    inflation = max(1.0, chi2 / dof) if dof > 0 else 1.0
    sigmas = np.sqrt(np.clip(np.diag(normal_inverse) * inflation, 0.0, None))
    total = origin_weights.sum()
    return CalibrationFit(
        offset_cm1=float(parameters[0]),
        offset_sigma_cm1=float(sigmas[0]),
        scale_ppm=float(parameters[1]),
        scale_sigma_ppm=float(sigmas[1]),
        wavenumber_cm1=centre,
        chi2_reduced=chi2 / dof if dof > 0 else None,
        model="shown = true (1 + scale) + offset; origins, B' and B'' of every band against the reference for its model",
        bands=tuple(CalibrationBand(b["label"], b["offset"], b["sigma"], b["wavenumber_cm1"], float(weight / total))
                    for b, weight in zip(per_band, origin_weights)),
    )


def check_interferents(
    analysis: Analysis, library: Library, t: CheckThresholds, axis_inverted: bool = False, negative_lines: int | None = None
) -> Check:
    """Unassigned lines the assignment put down to an atmospheric absorber (the library's
    interferent regions), counted per absorber, and dips below the baseline."""
    per_absorber = {region.absorber: 0 for region in library.interferent_regions}
    for position, cause in zip(analysis.lines.position_cm1.tolist(), analysis.assignment.likely_cause):
        region = library.interferent_region(position) if cause and cause.startswith("interferent") else None
        if region is not None:
            per_absorber[region.absorber] += 1
    # dips are the spectrum itself when its axis is inverted: no purge to blame
    negative = 0 if axis_inverted else (_negative_lines(analysis) if negative_lines is None else negative_lines)
    problems = [f"{count} unassigned lines in {absorber} regions" for absorber, count in per_absorber.items()
                if count >= t.interferent_lines_warn]
    if negative >= t.negative_lines_warn:
        problems.append(f"{negative} negative lines (background taken with a different purge)")
    total = float(sum(per_absorber.values()) + negative)
    if problems:
        return Check("interferents", "warn", "; ".join(problems) + ": check the purge", total)
    counts = ", ".join(f"{count} {absorber}-region" for absorber, count in per_absorber.items())
    return Check("interferents", "pass", f"no interferent bands ({counts + ', ' if counts else ''}{negative} negative lines)", total)


def _negative_lines(analysis: Analysis) -> int:
    if analysis.baseline is None:
        return 0
    from processing.lines import negative_features

    return int(negative_features(analysis.data, analysis.baseline, analysis.lines).size)


# A gas-cell spectrum's baseline where nothing absorbs sits near zero absorbance (T near 1):
# a baseline transmittance under this fraction is no measurement of a cell (common practice).
IMPLAUSIBLE_BASELINE_TRANSMITTANCE = 0.03


def check_resolution(analysis: Analysis) -> Check:
    """Can the resolution split the lines of the bands present? A band seen only as its P/R
    contour cannot be measured line by line: said so with its line spacing and the resolution,
    and B'' given from the contour fit instead."""
    contours = analysis.contours
    if contours:
        first = contours[0]
        stated = analysis.data.meta.resolution_cm1
        resolution = f"resolution {stated:g} cm-1 stated, " if stated else ""
        parts = [
            f"{c.label} present only as a P/R contour: its lines are {c.line_spacing_cm1:.2f} cm-1 apart, "
            f"{resolution}line shape {c.resolution_fwhm_cm1:.2f} cm-1 wide (FWHM): too coarse to separate them; "
            f"B'' from a contour fit {c.B_lower.value:.3f} +- {c.B_lower.sigma or 0:.3f} cm-1"
            for c in contours
        ]
        return Check("resolution", "fail", "; ".join(parts), first.line_spacing_cm1)
    if analysis.baseline is None or not analysis.assignment.bands:
        return Check("resolution", NOT_ASSESSED, "no band to judge the resolution against", None)
    width = analysis.lines.typical_width_cm1
    closest = min(2.0 * min(fit.B_lower.value, fit.B_upper.value) for fit in analysis.assignment.bands)
    return Check("resolution", "pass", f"lines at least {closest:.2f} cm-1 apart near the band centres, line width {width:.3f} cm-1", width)


def check_y_axis(analysis: Analysis, negative_lines: int | None = None) -> Check:
    """Does the y axis hold what its label says? Absorption lines rise above a baseline near
    zero absorbance. Values near 100 labelled absorbance are %T; a baseline near 1 with the
    features dipping below it is transmittance written as absorbance; features dipping below a
    baseline near 0 are an inverted sign (or an emission spectrum); a baseline of a few
    percent transmittance where nothing absorbs is absorbance written as transmittance."""
    if analysis.baseline is None:
        return Check("y_axis", NOT_ASSESSED, "line list: no axis to judge", None)
    offset = analysis.baseline.offset_median
    kind = analysis.data.original_y_kind
    lines = analysis.lines
    positive = int(np.sum((lines.snr >= 8.0) & ~lines.ringing)) if lines.count else 0
    negative = _negative_lines(analysis) if negative_lines is None else negative_lines
    dips = negative >= 5 and negative > 2 * positive
    if kind == "absorbance" and offset > 20.0:
        return Check("y_axis", "fail", f"absorbance baseline at {offset:.1f}: looks like %T written as absorbance", offset)
    if kind == "absorbance" and 0.7 <= offset <= 1.1 and dips:
        return Check("y_axis", "fail", f"baseline at {offset:.2f} with {negative} features dipping below it: looks like transmittance written as absorbance", offset)
    if kind != "absorbance" and 10.0**-offset < IMPLAUSIBLE_BASELINE_TRANSMITTANCE:
        return Check("y_axis", "fail", f"transmittance where nothing absorbs is {100 * 10.0**-offset:.2g}%: looks like absorbance written as transmittance (or a blocked beam)", offset)
    if dips:
        return Check("y_axis", "fail", f"{negative} features dip below the baseline, {positive} rise above it: the y axis looks inverted (absorbance with its sign flipped, or an emission spectrum)", float(negative))
    return Check("y_axis", "pass", f"{kind.replace('_', ' ')} as labelled: lines rise above a baseline at {offset:+.3f} A", offset)


def check_isotopologues(analysis: Analysis, library: Library, intensities: IntensityResult | None, expected: tuple[str, ...], t: CheckThresholds) -> Check:
    """Expected species present, nothing unexpected. With species named (`--species` or the
    station's configuration) a named species is never a problem: a DCl cell that holds HCl by
    design gives its hydrogen fraction as information. Without them an H form beside its D
    form is reported as H/D exchange. The fraction is quoted only when the lines are thin."""
    found = set(analysis.assignment.species_found)
    unidentified = sorted(f for f in found if f.startswith("unidentified"))
    labels = {iso.label: iso for iso in library.isotopologues()}
    found_molecules = {labels[f].molecule for f in found if f in labels}
    wanted = {iso.molecule for iso in library.resolve(expected)} if expected else None
    problems: list[tuple[str, str]] = []
    information: list[str] = []
    fractions = {f.molecule_h: f for f in (intensities.hydrogen_fractions if intensities is not None else ())}
    thin = intensities is not None and intensities.optically_thin is True

    def fraction_text(molecule_h: str) -> str:
        fraction = fractions.get(molecule_h)
        if fraction is None or not thin:
            return ""
        value, sigma = fraction.fraction_h.value, fraction.fraction_h.sigma or 0.0
        return f"hydrogen fraction {molecule_h}/({molecule_h}+{fraction.molecule_d}) {100 * value:.1f} +- {100 * sigma:.1f}%"

    if wanted is not None:
        for molecule in sorted(wanted - found_molecules):
            problems.append(("fail", f"expected {molecule} not found"))
        for molecule in sorted(found_molecules - wanted):
            partner = library.partner(molecule) in wanted
            extra = fraction_text(molecule) if partner else ""
            note = " (H/D exchange?" + (f" {extra}" if extra else "") + ")" if partner else ""
            problems.append(("warn", f"unexpected {molecule} present{note}"))
    for molecule_h, fraction in fractions.items():
        text = fraction_text(molecule_h)
        if wanted is None:
            problems.append(("warn", f"{molecule_h} in {fraction.molecule_d}" + (f": {text}" if text else "") + " (H/D exchange)"))
        elif molecule_h in wanted and fraction.molecule_d in wanted and text:
            information.append(text + " (information)")
    for band in unidentified:
        problems.append(("warn", f"{band}: a band not in the library"))
    if thin:
        for ratio in intensities.ratios:
            if ratio.natural and abs(ratio.ratio.value / ratio.natural - 1) > t.abundance_ratio_tolerance:
                problems.append(("warn", f"{ratio.numerator}/{ratio.denominator} = {ratio.ratio.value:.2f}, natural {ratio.natural:.2f}"))
    if not found:
        return Check("isotopologues", "fail" if expected else "warn", "no isotopologue identified", 0.0)
    if problems:
        status = "fail" if any(s == "fail" for s, _ in problems) else "warn"
        return Check("isotopologues", status, "; ".join([text for _, text in problems] + information), float(len(problems)))
    return Check("isotopologues", "pass", "; ".join(["found " + ", ".join(sorted(found))] + information), float(len(found)))


def check_temperature(intensities: IntensityResult | None, t: CheckThresholds) -> Check:
    """Rotational temperature from the best Boltzmann plot, corrected to first order for
    optical depth (`line_intensities`); not assessed when the lines are too thick for that."""
    from processing.line_intensities import KAPPA_LIMIT

    if intensities is None or not intensities.temperatures:
        return Check("temperature", NOT_ASSESSED, "not assessed: too few clean lines for a Boltzmann plot", None)
    best = min(intensities.temperatures, key=lambda r: r.temperature.sigma or np.inf)
    T = best.temperature.value
    sigma = best.temperature.sigma or 0.0
    if intensities.optically_thin is False:
        return Check("temperature", NOT_ASSESSED, f"not assessed: line centres optically thick (isotopologue ratio at {intensities.thinness:.2f} of natural); the Boltzmann plot gives {T:.0f} K, biased high", None)
    if intensities.optically_thin is None:
        return Check("temperature", NOT_ASSESSED, f"not assessed: optical depth cannot be verified without a 35/37-like isotopologue pair (Boltzmann plot: {T:.0f} +- {sigma:.0f} K, an upper bound if lines are thick)", None)
    kappa = best.optical_depth.value if best.optical_depth is not None else 0.0
    if kappa > KAPPA_LIMIT:
        return Check("temperature", NOT_ASSESSED, f"not assessed: the strongest lines lose ~{100 * kappa:.0f}% of their area to optical depth (Boltzmann plot {T:.0f} +- {sigma:.0f} K)", None)
    inside = t.temperature_min_K - 2 * sigma <= T <= t.temperature_max_K + 2 * sigma
    return Check("temperature", "pass" if inside else "warn",
                 f"rotational temperature {T:.0f} +- {sigma:.0f} K from {best.isotopologue} {best.v_upper}-{best.v_lower} (sigma includes optical depth: strongest line ~{100 * kappa:+.0f}%)", T)


def check_baseline(analysis: Analysis, t: CheckThresholds) -> Check:
    baseline = analysis.baseline
    if baseline is None:
        return Check("baseline", NOT_ASSESSED, "line list: no baseline", None)
    problems = []
    if abs(baseline.offset_median) > t.baseline_offset_warn:
        problems.append(f"baseline at {baseline.offset_median:+.3f} A where nothing absorbs (background mismatch?)")
    if abs(baseline.tilt_per_1000_cm1) > t.baseline_tilt_warn_per_1000_cm1:
        problems.append(f"tilt {baseline.tilt_per_1000_cm1:+.3f} A per 1000 cm-1")
    fringes = baseline.fringes
    if fringes is not None and fringes.amplitude > t.fringe_amplitude_warn:
        problems.append(f"fringes: {fringes.amplitude:.4f} A with period {fringes.period_cm1:.2f} cm-1 (window etalon; taken out with the baseline before finding lines)")
    if problems:
        return Check("baseline", "warn", "; ".join(problems), baseline.offset_median)
    return Check("baseline", "pass", f"flat: offset {baseline.offset_median:+.3f} A, no fringes above {t.fringe_amplitude_warn:.4f} A", baseline.offset_median)


def run_checks(analysis: Analysis, library: Library, intensities: IntensityResult | None, expected: tuple[str, ...], thresholds: CheckThresholds) -> list[Check]:
    negative = _negative_lines(analysis)  # one scan for dips below the baseline, two checks
    y_axis = check_y_axis(analysis, negative)
    return [
        y_axis,
        check_signal_to_noise(analysis, thresholds),
        check_saturation(analysis, intensities, thresholds),
        check_band_lines(analysis, thresholds),
        check_fit_rms(analysis, thresholds),
        check_calibration(analysis, library, thresholds),
        check_interferents(analysis, library, thresholds, axis_inverted=y_axis.status == "fail", negative_lines=negative),
        check_isotopologues(analysis, library, intensities, expected, thresholds),
        check_temperature(intensities, thresholds),
        check_baseline(analysis, thresholds),
        check_resolution(analysis),
    ]
