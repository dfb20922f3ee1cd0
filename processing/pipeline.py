"""file -> RunResult: read, then (when the analysis stages exist) lines, assignment, fits, checks.

Pure: takes settings, returns data, never prints. A file that cannot be read gives a RunResult
with status "unreadable" and the one-line reason; it never raises for a bad file.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from processing.checks import CheckThresholds
from processing.errors import SpectrumFileError
from processing.estimate import Estimate
from processing.levels import m_of_line
from processing.readers import DEFAULT_MAX_BYTES, load_bytes
from processing.readers.registry import parse_bytes_digest_later
from processing.regular_files import ReadPolicy
from processing.results import (
    Assignment,
    Band,
    BandContour,
    BaselineSummary,
    Check,
    FringeSummary,
    Intensities,
    Line,
    RunResult,
    SpectrumSummary,
)
from processing.spectrum import LineList, Spectrum

if TYPE_CHECKING:
    from processing.assign import AssignmentResult, LineAssignment
    from processing.baseline import BaselineResult
    from processing.fit import BandFit
    from processing.line_intensities import IntensityResult
    from processing.lines import LineTable
    from processing.molecular_constants import ConstantsResult
    from processing.species import Library

__all__ = ["Analysis", "ProcessSettings", "RunResult", "SpectrumSummary", "analyse", "process_file", "result_from_analysis"]


@dataclass(frozen=True)
class ProcessSettings:
    """What the analysis needs to know beyond the file itself."""

    species: tuple[str, ...] = ()  # molecule or isotopologue labels expected; () = detect
    max_bytes: int = DEFAULT_MAX_BYTES
    threshold_sigma: float = 5.0  # line detection threshold in noise sigma
    max_shift_cm1: float = 5.0  # largest calibration offset the assignment searches
    temperature_K: float = 296.0  # for predicted intensities
    # operator corrections: (isotopologue, v_upper, v_lower, branch "P"/"R", offset added to J'')
    j_offsets: tuple[tuple[str, int, int, str, int], ...] = ()
    excluded_positions_cm1: tuple[float, ...] = ()  # lines to leave out of assignment and fits
    library_file: str | None = None  # a user library file that adds or overrides species
    thresholds: CheckThresholds = field(default_factory=CheckThresholds)  # the run checks' limits (not analysis)
    read_policy: ReadPolicy | None = None  # where files may be read from (the station's folders)


@dataclass(frozen=True)
class Analysis:
    """The in-memory products of one analysis (arrays kept; `RunResult` holds the JSON view)."""

    data: Spectrum | LineList
    baseline: BaselineResult | None  # None for a line list
    lines: LineTable
    assignment: AssignmentResult
    timing_ms: dict[str, float]
    constants: ConstantsResult | None = None
    intensities: IntensityResult | None = None
    checks: tuple[Check, ...] = ()
    verdict: str | None = None
    contours: tuple[BandContour, ...] = ()  # bands the resolution cannot split into lines


def analyse(data: Spectrum | LineList, settings: ProcessSettings | None = None) -> Analysis:
    """Baseline, lines, assignment and band fits of a spectrum or line list already read."""
    import time

    from processing.assign import AssignSettings, assign_lines
    from processing.baseline import estimate_baseline
    from processing.lines import LineTable, measure_lines
    from processing.species import load_library

    settings = settings or ProcessSettings()
    timing: dict[str, float] = {}
    clock = time.perf_counter()

    def lap(stage: str) -> None:
        nonlocal clock
        now = time.perf_counter()
        timing[stage] = (now - clock) * 1e3
        clock = now

    library = load_library(settings.library_file)
    if isinstance(data, Spectrum):
        baseline = estimate_baseline(data)
        lap("baseline")
        lines = measure_lines(data, baseline, threshold_sigma=settings.threshold_sigma)
        lap("lines")
        first, last = data.first_cm1, data.last_cm1
    else:
        baseline = None
        lines = LineTable.from_positions(data.position_cm1, data.intensity)
        first, last = float(data.position_cm1[0]), float(data.position_cm1[-1])
        lap("lines")
    assign_settings = AssignSettings(
        species=settings.species,
        max_shift_cm1=settings.max_shift_cm1,
        temperature_K=settings.temperature_K,
        j_offsets=settings.j_offsets,
        excluded_positions_cm1=settings.excluded_positions_cm1,
    )
    doublet = None
    if isinstance(data, Spectrum):
        from processing.doublets import measure_blended_lines
        from processing.lines import line_profile

        profile = line_profile(lines)

        def doublet(centres: np.ndarray, separations: np.ndarray, ratios: np.ndarray) -> list[tuple[float, float] | None]:
            return measure_blended_lines(data, baseline, lines.typical_width_cm1, centres, separations, ratios, profile)

    assignment = assign_lines(lines, first, last, assign_settings, library, doublet)
    contours = unresolved_bands(data, baseline, lines, assignment, library, settings.temperature_K)
    lap("assignment and fits")
    from processing.checks import run_checks, verdict_of
    from processing.line_intensities import analyse_intensities
    from processing.molecular_constants import molecular_constants

    thresholds = settings.thresholds
    partial = Analysis(data, baseline, lines, assignment, timing, contours=contours)
    constants = molecular_constants(partial, library)
    intensities = analyse_intensities(partial, library, settings.temperature_K)
    lap("constants and intensities")
    partial = Analysis(data, baseline, lines, assignment, timing, constants, intensities, contours=contours)
    checks = run_checks(partial, library, intensities, settings.species, thresholds)
    lap("checks")
    return Analysis(data, baseline, lines, assignment, timing, constants, intensities, tuple(checks), verdict_of(checks), contours)


def unresolved_bands(
    data: Spectrum | LineList, baseline: BaselineResult | None, lines: LineTable, assignment: AssignmentResult, library: Library,
    temperature_K: float,
) -> tuple[BandContour, ...]:
    """Library bands present only as unresolved P/R contours (see `processing.contour`). The
    instrument line shape is the one the lines showed, else the stated one, else a Happ-Genzel
    shape as wide as the lines found (said so in its source)."""
    if not isinstance(data, Spectrum) or baseline is None:
        return ()
    from processing.contour import find_unresolved_bands
    from processing.line_shape import LineShapeModel, stated_line_shape

    shape = lines.line_shape or stated_line_shape(data.meta.apodization, data.meta.resolution_cm1)
    if shape is None and lines.count and lines.typical_width_cm1 > 0:
        fwhm_per_opd = LineShapeModel("happ-genzel", 1.0, "").fwhm_cm1
        shape = LineShapeModel("happ-genzel", fwhm_per_opd / lines.typical_width_cm1, "assumed: Happ-Genzel as wide as the lines found")
    if shape is None:
        return ()
    assigned = {(fit.isotopologue, fit.v_upper, fit.v_lower) for fit in assignment.bands}
    return tuple(find_unresolved_bands(data.wavenumber_cm1, baseline.corrected, baseline.noise_sigma, shape, library, temperature_K, assigned))


def spectrum_summary(data: Spectrum | LineList) -> SpectrumSummary:
    """What was read: points, range, spacing, units, resolution, format, title, notes."""
    if isinstance(data, Spectrum):
        return SpectrumSummary(
            points=data.points,
            first_cm1=data.first_cm1,
            last_cm1=data.last_cm1,
            spacing_cm1=data.spacing_cm1,
            y_units=data.original_y_kind,
            resolution_cm1=data.meta.resolution_cm1,
            kind="spectrum",
            format=data.meta.format,
            title=data.meta.title,
            notes=data.meta.notes + (f"y conversion: {data.conversion}",),
        )
    return SpectrumSummary(
        points=data.points,
        first_cm1=float(data.position_cm1[0]),
        last_cm1=float(data.position_cm1[-1]),
        spacing_cm1=None,
        y_units=data.y_kind,
        resolution_cm1=data.meta.resolution_cm1,
        kind="line list",
        format=data.meta.format,
        title=data.meta.title,
        notes=data.meta.notes,
    )


def _assignment(assigned: LineAssignment) -> Assignment:
    return Assignment(
        isotopologue=assigned.isotopologue,
        v_upper=assigned.v_upper,
        v_lower=assigned.v_lower,
        branch=assigned.branch,
        J_lower=assigned.J_lower,
        m=m_of_line(assigned.branch, assigned.J_lower),
        calc=assigned.calc,
        residual=assigned.residual,
        confidence=assigned.confidence,
        method=assigned.method,
        blended=assigned.blended,
        used_in_fit=assigned.used_in_fit,
    )


def _lines(analysis: Analysis) -> tuple[Line, ...]:
    lines = analysis.lines
    assignment = analysis.assignment
    widths = analysis.intensities.equivalent_width_cm1.tolist() if analysis.intensities is not None else None
    # each column as Python numbers once (the same values as float()/bool() of each element)
    columns = zip(
        lines.position_cm1.tolist(), lines.position_sigma_cm1.tolist(), lines.height.tolist(),
        lines.width_cm1.tolist(), lines.area_cm1.tolist(), lines.snr.tolist(), lines.saturated.tolist(),
        lines.blended.tolist(), lines.ringing.tolist(), lines.few_points.tolist(),
    )
    records = []
    for i, (position, sigma, height, width, area, snr, saturated, blended, ringing, few_points) in enumerate(columns):
        assigned = assignment.per_line[i]
        records.append(
            Line(
                position=Estimate(position, sigma),
                height=height,
                width=width if width == width else None,
                area=area if area == area else None,
                snr=snr if snr != float("inf") else None,
                saturated=bool(saturated),
                blended=bool(blended),
                ringing=bool(ringing),
                few_points=bool(few_points),
                equivalent_width=widths[i] if widths is not None and widths[i] == widths[i] else None,
                assigned=_assignment(assigned) if assigned else None,
                likely_cause=assignment.likely_cause[i],
            )
        )
    return tuple(records)


def _band(fit: BandFit, constants: ConstantsResult | None) -> Band:
    """A band fit with its parameters against the reference for its model."""
    reference = constants.band((fit.isotopologue, fit.v_upper, fit.v_lower)) if constants is not None else None
    return Band(
        isotopologue=fit.isotopologue,
        v_upper=fit.v_upper,
        v_lower=fit.v_lower,
        n_lines=fit.n_lines,
        n_rejected=int((~fit.used).sum()),
        rms=fit.rms,
        origin=fit.origin,
        B_upper=fit.B_upper,
        B_lower=fit.B_lower,
        D_upper=fit.D_upper,
        D_lower=fit.D_lower,
        d_model=fit.d_model,
        held_centrifugal=dict(zip(("D_upper", "D_lower", "H_upper", "H_lower"), fit.held)) if any(fit.held) else None,
        H_upper=fit.H_upper,
        H_lower=fit.H_lower,
        h_model=fit.h_model,
        chi2_reduced=None if not np.isfinite(fit.chi2_reduced) else fit.chi2_reduced,
        parameters=tuple(fit.parameter_names),
        correlation=tuple(tuple(row) for row in np.round(fit.correlation, 6).tolist()),
        rejection_rule=fit.rejection_rule,
        combination_differences=tuple(cd for cd in (fit.lower_combination, fit.upper_combination) if cd),
        notes=tuple(fit.notes),
        reference={c.name: c for c in reference.comparisons} if reference is not None else {},
    )


def _baseline(baseline: BaselineResult) -> BaselineSummary:
    noise = baseline.noise
    fringes = baseline.fringes
    return BaselineSummary(
        noise_sigma=baseline.noise_sigma,
        noise_correlation_points=noise.correlation_points if noise else None,
        quantization_step=noise.quantization_step if noise else None,
        quantization_floor=noise.quantization_floor if noise else None,
        noise_measurable=noise.measurable if noise else None,
        noise_description=noise.description if noise else None,
        fringes=FringeSummary(fringes.period_cm1, fringes.amplitude, fringes.contrast) if fringes else None,
        offset_median=baseline.offset_median,
        tilt_per_1000_cm1=baseline.tilt_per_1000_cm1,
        line_free_fraction=float(baseline.line_free.mean()),
        usable_absorbance=baseline.usable_absorbance,
        saturated_regions=baseline.saturated_regions,
    )


def _intensities(intensities: IntensityResult) -> Intensities:
    return Intensities(intensities.temperatures, intensities.ratios, intensities.optically_thin, intensities.thinness,
                       intensities.hydrogen_fractions, intensities.notes)


def result_from_analysis(source: str, analysis: Analysis, sha256: str | None = None) -> RunResult:
    """The RunResult of an analysis; `sha256` is the file's when its spectrum was read without
    it (parse_bytes_digest_later), else the spectrum's own."""
    data = analysis.data
    notes = tuple(analysis.assignment.notes)
    if analysis.constants is not None:
        notes += tuple(analysis.constants.notes)
    return RunResult(
        file=source,
        status="processed",
        sha256=sha256 if sha256 is not None else data.meta.sha256,
        spectrum=spectrum_summary(data),
        lines=_lines(analysis),
        bands=tuple(_band(fit, analysis.constants) for fit in analysis.assignment.bands),
        constants=tuple(analysis.constants.per_isotopologue) if analysis.constants else (),
        checks=tuple(analysis.checks),
        verdict=analysis.verdict,
        species_found=tuple(analysis.assignment.species_found),
        notes=notes,
        band_shifts_cm1=dict(analysis.assignment.band_shifts_cm1),
        timing_ms={k: round(v, 3) for k, v in analysis.timing_ms.items()},
        baseline=_baseline(analysis.baseline) if analysis.baseline is not None else None,
        mass_reduced=tuple(analysis.constants.mass_reduced) if analysis.constants is not None else None,
        intensities=_intensities(analysis.intensities) if analysis.intensities is not None else None,
        contours=tuple(analysis.contours),
    )


def process_file(path: str | Path, settings: ProcessSettings | None = None) -> RunResult:
    """Read and analyse one file; a file problem becomes an "unreadable" result, not an error."""
    settings = settings or ProcessSettings()
    source = str(path)
    try:
        raw = load_bytes(source, settings.max_bytes, settings.read_policy or ReadPolicy())
    except SpectrumFileError as error:
        return RunResult(file=source, status="unreadable", error=str(error))
    try:
        data, sha256 = parse_bytes_digest_later(raw, source)
    except SpectrumFileError as error:
        # The bytes were read: their hash lets a ledger recognise the same bad file again.
        digest = hashlib.sha256(raw).hexdigest()
        return RunResult(file=source, status="unreadable", sha256=digest, error=str(error))
    del raw  # a text export is several times the size of its arrays: not kept through the analysis
    analysis = analyse(data, settings)
    return result_from_analysis(source, analysis, sha256=sha256())
