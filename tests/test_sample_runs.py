"""The committed demo runs are exactly what the scenario regenerates, and they read back."""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from processing.sample_scenario import demo_runs, write_sample_runs

SAMPLE_RUNS = Path(__file__).resolve().parent.parent / "sample_runs"


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_regenerated_sample_runs_match_the_committed_bytes(tmp_path: Path) -> None:
    written = write_sample_runs(tmp_path)
    assert len(written) == 2 * len(demo_runs())
    for path in written:
        committed = SAMPLE_RUNS / path.name
        assert committed.exists(), f"{path.name} is not committed; regenerate sample_runs/"
        assert _sha256(path) == _sha256(committed), (
            f"{path.name} differs from a fresh copy; run `bandwatch simulate --sample-runs sample_runs/`"
        )


def test_sample_runs_are_small_and_cover_every_format() -> None:
    total = sum(path.stat().st_size for path in SAMPLE_RUNS.iterdir() if path.is_file())
    assert total < 10_000_000
    formats = {run.file_format for run in demo_runs()}
    assert {"jcamp-dif", "jcamp-affn", "csv", "csv-export-quirks"} <= formats


@pytest.mark.parametrize("run", demo_runs(), ids=lambda run: run.name)
def test_each_sample_run_reads_back_to_its_truth(run) -> None:  # type: ignore[no-untyped-def]
    from processing.readers.registry import read_any

    from processing.spectrum import LineList

    spectrum = read_any(SAMPLE_RUNS / run.filename)
    truth = json.loads((SAMPLE_RUNS / f"{run.name}.truth.json").read_text(encoding="utf-8"))
    assert spectrum.points == truth["points"]
    if isinstance(spectrum, LineList):
        # Every picked peak lies on a drawn line within 0.1 cm-1: the weakest picks stand 10
        # noise sigma high on a 0.45 cm-1 wide ILS, so noise moves them by ~0.45/10 cm-1 (x2
        # margin); lines are >= 1.9 cm-1 apart, so a wrong match is impossible.
        drawn = np.array([line["position_cm1"] for line in truth["lines"]])
        misses = [p for p in spectrum.position_cm1 if np.min(np.abs(drawn - p)) > 0.1]
        assert spectrum.points > 30 and not misses
        return
    spacing = truth["output_spacing_cm1"]
    instrument = truth["settings"]["instrument"]
    # x within 0.005 cm-1 (the export-quirk file rounds x to 2 decimals on a 0.125 grid)
    assert spectrum.first_cm1 == pytest.approx(instrument["first_cm1"], abs=spacing + 0.005)
    assert spectrum.last_cm1 == pytest.approx(instrument["last_cm1"], abs=spacing + 0.005)
    assert np.median(np.diff(spectrum.wavenumber_cm1)) == pytest.approx(spacing, abs=0.005)
    # The empty cell carries the stated 0.5 absorbance offset (common practice in exports).
    if not truth["settings"]["gases"] and not truth["settings"]["interferents"]:
        assert float(np.median(spectrum.absorbance)) == pytest.approx(instrument["baseline_offset"], abs=0.01)
    else:
        strongest = max(truth["lines"], key=lambda line: line["integrated_absorbance_cm1"])
        x = spectrum.wavenumber_cm1
        near = np.abs(x - strongest["position_cm1"]) < 2 * truth["ils_fwhm_cm1"]
        # The strongest line shows up as a clear absorption feature (>= 50 noise sigma at SNR 2000).
        assert spectrum.absorbance[near].max() - np.median(spectrum.absorbance) > 0.01
