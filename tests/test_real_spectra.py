"""The two measured teaching-lab exports in tests/data/realdata (HCl and DCl 1-0 bands,
0.125 cm-1 grid, absorbance to 4 decimals; see the README there for their origin, licence and
what a careful reading gives). Reference numbers below are from that README unless said."""
from __future__ import annotations

from pathlib import Path

import pytest

from processing.pipeline import ProcessSettings, process_file

DATA = Path(__file__).resolve().parent / "data" / "realdata"


def _band(result, label: str) -> dict:
    """The band's public JSON object."""
    return next(b.to_dict() for b in result.bands if (b.isotopologue, b.v_upper, b.v_lower) == (label, 1, 0))


@pytest.fixture(scope="module")
def hcl():
    result = process_file(DATA / "hcl_teaching_lab.csv", ProcessSettings(species=("HCl",)))
    assert result.status == "processed", result.error
    return result


@pytest.fixture(scope="module")
def dcl():
    result = process_file(DATA / "dcl_teaching_lab.csv", ProcessSettings(species=("DCl",)))
    assert result.status == "processed", result.error
    return result


def test_hcl_band_constants(hcl) -> None:
    h35, h37 = _band(hcl, "H35Cl"), _band(hcl, "H37Cl")
    # origin within a few hundredths of 2885.98 cm-1 (Huber & Herzberg via NIST WebBook; the
    # README: this instrument is well calibrated)
    assert h35["origin"]["value"] == pytest.approx(2885.98, abs=0.05)
    # B'' within 0.05% of 10.4403 cm-1
    assert h35["B_lower"]["value"] == pytest.approx(10.4403, rel=5e-4)
    # H35Cl - H37Cl origin gap about 2.106 cm-1 (also mass scaling, calc)
    assert h35["origin"]["value"] - h37["origin"]["value"] == pytest.approx(2.106, abs=0.01)


def test_dcl_band_constants(dcl) -> None:
    d35, d37 = _band(dcl, "D35Cl"), _band(dcl, "D37Cl")
    # D35Cl origin near 2091.0 cm-1 (mass scaling of the full H35Cl Dunham set gives 2091.03)
    assert d35["origin"]["value"] == pytest.approx(2091.03, abs=0.1)
    # D35Cl - D37Cl gap about 3.00 cm-1
    assert d35["origin"]["value"] - d37["origin"]["value"] == pytest.approx(3.00, abs=0.02)


@pytest.mark.parametrize("name", ["hcl", "dcl"])
def test_noise_is_measured_and_lines_are_band_lines(name: str, request) -> None:
    result = request.getfixturevalue(name)
    baseline = result.baseline
    assert baseline.quantization_step == pytest.approx(1e-4)  # exported to 4 decimals
    assert baseline.noise_measurable
    # the rounding floor (1e-4/sqrt(12) = 2.9e-5) is far below the measured noise: it is noise
    assert baseline.noise_sigma > 5 * 1e-4 / 12**0.5
    assert baseline.noise_correlation_points > 1.5  # apodized and zero-filled: correlated
    assigned = sum(1 for line in result.lines if line.assigned)
    # ripple and noise no longer become "lines": at most twice the assigned lines are found
    assert len(result.lines) <= 2 * assigned, (len(result.lines), assigned)
    assert assigned >= 30
