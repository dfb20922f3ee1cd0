"""file -> RunResult: read, then (when the analysis stages exist) lines, assignment, fits, checks.

Pure: takes settings, returns data, never prints. A file that cannot be read gives a RunResult
with status "unreadable" and the one-line reason; it never raises for a bad file.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from processing.errors import SpectrumFileError
from processing.readers import DEFAULT_MAX_BYTES, load_bytes, parse_bytes
from processing.regular_files import ReadPolicy
from processing.spectrum import LineList, Spectrum

SCHEMA_VERSION = 1


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
    checks: dict[str, Any] = field(default_factory=dict)  # threshold overrides (see processing.checks)
    read_policy: ReadPolicy | None = None  # where files may be read from (the station's folders)


@dataclass(frozen=True)
class SpectrumSummary:
    """What was read: enough for a table row and the `spectrum` JSON object."""

    points: int
    first_cm1: float
    last_cm1: float
    spacing_cm1: float | None
    y_units: str
    resolution_cm1: float | None
    kind: str  # "spectrum" or "line list"
    format: str
    title: str
    notes: tuple[str, ...] = ()

    @classmethod
    def of(cls, data: Spectrum | LineList) -> SpectrumSummary:
        if isinstance(data, Spectrum):
            return cls(
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
        return cls(
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

    def to_dict(self) -> dict[str, Any]:
        return {
            "points": self.points,
            "first_cm1": self.first_cm1,
            "last_cm1": self.last_cm1,
            "spacing_cm1": self.spacing_cm1,
            "y_units": self.y_units,
            "resolution_cm1": self.resolution_cm1,
            "kind": self.kind,
            "format": self.format,
            "title": self.title,
            "notes": list(self.notes),
        }


@dataclass(frozen=True)
class RunResult:
    """Everything bandwatch concluded about one file."""

    file: str
    status: str  # "processed" | "unreadable"
    sha256: str | None = None
    error: str | None = None
    spectrum: SpectrumSummary | None = None
    lines: tuple[dict[str, Any], ...] = ()
    bands: tuple[dict[str, Any], ...] = ()
    constants: tuple[dict[str, Any], ...] = ()
    checks: tuple[dict[str, Any], ...] = ()
    verdict: str | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """The public JSON object (`schema` 1). Keys may be added, never renamed or dropped."""
        return {
            "schema": SCHEMA_VERSION,
            "file": self.file,
            "sha256": self.sha256,
            "status": self.status,
            "error": self.error,
            "spectrum": self.spectrum.to_dict() if self.spectrum else None,
            "lines": list(self.lines),
            "bands": list(self.bands),
            "constants": list(self.constants),
            "checks": list(self.checks),
            "verdict": self.verdict,
            **self.extra,
        }


@dataclass(frozen=True)
class Analysis:
    """The in-memory products of one analysis (arrays kept; `RunResult` holds the JSON view)."""

    data: Spectrum | LineList
    baseline: Any  # BaselineResult | None (None for a line list)
    lines: Any  # LineTable
    assignment: Any  # AssignmentResult
    timing_ms: dict[str, float]
    constants: Any = None  # ConstantsResult
    intensities: Any = None  # IntensityResult | None
    checks: tuple[Any, ...] = ()  # Check
    verdict: str | None = None
    contours: tuple[Any, ...] = ()  # BandContour: bands the resolution cannot split into lines


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
        from processing.doublets import measure_blended_line

        def doublet(centre: float, separation: float, ratio: float) -> Any:
            return measure_blended_line(data, baseline, lines.typical_width_cm1, centre, separation, ratio)

    assignment = assign_lines(lines, first, last, assign_settings, library, doublet)
    contours = unresolved_bands(data, baseline, lines, assignment, library, settings.temperature_K)
    lap("assignment and fits")
    from processing.checks import CheckThresholds, run_checks, verdict_of
    from processing.line_intensities import analyse_intensities
    from processing.molecular_constants import molecular_constants

    thresholds = CheckThresholds.from_mapping(settings.checks)
    partial = Analysis(data, baseline, lines, assignment, timing, contours=contours)
    constants = molecular_constants(partial, library)
    intensities = analyse_intensities(partial, library, settings.temperature_K)
    lap("constants and intensities")
    partial = Analysis(data, baseline, lines, assignment, timing, constants, intensities, contours=contours)
    checks = run_checks(partial, library, intensities, settings.species, thresholds)
    lap("checks")
    return Analysis(data, baseline, lines, assignment, timing, constants, intensities, tuple(checks), verdict_of(checks), contours)


def unresolved_bands(data: Spectrum | LineList, baseline: Any, lines: Any, assignment: Any, library: Any, temperature_K: float) -> tuple[Any, ...]:
    """Library bands present only as unresolved P/R contours (see `processing.contour`). The
    instrument line shape is the one the lines showed, else the stated one, else a Happ-Genzel
    shape as wide as the lines found (said so in its source)."""
    if not isinstance(data, Spectrum):
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


def _line_records(analysis: Analysis) -> tuple[dict[str, Any], ...]:
    lines = analysis.lines
    assignment = analysis.assignment
    records = []
    widths = analysis.intensities.equivalent_width_cm1 if analysis.intensities is not None else None
    for i in range(lines.count):
        assigned = assignment.per_line[i]
        width = float(lines.width_cm1[i])
        area = float(lines.area_cm1[i])
        snr = float(lines.snr[i])
        records.append(
            {
                "position": {"value": float(lines.position_cm1[i]), "sigma": float(lines.position_sigma_cm1[i])},
                "height": float(lines.height[i]),
                "width": width if width == width else None,
                "area": area if area == area else None,
                "snr": snr if snr != float("inf") else None,
                "saturated": bool(lines.saturated[i]),
                "blended": bool(lines.blended[i]),
                "ringing": bool(lines.ringing[i]),
                "few_points": bool(lines.few_points[i]),
                "equivalent_width": float(widths[i]) if widths is not None and widths[i] == widths[i] else None,
                "assigned": assigned.to_dict() if assigned else None,
                "likely_cause": assignment.likely_cause[i],
            }
        )
    return tuple(records)


def _band_record(fit: Any, constants: Any) -> dict[str, Any]:
    """A band fit's JSON with its parameters against the reference for its model."""
    record = fit.to_dict()
    reference = constants.band((fit.isotopologue, fit.v_upper, fit.v_lower)) if constants is not None else None
    record["reference"] = reference.to_dict() if reference is not None else {}
    return record


