"""The bundled demo runs: one invented day at the FTIR of a fictional teaching lab.

The Saltmarsh Row teaching laboratory (fictional) fills gas cells through the morning and
saves one spectrum per cell. Each run below is a `DemoRun`: simulator settings, the file format
and y kind it is exported in, and a one-line story. `write_sample_runs(directory)` writes every
spectrum plus a `NAME.truth.json` sidecar; it is deterministic (same bytes on every call), so a
test can compare a fresh copy with the committed files.

    bandwatch simulate --sample-runs sample_runs/
"""
from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from processing.instrument import Fringes, Instrument
from processing.interferents import DEFAULT_INTERFERENTS, Interferent
from processing.simulate import (
    Cell,
    SampleGas,
    SimulationResult,
    SimulationSettings,
    simulate,
    write_spectrum,
)
from processing.spectrum import LineList, Spectrum

LAB = "Saltmarsh Row teaching laboratory (fictional)"
# Decimal places kept in written y values: far below the noise (sigma >= 1e-4 in T) and it
# keeps the files small.
Y_DECIMALS = 6


@dataclass(frozen=True)
class DemoRun:
    """One demo file: its name (without extension), how it is written, and its settings."""

    name: str
    story: str
    settings: SimulationSettings
    file_format: str  # jcamp-dif, jcamp-affn, csv, csv-export-quirks, jcamp-peaks (line list)
    y: str = "absorbance"  # transmittance, absorbance, percent
    decimals: int = Y_DECIMALS  # y values are rounded to this many places when written

    @property
    def extension(self) -> str:
        return ".csv" if self.file_format.startswith("csv") else ".jdx"

    @property
    def filename(self) -> str:
        return self.name + self.extension


def _instrument(first: float, last: float, **changes: object) -> Instrument:
    """The lab's usual setup: 0.5 cm-1, Happ-Genzel, zero filling 2, SNR 2000."""
    base = Instrument(resolution_cm1=0.5, apodization="happ-genzel", zero_fill=2, first_cm1=first,
                      last_cm1=last, snr=2000.0, seed=0)
    return replace(base, **changes)


