"""Reasons at a glance: a run's verdict with its one or two main reasons, checks not assessed
said as such; a redo's request in words; numbers rounded in summary.md."""
from __future__ import annotations

import math
from pathlib import Path

import pytest

from processing.pipeline import ProcessSettings, process_file
from processing.result_text import main_reasons, reasons_line, redo_description, summary_markdown
from processing.results import Check, RunResult

SAMPLES = Path(__file__).resolve().parents[1] / "sample_runs"


@pytest.fixture(scope="module")
def after_service() -> RunResult:
    return process_file(str(SAMPLES / "1500_hcl_after_service.jdx"), ProcessSettings())


def test_the_main_reasons_name_the_calibration_shift_and_the_fringes(after_service: RunResult) -> None:
    # The simulated run's truth (sample_runs/1500_hcl_after_service.truth.json): every line
    # 0.24 cm-1 high, and fringes of 0.01 in transmittance, i.e. 0.01 / ln 10 = 0.0043 in
    # decadic absorbance (A = -log10 T; small-signal, common practice).
    fringe_absorbance = 0.01 / math.log(10)
    assert after_service.verdict == "warn"
    reasons = main_reasons(after_service)
    assert reasons[0] == "calibration +0.24 cm-1"
    assert reasons[1] == f"fringes {fringe_absorbance:.3f} A"
    # the temperature could not be measured (optically thick lines): said, not hidden
    assert reasons[2] == "n/a: temperature"
    assert reasons_line(reasons) == f"calibration +0.24 cm-1 · fringes {fringe_absorbance:.3f} A · n/a: temperature"


def test_fail_comes_before_warn_and_more_than_two_are_counted() -> None:
    checks = (
        Check("baseline", "warn", "tilt +0.300 A per 1000 cm-1", 0.0),
        Check("signal_to_noise", "fail", "no absorption line above 5x the noise (noise sigma 0.001 A)", 0.0),
        Check("saturation", "fail", "27 of 52 assigned lines saturated or flat-topped (peak absorbance 6.00)", 27.0),
        Check("interferents", "warn", "62 unassigned lines in the CO2 region: check the purge", 62.0),
        Check("temperature", "not_assessed", "not assessed: too few clean lines", None),
        Check("fit_rms", "pass", "fine", 0.01),
    )
    result = RunResult(file="x.jdx", status="processed", checks=checks, verdict="fail")
    assert main_reasons(result) == ("no line above noise", "27 lines saturated", "+2 more", "n/a: temperature")


def test_a_pass_with_nothing_unassessed_has_no_reasons() -> None:
    result = RunResult(file="x.jdx", status="processed", checks=(Check("fit_rms", "pass", "fine", 0.01),), verdict="pass")
    assert main_reasons(result) == ()
    assert main_reasons(None) == ()


def test_a_redo_says_what_was_changed() -> None:
    settings = {"species": ["H35Cl", "H37Cl"], "j_offsets": [["H35Cl", 1, 0, "P", 1]],
                "excluded_positions_cm1": [2906.898, 2925.5]}
    assert redo_description(settings) == (
        "species H35Cl, H37Cl; H35Cl 1-0 P branch J+1; 2 lines excluded by the operator (2906.8980, 2925.5000 cm-1)"
    )
    assert redo_description({"species": [], "j_offsets": [], "excluded_positions_cm1": []}) == "species detected"
    assert redo_description(None) == ""


def test_summary_md_rounds_its_numbers(after_service: RunResult) -> None:
    text = summary_markdown(after_service, 7, 1)
    assert "- reasons: calibration +0.24 cm-1" in text
    band_rows = [line for line in text.splitlines() if line.startswith("| H35Cl")]
    rms = band_rows[0].rstrip(" |").rsplit("|", 1)[-1].strip()
    assert len(rms.replace("0.", "").lstrip("0")) <= 4, rms  # four significant digits at most, not repr()
    assert "4401 points, 2600.0000 to 3150.0000 cm-1" in text  # the truth file's grid
