"""JCAMP-DX writers: read(write(s)) reproduces the spectrum within the stated tolerances."""
from __future__ import annotations

import io

import numpy as np
import pytest

from processing.readers import jcamp
from processing.readers.jcamp_write import DIF_FULL_SCALE, write_jcamp, write_peak_table
from processing.spectrum import FileMetadata, LineList, Spectrum


def synthetic(points: int = 2001, seed: int = 7) -> Spectrum:
    """A seeded band-like absorbance spectrum on an even 0.125 cm-1 grid (common practice)."""
    rng = np.random.default_rng(seed)
    x = 2600.0 + 0.125 * np.arange(points)
    y = 0.02 + 0.8 * np.exp(-(((x - 2700.0) / 0.9) ** 2)) + rng.normal(0.0, 2e-3, points)
    meta = FileMetadata(title="cell 3", resolution_cm1=0.5, apodization="boxcar", acquired="2025-01-02T03:04:05")
    return Spectrum.from_y(x, y, "absorbance", meta)


def round_trip(spectrum: Spectrum, **options: object) -> tuple[Spectrum, str]:
    buffer = io.StringIO()
    write_jcamp(buffer, spectrum, **options)  # type: ignore[arg-type]
    text = buffer.getvalue()
    result = jcamp.parse(text.encode("ascii"), "round-trip.jdx")
    assert isinstance(result, Spectrum)
    return result, text


@pytest.mark.parametrize("descending", [False, True])
def test_affn_round_trip_within_13_digits(descending: bool) -> None:
    s = synthetic()
    back, text = round_trip(s, form="affn", descending=descending)
    # 13 significant digits: |error| <= 0.5e-12 of the value's leading digit, so <= 5e-13
    # relative in the worst case (leading digit 1) and usually 5e-14; assert the bound 5e-13
    np.testing.assert_allclose(back.absorbance, s.absorbance, rtol=5e-13, atol=0)
    assert np.max(np.abs(back.absorbance / s.absorbance - 1.0)) > 0  # digits really were cut
    # x is rebuilt as FIRSTX + (LASTX - FIRSTX) i/(n-1): a few ulp from the input grid
    np.testing.assert_allclose(back.wavenumber_cm1, s.wavenumber_cm1, rtol=1e-12, atol=0)
    assert "##YUNITS=ABSORBANCE" in text and "##XUNITS=1/CM" in text
    assert back.meta.format == "JCAMP-DX 5.01 XYDATA AFFN"
    assert all(len(line) <= 80 for line in text.splitlines())


def test_affn_repr_round_trip_is_exact() -> None:
    s = synthetic()
    back, _ = round_trip(s, form="affn", digits=None)
    # repr() writes the shortest digits that identify the float; numpy's parser rounds correctly
    np.testing.assert_array_equal(back.absorbance, s.absorbance)


@pytest.mark.parametrize("descending", [False, True])
def test_dif_round_trip_within_quantisation(descending: bool) -> None:
    s = synthetic()
    back, text = round_trip(s, form="dif", descending=descending)
    y_factor = float(np.max(np.abs(s.absorbance))) / DIF_FULL_SCALE
    # integer quantisation: |error| <= YFACTOR/2 (= 5e-8 of full scale), plus one float product
    bound = 0.5 * y_factor * (1 + 1e-9)
    assert np.max(np.abs(back.absorbance - s.absorbance)) <= bound
    assert bound < 1e-7  # full scale here is ~0.8 absorbance
    np.testing.assert_allclose(back.wavenumber_cm1, s.wavenumber_cm1, rtol=1e-12, atol=0)
    assert back.meta.format.startswith("JCAMP-DX 5.01 XYDATA DIF")
    assert any("Y-check" in note for note in back.meta.notes)
    assert all(len(line) <= 80 for line in text.splitlines())


def test_dif_round_trip_exact_for_integers_and_uses_dup() -> None:
    x = 1000.0 + np.arange(300.0)
    y = np.concatenate([np.zeros(100), np.arange(100.0), np.full(100, 99.0)])  # flat runs -> DUP
    s = Spectrum.from_y(x, y, "absorbance")
    back, text = round_trip(s, form="dif")
    np.testing.assert_array_equal(back.absorbance, y)
    assert "##YFACTOR=1.0" in text
    assert back.meta.format == "JCAMP-DX 5.01 XYDATA DIF DUP"