def demo_runs() -> tuple[DemoRun, ...]:
    """The day's runs, in the order they were measured."""
    hcl_1_0 = (SampleGas("HCl", 0.01),)
    return (
        DemoRun(
            "0905_hcl_cell", "HCl cell, natural chlorine, 1-0 band; the day's reference run.",
            SimulationSettings(hcl_1_0, Cell(10.0), _instrument(2600.0, 3150.0, seed=905),
                               title=f"{LAB}: HCl 10 cm cell, 7.6 torr"),
            "jcamp-dif",
        ),
        DemoRun(
            "0906_hcl_cell_peaks", "Peak table the instrument software picked from the 0905 "
            "HCl spectrum (maxima above 10 noise sigma, parabola-refined).",
            SimulationSettings(hcl_1_0, Cell(10.0), _instrument(2600.0, 3150.0, seed=905),
                               title=f"{LAB}: HCl 10 cm cell, 7.6 torr, peak table"),
            "jcamp-peaks",
        ),
        DemoRun(
            "0930_dcl_exchanged", "DCl cell that has partly exchanged back to HCl on wet glass: "
            "DCl 1-0 band plus weaker HCl lines.",
            SimulationSettings((SampleGas("DCl", 0.02), SampleGas("HCl", 0.003)), Cell(10.0),
                               _instrument(1850.0, 3150.0, seed=930),
                               title=f"{LAB}: DCl 10 cm cell (some HCl)"),
            "jcamp-affn", "transmittance",
        ),
        DemoRun(
            "1010_hcl_overtone_10m", "HCl 2-0 overtone in the 10 m multipass cell.",
            SimulationSettings((SampleGas("HCl", 0.04, ((2, 0),)),), Cell(1000.0),
                               _instrument(5450.0, 5850.0, seed=1010),
                               title=f"{LAB}: HCl overtone, 10 m path"),
            "csv",
        ),
        DemoRun(
            "1040_hcl_saturated", "HCl cell filled to half an atmosphere: the strong lines go "
            "black (transmittance at the noise floor over several points: flat, noisy tops in "
            "absorbance; H35Cl/H37Cl peak ratio far below 3).",
            SimulationSettings((SampleGas("HCl", 0.5),), Cell(10.0),
                               _instrument(2600.0, 3150.0, seed=1040),
                               title=f"{LAB}: HCl 10 cm cell, 380 torr"),
            "jcamp-dif", "transmittance",
        ),
        DemoRun(
            "1115_dcl_poor_purge", "DCl cell measured right after the bench lid was opened: "
            "CO2-like band near 2349 cm-1 and water-like lines below 2000 cm-1 (invented "
            "interferent models).",
            SimulationSettings((SampleGas("DCl", 0.02),), Cell(10.0),
                               _instrument(1350.0, 2450.0, seed=1115),
                               interferents=(DEFAULT_INTERFERENTS["co2"], DEFAULT_INTERFERENTS["water"]),
                               title=f"{LAB}: DCl cell, bench not purged"),
            "jcamp-affn",
        ),
        DemoRun(
            "1150_empty_cell_export", "Empty cell, exported as text from the instrument PC: "
            "byte-order mark, a free-text first line, trailing commas, descending x, and the "
            "usual 0.5 absorbance offset.",
            SimulationSettings((), Cell(10.0),
                               _instrument(1800.0, 3200.0, baseline_offset=0.5, snr=1500.0, seed=1150),
                               title=f"{LAB}: empty cell"),
            "csv-export-quirks",
        ),
        DemoRun(
            "1330_co_cell", "CO cell, 1-0 band at 1 cm-1 (lines 3.8 cm-1 apart, resolved).",
            SimulationSettings((SampleGas("CO", 0.1),), Cell(10.0),
                               _instrument(2000.0, 2300.0, resolution_cm1=1.0, seed=1330),
                               title=f"{LAB}: CO 10 cm cell"),
            "jcamp-dif",
        ),
        DemoRun(
            "1410_hbr_cell", "HBr cell at 0.125 cm-1, Norton-Beer medium: H79Br/H81Br pairs "
            "0.4 cm-1 apart are resolved.",
            SimulationSettings((SampleGas("HBr", 0.02),), Cell(10.0),
                               _instrument(2350.0, 2750.0, resolution_cm1=0.125,
                                           apodization="norton-beer-medium", seed=1410),
                               title=f"{LAB}: HBr 10 cm cell"),
            "jcamp-dif",
        ),
        DemoRun(
            "1500_hcl_after_service", "HCl cell after the laser was serviced: every line sits "
            "0.24 cm-1 high (calibration shift) and the KBr windows add fringes.",
            SimulationSettings(hcl_1_0, Cell(10.0),
                               _instrument(2600.0, 3150.0, calibration_shift_cm1=0.24,
                                           fringes=Fringes(0.01, 0.82), seed=1500),
                               title=f"{LAB}: HCl 10 cm cell, after service"),
            "jcamp-dif",
        ),
        DemoRun(
            "1545_dcl_hcl_mix_export", "The afternoon group's DCl cell, which (as always) holds "
            "some HCl, at 0.25 cm-1 with zero fill 4, exported as text by the instrument PC: "
            "absorbance rounded to 4 decimals, a 0.02 background offset, and water-vapour-like "
            "residue lines of either sign (the background was taken with the bench warmer).",
            SimulationSettings((SampleGas("DCl", 0.02), SampleGas("HCl", 0.004)), Cell(10.0),
                               _instrument(1800.0, 3100.0, resolution_cm1=0.25, zero_fill=4,
                                           baseline_offset=0.02, snr=1500.0, seed=1545),
                               interferents=(Interferent("water", 3e-3, 20.0),
                                             Interferent("water", 3e-3, 20.0, temperature_K=306.0, in_background=True)),
                               title=f"{LAB}: DCl/HCl 10 cm cell, text export"),
            "csv", decimals=4,
        ),
        DemoRun(
            "1620_hcl_percent_export", "HCl cell measured before the laser warmed up: the "
            "wavenumber axis is stretched by 190 ppm (0.55 cm-1 at the band centre), exported "
            "as %T with 2 decimals.",
            SimulationSettings(hcl_1_0, Cell(10.0),
                               _instrument(2600.0, 3150.0, calibration_scale=1.0 + 190e-6, seed=1620),
                               title=f"{LAB}: HCl 10 cm cell, laser cold"),
            "csv", "percent", decimals=2,
        ),
        DemoRun(
            "1700_hcl_archive_trace", "An HCl spectrum from the lab's paper archive, digitised "
            "from the printed chart: no measurable noise, absorbance read to 3 decimals.",
            SimulationSettings(hcl_1_0, Cell(10.0),
                               _instrument(2600.0, 3150.0, snr=None, seed=1700),
                               title=f"{LAB}: HCl 10 cm cell, digitised archive chart"),
            "csv", decimals=3,
        ),
    )


