"""The Spectrum value: validation, ordering and y conversion to decadic absorbance."""
from __future__ import annotations

import math

import numpy as np
import pytest

from processing.spectrum import UNMEASURABLE_ABSORBANCE, LineList, Spectrum


def test_transmittance_converts_to_decadic_absorbance() -> None:
    # A = -log10(T): T = 0.1 -> 1, T = 0.5 -> 0.30103 (definition of decadic absorbance, common practice)
    s = Spectrum.from_y([1000.0, 1001.0, 1002.0], [1.0, 0.1, 0.5], "transmittance")
    np.testing.assert_allclose(s.absorbance, [0.0, 1.0, math.log10(2.0)], rtol=0, atol=1e-15)
    assert s.original_y_kind == "transmittance"
    assert "log10" in s.conversion


def test_percent_transmittance_is_divided_by_100_first() -> None:
    s = Spectrum.from_y([1000.0, 1001.0], [100.0, 1.0], "percent_transmittance")
    np.testing.assert_allclose(s.absorbance, [0.0, 2.0], atol=1e-15)


def test_zero_or_negative_transmittance_is_masked_not_infinite() -> None:
    s = Spectrum.from_y([1.0, 2.0, 3.0, 4.0], [0.5, 0.0, -0.01, 0.01], "transmittance")
    assert s.saturated.tolist() == [False, True, True, False]
    assert np.all(np.isfinite(s.absorbance))
    assert s.absorbance[1] == UNMEASURABLE_ABSORBANCE
    assert "2 points" in s.conversion


def test_descending_axis_is_reversed_and_noted() -> None:
    s = Spectrum.from_y([3.0, 2.0, 1.0], [0.3, 0.2, 0.1], "absorbance")
    assert s.wavenumber_cm1.tolist() == [1.0, 2.0, 3.0]
    assert s.absorbance.tolist() == [0.1, 0.2, 0.3]
    assert any("descending" in note for note in s.meta.notes)


@pytest.mark.parametrize(
    "x, y, problem",
    [
        ([1.0, 2.0, 2.0], [0.0, 0.0, 0.0], "repeats"),
        ([1.0, 3.0, 2.0], [0.0, 0.0, 0.0], "not monotonic"),
        ([1.0], [0.0], "at least 2"),
        ([1.0, 2.0], [0.0, float("nan")], "not finite"),
        ([1.0, float("inf")], [0.0, 0.0], "not finite"),
    ],
)
def test_bad_axes_are_refused(x: list[float], y: list[float], problem: str) -> None:
    with pytest.raises(ValueError, match=problem):
        Spectrum.from_y(x, y, "absorbance")


def test_spectrum_arrays_are_read_only() -> None:
    s = Spectrum.from_y([1.0, 2.0], [0.1, 0.2], "absorbance")
    with pytest.raises(ValueError):
        s.absorbance[0] = 5.0


def test_line_list_sorts_positions() -> None:
    lines = LineList([3.0, 1.0, 2.0], [30.0, 10.0, 20.0])
    assert lines.position_cm1.tolist() == [1.0, 2.0, 3.0]
    assert lines.intensity.tolist() == [10.0, 20.0, 30.0]


def test_with_meta_keeps_the_arrays_and_changes_only_the_metadata() -> None:
    from processing.spectrum import FileMetadata

    s = Spectrum.from_y([1.0, 2.0, 3.0], [0.5, 0.1, 0.2], "transmittance")
    t = s.with_meta(FileMetadata(title="renamed", sha256="ab"))
    assert t.meta.title == "renamed" and t.meta.sha256 == "ab"
    assert t.wavenumber_cm1 is s.wavenumber_cm1 and t.absorbance is s.absorbance
    assert t.original_y_kind == "transmittance" and t.conversion == s.conversion
    assert s.meta.title == ""