def test_metadata_survives_the_round_trip() -> None:
    back, _ = round_trip(synthetic(), form="dif", title="renamed")
    assert back.meta.title == "renamed"
    assert back.meta.resolution_cm1 == 0.5
    assert back.meta.apodization == "boxcar"
    assert back.meta.acquired == "2025-01-02T03:04:05"


@pytest.mark.parametrize("form", ["affn", "dif"])
def test_transmittance_round_trip(form: str) -> None:
    s = synthetic()
    back, text = round_trip(s, form=form, y_kind="transmittance")
    assert "##YUNITS=TRANSMITTANCE" in text and back.original_y_kind == "transmittance"
    if form == "affn":
        # A -> 10**-A -> -log10: a few ulp of relative error, so 1e-12 absolute suffices
        np.testing.assert_allclose(back.absorbance, s.absorbance, rtol=0, atol=1e-12)
    else:
        # T quantised to 1e-7 of its full scale (<= 1): dA = dT / (T ln 10) with T >= 10**-0.85
        t_min = float(np.min(s.transmittance()))
        bound = 0.5e-7 / (t_min * np.log(10.0)) * 1.01
        assert np.max(np.abs(back.absorbance - s.absorbance)) <= bound


def test_percent_transmittance_round_trip() -> None:
    s = synthetic()
    back, text = round_trip(s, form="affn", y_kind="percent_transmittance")
    assert "##YUNITS=%T" in text and back.original_y_kind == "percent_transmittance"
    np.testing.assert_allclose(back.absorbance, s.absorbance, rtol=0, atol=1e-12)


def test_uneven_axis_goes_to_xypoints() -> None:
    x = np.array([1000.0, 1000.5, 1001.5, 1003.0])
    s = Spectrum.from_y(x, np.array([0.1, 0.2, 0.3, 0.4]), "absorbance")
    back, text = round_trip(s, form="dif")
    assert "##XYPOINTS=(XY..XY)" in text
    np.testing.assert_array_equal(back.wavenumber_cm1, x)
    np.testing.assert_array_equal(back.absorbance, s.absorbance)


def test_peak_table_round_trip(tmp_path) -> None:
    lines = LineList(np.array([2843.625, 2906.25, 2925.875]), np.array([0.125, 0.5, 0.25]), "absorbance")
    path = tmp_path / "peaks.jdx"
    write_peak_table(path, lines, title="HCl lines")
    back = jcamp.parse(path.read_bytes(), str(path))
    assert isinstance(back, LineList)
    np.testing.assert_array_equal(back.position_cm1, lines.position_cm1)
    np.testing.assert_array_equal(back.intensity, lines.intensity)
    assert back.meta.title == "HCl lines"


def test_write_to_path_and_binary_stream(tmp_path) -> None:
    s = synthetic(50)
    path = tmp_path / "s.jdx"
    write_jcamp(path, s)
    binary = io.BytesIO()
    write_jcamp(binary, s)
    assert path.read_bytes() == binary.getvalue()
    with pytest.raises(ValueError):
        write_jcamp(io.StringIO(), s, form="sqz")  # type: ignore[arg-type]


def test_original_kind_is_written_back() -> None:
    # a %T spectrum written with y_kind="original" is %T again: %T = 100 * 10**-A
    s = Spectrum.from_y(np.array([1000.0, 1001.0, 1002.0]), np.array([100.0, 10.0, 1.0]), "percent_transmittance")
    back, text = round_trip(s, form="affn", y_kind="original")
    assert "##YUNITS=%T" in text and back.original_y_kind == "percent_transmittance"
    # A = 0, 1, 2 through 13 significant digits of %T: 5e-13 relative of T -> ~2e-13 in A
    np.testing.assert_allclose(back.absorbance, [0.0, 1.0, 2.0], rtol=0, atol=1e-12)
