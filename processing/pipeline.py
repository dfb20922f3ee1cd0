"""file -> RunResult: read, then (when the analysis stages exist) lines, assignment, fits, checks.

Pure: takes settings, returns data, never prints. A file that cannot be read gives a RunResult
with status "unreadable" and the one-line reason; it never raises for a bad file.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from processing.errors import SpectrumFileError
from processing.readers import DEFAULT_MAX_BYTES, read_any
from processing.spectrum import LineList, Spectrum

SCHEMA_VERSION = 1


@dataclass(frozen=True)
class ProcessSettings:
    """What the analysis needs to know beyond the file itself."""

    species: tuple[str, ...] = ()  # molecule or isotopologue labels expected; () = detect
    max_bytes: int = DEFAULT_MAX_BYTES


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


def process_file(path: str | Path, settings: ProcessSettings | None = None) -> RunResult:
    """Read and analyse one file; a file problem becomes an "unreadable" result, not an error."""
    settings = settings or ProcessSettings()
    source = str(path)
    try:
        data = read_any(source, settings.max_bytes)
    except SpectrumFileError as error:
        return RunResult(file=source, status="unreadable", error=str(error))
    return RunResult(
        file=source,
        status="processed",
        sha256=data.meta.sha256,
        spectrum=SpectrumSummary.of(data),
    )