def result_from_analysis(source: str, analysis: Analysis) -> RunResult:
    """The JSON-ready RunResult of an analysis."""
    data = analysis.data
    extra: dict[str, Any] = {
        "species_found": list(analysis.assignment.species_found),
        "notes": list(analysis.assignment.notes),
        "band_shifts_cm1": analysis.assignment.band_shifts_cm1,
        "timing_ms": {k: round(v, 3) for k, v in analysis.timing_ms.items()},
    }
    if analysis.baseline is not None:
        extra["baseline"] = analysis.baseline.to_dict()
    if analysis.constants is not None:
        extra["mass_reduced"] = [m.to_dict() for m in analysis.constants.mass_reduced]
        extra["notes"] = extra["notes"] + list(analysis.constants.notes)
    if analysis.intensities is not None:
        extra["intensities"] = analysis.intensities.to_dict()
    extra["contours"] = [contour.to_dict() for contour in analysis.contours]
    return RunResult(
        file=source,
        status="processed",
        sha256=data.meta.sha256,
        spectrum=SpectrumSummary.of(data),
        lines=_line_records(analysis),
        bands=tuple(_band_record(fit, analysis.constants) for fit in analysis.assignment.bands),
        constants=tuple(c.to_dict() for c in analysis.constants.per_isotopologue) if analysis.constants else (),
        checks=tuple(c.to_dict() for c in analysis.checks),
        verdict=analysis.verdict,
        extra=extra,
    )


def process_file(path: str | Path, settings: ProcessSettings | None = None) -> RunResult:
    """Read and analyse one file; a file problem becomes an "unreadable" result, not an error."""
    settings = settings or ProcessSettings()
    source = str(path)
    try:
        raw = load_bytes(source, settings.max_bytes, ReadPolicy.from_dict(settings.read_policy))
    except SpectrumFileError as error:
        return RunResult(file=source, status="unreadable", error=str(error))
    try:
        data = parse_bytes(raw, source)
    except SpectrumFileError as error:
        # The bytes were read: their hash lets a ledger recognise the same bad file again.
        digest = hashlib.sha256(raw).hexdigest()
        return RunResult(file=source, status="unreadable", sha256=digest, error=str(error))
    del raw  # a text export is several times the size of its arrays: not kept through the analysis
    return result_from_analysis(source, analyse(data, settings))
