"""The run result's one JSON codec: to_dict and from_dict are exact inverses (key order and
number types included) on every sample run, the measured teaching-lab spectra, an unreadable
file, and results as the ledger stores and returns them."""
from __future__ import annotations

import json
from pathlib import Path

import pytest

from processing.pipeline import process_file
from processing.results import ResultFormatError, RunResult, from_json, to_json
from processing.station import ledger

ROOT = Path(__file__).resolve().parents[1]
FILES = sorted(
    [p for p in (ROOT / "sample_runs").iterdir() if p.suffix in (".jdx", ".csv")]
    + list((ROOT / "tests" / "data" / "realdata").glob("*.csv"))
)


@pytest.fixture(scope="module")
def texts() -> dict[str, str]:
    return {path.name: to_json(process_file(path)) for path in FILES}


def test_there_are_sample_runs_to_read() -> None:
    assert len(FILES) >= 15


def test_every_sample_result_reads_back_to_the_same_bytes(texts: dict[str, str]) -> None:
    for name, text in texts.items():
        again = to_json(from_json(text))
        assert again == text, name


def test_decoded_results_are_the_analysis_own(texts: dict[str, str]) -> None:
    text = texts["0930_dcl_exchanged.jdx"]
    result = from_json(text)
    assert result.spectrum is not None and result.spectrum.points == json.loads(text)["spectrum"]["points"]
    assert {b.label for b in result.bands} >= {"D35Cl 1-0", "D37Cl 1-0", "H35Cl 1-0"}
    origin = result.band("D35Cl", 1, 0).reference["origin"]  # type: ignore[union-attr]
    assert origin.compared_reference == origin.reference and origin.handbook is not None
    assert result.intensities is not None and result.intensities.hydrogen_fractions[0].molecule_d == "DCl"
    calibration = next(c for c in result.checks if c.name == "calibration")
    assert calibration.fit is not None and calibration.value == calibration.fit.offset_cm1


def test_the_ledger_stores_the_same_bytes_and_returns_the_same_result(texts: dict[str, str], tmp_path: Path) -> None:
    conn = ledger.open_ledger(tmp_path)
    ids = {}
    for name, text in texts.items():
        result = from_json(text)
        ids[name] = ledger.record_run(conn, result.file, result.sha256, result.status, result=result, result_json=text).run_id
    for name, run_id in ids.items():
        stored = conn.execute("SELECT result_json FROM runs WHERE run_id = ?", (run_id,)).fetchone()[0]
        assert stored == texts[name]
        run = ledger.get_run(conn, run_id)
        assert run is not None and run.result is not None
        assert to_json(run.result) == texts[name], name
    conn.close()


def test_an_unreadable_result_has_no_analysis_part(tmp_path: Path) -> None:
    path = tmp_path / "empty.csv"
    path.write_text("")
    text = to_json(process_file(path))
    data = json.loads(text)
    assert data["status"] == "unreadable" and "species_found" not in data and data["spectrum"] is None
    assert to_json(from_json(text)) == text


def test_non_finite_values_are_null_with_their_place_and_stay_so(texts: dict[str, str]) -> None:
    import math
    from dataclasses import replace

    result = from_json(texts["0905_hcl_cell.jdx"])
    band = replace(result.bands[0], chi2_reduced=math.inf)
    text = to_json(replace(result, bands=(band,) + result.bands[1:]))
    data = json.loads(text)
    assert data["bands"][0]["chi2_reduced"] is None
    assert {"at": "bands[0].chi2_reduced", "was": "inf"} in data["non_finite"]
    assert to_json(from_json(text)) == text  # read back and written again: listed once


def test_a_result_not_of_the_public_shape_is_one_clear_error() -> None:
    with pytest.raises(ResultFormatError, match=r"bands\[0\]: no 'origin'"):
        RunResult.from_dict({"schema": 1, "file": "x", "status": "processed", "bands": [{"isotopologue": "H35Cl", "v_upper": 1,
                                                                                        "v_lower": 0, "n_lines": 3, "rms": 0.1}]})
    with pytest.raises(ResultFormatError, match="schema 2"):
        RunResult.from_dict({"schema": 2, "file": "x", "status": "processed"})
