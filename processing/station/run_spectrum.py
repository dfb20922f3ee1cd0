"""A recorded run's spectrum, read again for a plot or a figure: only the version the run
analysed.

Re-read with the station's limits: only a processed run's file, only a regular file and never
one in the data folder, through the same bounded readers (a few bytes cannot make bandwatch
allocate gigabytes); and only the version the run analysed (its sha256): a file rewritten since
is said so, never drawn under the old version's markers.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from processing.errors import SpectrumFileError
from processing.regular_files import ReadPolicy
from processing.safe_text import safe_text
from processing.station.ledger import RunRecord


@dataclass(frozen=True)
class RunSpectrum:
    """The arrays of a run's file (ascending cm-1, decadic absorbance), or why there are none."""

    x: np.ndarray | None
    y: np.ndarray | None
    problem: str | None = None


def file_changed_text(run: RunRecord, now: str | None) -> str:
    """What to say when a run's file no longer holds the version that was analysed."""
    return safe_text(
        f"{run.name} has changed since run {run.run_id} analysed it (sha256 {str(now)[:12]}… now, "
        f"{str(run.sha256)[:12]}… then): not drawn with that run's markers; redo the run (r) or wait "
        "for the station to record the new version"
    )


def read_run_spectrum(run: RunRecord, data_dir: str | Path) -> RunSpectrum:
    """The spectrum `run` analysed, read-only; a problem in words when it cannot be had."""
    from processing.readers import read_any
    from processing.spectrum import Spectrum

    if run.status != "processed":
        return RunSpectrum(None, None, safe_text(run.error or f"{run.status}: nothing to draw"))
    policy = ReadPolicy(forbidden=(str(Path(data_dir).resolve()),))
    try:
        data = read_any(run.path, policy=policy)
    except SpectrumFileError as problem:
        return RunSpectrum(None, None, str(problem))
    except MemoryError:
        return RunSpectrum(None, None, f"{safe_text(Path(run.path).name)} is too large to draw here")
    if run.sha256 is not None and data.meta.sha256 != run.sha256:
        return RunSpectrum(None, None, file_changed_text(run, data.meta.sha256))
    if not isinstance(data, Spectrum):
        return RunSpectrum(None, None, f"{safe_text(Path(run.path).name)} is a line list: no spectrum to draw")
    return RunSpectrum(data.wavenumber_cm1, data.absorbance)
