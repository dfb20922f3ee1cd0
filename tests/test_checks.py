"""Run checks and verdicts on the demo runs (invented scenario, bandwatch's own simulator)
and on threshold settings."""
from __future__ import annotations

from pathlib import Path

import pytest

from processing.checks import CheckThresholds, verdict_of, Check
from processing.errors import ConfigError
from processing.pipeline import ProcessSettings, process_file

SAMPLES = Path(__file__).resolve().parents[1] / "sample_runs"


def _checks(name: str, **settings) -> tuple[str, dict[str, dict]]:
    result = process_file(SAMPLES / name, ProcessSettings(**settings))
    assert result.status == "processed", result.error
    return result.verdict, {c.name: c.to_dict() for c in result.checks}


def test_clean_hcl_run_passes() -> None:
    verdict, checks = _checks("0905_hcl_cell.jdx")
    assert verdict == "pass", {k: v["detail"] for k, v in checks.items() if v["status"] != "pass"}
    assert set(checks) == {"y_axis", "signal_to_noise", "saturation", "assigned_lines", "fit_rms", "calibration", "interferents", "isotopologues", "temperature", "baseline", "resolution"}


def test_saturated_run_fails_on_saturation() -> None:
    verdict, checks = _checks("1040_hcl_saturated.jdx")
    assert verdict == "fail"
    assert checks["saturation"]["status"] == "fail"
    assert "saturated" in checks["saturation"]["detail"]
    assert checks["saturation"]["value"] >= 10


def test_poorly_purged_run_warns_about_interferents() -> None:
    verdict, checks = _checks("1115_dcl_poor_purge.jdx")
    assert verdict != "pass"
    assert checks["interferents"]["status"] == "warn"
    assert "CO2" in checks["interferents"]["detail"] and "water" in checks["interferents"]["detail"]


def test_noise_only_run_fails_for_lack_of_lines() -> None:
    verdict, checks = _checks("1150_empty_cell_export.csv")
    assert verdict == "fail"
    assert checks["signal_to_noise"]["status"] == "fail"
    assert checks["assigned_lines"]["status"] == "fail"
    # the 0.5 absorbance offset of the empty cell is reported (common practice: |A| > 0.05)
    assert checks["baseline"]["status"] == "warn" and "+0.500" in checks["baseline"]["detail"]


def test_calibration_offset_after_service_is_measured() -> None:
    # The run was made with a +0.24 cm-1 wavenumber error (its sidecar says so).
    verdict, checks = _checks("1500_hcl_after_service.jdx")
    assert verdict == "warn"
    assert checks["calibration"]["status"] == "warn"
    assert checks["calibration"]["value"] == pytest.approx(0.24, abs=0.03)


def test_hd_exchange_is_reported_for_a_dcl_cell() -> None:
    verdict, checks = _checks("0930_dcl_exchanged.jdx", species=("DCl",))
    assert checks["isotopologues"]["status"] == "warn"
    assert "HCl" in checks["isotopologues"]["detail"] and "H/D" in checks["isotopologues"]["detail"]
    assert verdict == "warn"


def test_missing_expected_species_fails() -> None:
    verdict, checks = _checks("0905_hcl_cell.jdx", species=("CO",))
    assert checks["isotopologues"]["status"] == "fail"
    assert "expected CO not found" in checks["isotopologues"]["detail"]
    assert verdict == "fail"


def test_thresholds_come_from_the_settings() -> None:
    # Loosening the calibration tolerance to 0.3 cm-1 lets the serviced instrument pass it.
    verdict, checks = _checks("1500_hcl_after_service.jdx", thresholds=CheckThresholds.from_mapping({"calibration_pass_cm1": 0.3}))
    assert checks["calibration"]["status"] == "pass"


def test_bad_threshold_value_names_the_key() -> None:
    with pytest.raises(ConfigError, match="checks.snr_pass"):
        CheckThresholds.from_mapping({"snr_pass": "high"})
    with pytest.raises(ConfigError, match="checks.unrelated_key: not a check threshold"):
        CheckThresholds.from_mapping({"unrelated_key": 3})


def test_verdict_is_the_worst_check() -> None:
    checks = [Check("a", "pass", ""), Check("b", "warn", ""), Check("c", "pass", "")]
    assert verdict_of(checks) == "warn"
    assert verdict_of(checks + [Check("d", "fail", "")]) == "fail"
    assert verdict_of([]) == "pass"


def test_window_fringes_are_found_with_their_period() -> None:
    # The after-service run carries 1% transmittance fringes (0.0043 A) with a 0.82 cm-1 period
    # (a 4 mm KBr window: 1/(2 n t), common practice), as its sidecar says.
    _, checks = _checks("1500_hcl_after_service.jdx")
    assert checks["baseline"]["status"] == "warn"
    assert "period 0.82 cm-1" in checks["baseline"]["detail"]
    _, clean = _checks("0905_hcl_cell.jdx")
    assert clean["baseline"]["status"] == "pass"


def test_a_check_not_made_is_not_a_pass_and_does_not_set_the_verdict() -> None:
    made_and_not = [Check("a", "warn", ""), Check("b", "not_assessed", "not assessed: thick lines")]
    assert verdict_of(made_and_not) == "warn"
    assert verdict_of([Check("a", "pass", ""), Check("b", "not_assessed", "")]) == "pass"


def test_a_peak_table_says_which_checks_it_cannot_answer() -> None:
    # A line list carries no noise, baseline or line shape: those checks are not made.
    verdict, checks = _checks("0906_hcl_cell_peaks.jdx")
    for name in ("signal_to_noise", "saturation", "baseline"):
        assert checks[name]["status"] == "not_assessed", checks[name]
    assert verdict in ("pass", "warn", "fail")