def export_quirks_csv(spectrum: Spectrum, title: str) -> bytes:
    """Text as some instrument PCs export it: UTF-8 BOM, a free-text first line, a `cm-1,A`
    header, CRLF line ends, descending x rounded to 2 decimals (whole numbers without a
    decimal point), 5-decimal absorbance, a trailing comma on every row."""
    lines = [f"{title} - exported spectrum", "cm-1,A,"]
    for x, a in zip(spectrum.wavenumber_cm1[::-1], spectrum.absorbance[::-1]):
        x_text = f"{x:.2f}".rstrip("0").rstrip(".")
        lines.append(f"{x_text},{a:.5f},")
    return b"\xef\xbb\xbf" + ("\r\n".join(lines) + "\r\n").encode("utf-8")


def picked_peaks(result: SimulationResult, noise_multiple: float = 10.0) -> LineList:
    """An instrument-style peak pick: absorbance maxima above `noise_multiple` x the noise
    (in absorbance), each refined by a parabola through its top three points; positions to
    0.001 cm-1 and heights to 0.0001."""
    from scipy.signal import find_peaks

    spectrum = result.spectrum
    x, a = spectrum.wavenumber_cm1, spectrum.absorbance
    sigma = result.truth.noise_sigma_transmittance or 1e-4
    threshold = noise_multiple * sigma / math.log(10.0)
    peaks, _ = find_peaks(a, height=threshold)
    peaks = peaks[(peaks > 0) & (peaks < a.size - 1)]
    left, top, right = a[peaks - 1], a[peaks], a[peaks + 1]
    curvature = left - 2.0 * top + right
    offset = np.where(curvature < 0, 0.5 * (left - right) / np.where(curvature < 0, curvature, -1.0), 0.0)
    position = np.round(x[peaks] + offset * (x[1] - x[0]), 3)
    height = np.round(top - 0.25 * (left - right) * offset, 4)
    meta = replace(spectrum.meta, notes=spectrum.meta.notes + ("peak pick above 10 noise sigma",))
    return LineList(position, height, "absorbance", meta)


def truth_sidecar(run: DemoRun, result: SimulationResult, points: int) -> str:
    """The sidecar JSON: the story, the file (`points` written), and the full truth record."""
    data = {
        "file": run.filename,
        "lab": LAB,
        "story": run.story,
        "format": run.file_format,
        "y": run.y,
        "decimals": run.decimals,
        "points": points,
        **result.truth.to_dict(),
    }
    return json.dumps(data, indent=1) + "\n"


def write_run(directory: Path, run: DemoRun) -> list[Path]:
    """Simulate one run and write its spectrum and sidecar; returns the paths written."""
    result = simulate(run.settings)
    target = directory / run.filename
    spectrum = result.spectrum
    points = spectrum.points
    if run.file_format == "csv-export-quirks":
        target.write_bytes(export_quirks_csv(spectrum, run.settings.title))
    elif run.file_format == "jcamp-peaks":
        from processing.readers.jcamp_write import write_peak_table

        peaks = picked_peaks(result)
        points = peaks.points
        write_peak_table(str(target), peaks, title=run.settings.title)
    else:
        write_spectrum(str(target), result, run.file_format, run.y, run.decimals)
    sidecar = directory / f"{run.name}.truth.json"
    sidecar.write_text(truth_sidecar(run, result, points), encoding="utf-8")
    return [target, sidecar]


def write_sample_runs(directory: str | Path) -> list[Path]:
    """Write every demo run into `directory` (created if needed); returns the paths."""
    target = Path(directory)
    target.mkdir(parents=True, exist_ok=True)
    written: list[Path] = []
    for run in demo_runs():
        written.extend(write_run(target, run))
    return written


def digests(paths: list[Path]) -> dict[str, str]:
    """sha256 of each file by name."""
    return {path.name: hashlib.sha256(path.read_bytes()).hexdigest() for path in paths}
