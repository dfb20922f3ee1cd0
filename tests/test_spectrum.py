"""The Spectrum value: validation, ordering and y conversion to decadic absorbance."""
from __future__ import annotations

import math

import numpy as np
import pytest

from processing.spectrum import UNMEASURABLE_ABSORBANCE, LineList, Spectrum, reverse_in_place, to_absorbance


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


@pytest.mark.parametrize("kind", ["absorbance", "transmittance", "percent_transmittance"])
@pytest.mark.parametrize("with_saturated", [False, True])
@pytest.mark.parametrize("descending", [False, True])
def test_conversion_in_place_gives_the_doubles_of_the_copy(kind: str, with_saturated: bool, descending: bool) -> None:
    """A reader's own y converted where it lies: bit for bit the absorbance and mask that the
    copying conversion gives (same ufuncs on the same values), and, when every point is
    measurable, in the very array handed over (no second array of a million points). Values
    reversed first, as a descending file's are."""
    rng = np.random.default_rng(11)
    scale = {"absorbance": 1.0, "transmittance": 1.0, "percent_transmittance": 100.0}[kind]
    values = scale * rng.uniform(0.001, 1.2, 70_001)
    if with_saturated:
        values[[5, 6, 70_000]] = [0.0, -0.01 * scale, 0.0]
    if descending:
        values = values[::-1].copy()
    expected = to_absorbance(values, kind)
    mine = values.copy()
    got = to_absorbance(mine, kind, in_place=True)
    assert np.array_equal(got[0], expected[0]) and np.array_equal(got[1], expected[1]) and got[2] == expected[2]
    if kind == "absorbance" or not with_saturated:
        assert np.shares_memory(got[0], mine)


def test_conversion_in_place_copies_what_it_may_not_change() -> None:
    """A read-only or strided y is converted into a new array, the given one left alone."""
    values = np.linspace(0.1, 0.9, 11)
    values.setflags(write=False)
    assert not np.shares_memory(to_absorbance(values, "transmittance", in_place=True)[0], values)
    strided = np.linspace(0.1, 0.9, 22)[::2]
    before = strided.copy()
    to_absorbance(strided, "percent_transmittance", in_place=True)
    assert np.array_equal(strided, before)


@pytest.mark.parametrize("size", [0, 1, 2, 3, 65_535, 65_536, 131_073, 200_000])
def test_reverse_in_place_reverses_every_length(size: int) -> None:
    # block boundaries (65,536 points), odd and even lengths, a middle element left alone
    values = np.arange(size, dtype=np.float64)
    reverse_in_place(values)
    assert values.tolist() == list(range(size))[::-1]
    mask = np.arange(size) % 3 == 0
    expected = mask[::-1].copy()
    reverse_in_place(mask)
    assert np.array_equal(mask, expected)


def test_a_readers_checked_arrays_make_the_same_spectrum_and_anything_else_is_checked_in_full() -> None:
    """checked_spectrum skips the passes over every point only for arrays a reader handed over
    (read-only, one-dimensional, float64/bool, same length, ascending ends); arrays that are
    not (a writable array, here with a NaN) go through the full constructor and its refusal."""
    from processing.spectrum import FileMetadata, checked_spectrum, handed_over

    x = np.linspace(2800.0, 3000.0, 1001)
    y = 0.1 * np.sin(x)
    mask = np.zeros(x.size, dtype=bool)
    handed_over(x, y, mask)
    quick = checked_spectrum(x, y, mask, "absorbance", "none", FileMetadata())
    full = Spectrum(x, y, mask, "absorbance", "none", FileMetadata())
    for name in ("wavenumber_cm1", "absorbance", "saturated"):
        assert np.array_equal(getattr(quick, name), getattr(full, name))
    assert (quick.original_y_kind, quick.conversion, quick.meta) == (full.original_y_kind, full.conversion, full.meta)
    assert quick.spacing_cm1 == full.spacing_cm1 == pytest.approx(0.2, rel=1e-9)
    assert quick.wavenumber_cm1 is x  # taken as handed over, no copy
    bad = np.array([2800.0, np.nan, 3000.0])
    with pytest.raises(ValueError, match="finite"):
        checked_spectrum(bad, np.zeros(3), np.zeros(3, dtype=bool), "absorbance", "none", FileMetadata())
    descending = np.array([3000.0, 2900.0, 2800.0])
    handed_over(descending)
    zeros, flags = np.zeros(3), np.zeros(3, dtype=bool)
    handed_over(zeros, flags)
    with pytest.raises(ValueError, match="ascending"):
        checked_spectrum(descending, zeros, flags, "absorbance", "none", FileMetadata())


@pytest.mark.parametrize("points", [2, 3, 1000, 1001, 65_536])
def test_spacing_is_numpys_median_of_the_steps_bit_for_bit(points: int) -> None:
    # The reference is numpy.median of numpy.diff on the same axis: a rounded export's axis
    # (steps of a few distinct values), a computed one, and an irregular one.
    rng = np.random.default_rng(points)
    axes = (
        np.round(np.linspace(1850.0, 1850.0 + 0.019073 * (points - 1), points), 4),
        1850.0 + 0.019073486328125 * np.arange(points),
        np.cumsum(rng.uniform(0.01, 0.03, points)) + 1850.0,
    )
    for x in axes:
        spectrum = Spectrum.from_y(x, np.zeros(points), "absorbance")
        assert spectrum.spacing_cm1 == float(np.median(np.diff(x)))
