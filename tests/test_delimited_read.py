"""Delimited text reader: separators, headers, units, y kinds, export quirks, errors, writer."""
from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pytest

from processing.errors import SpectrumFileError
from processing.readers import delimited
from processing.spectrum import Spectrum


def read(text: str | bytes, name: str = "export.csv") -> Spectrum:
    data = text.encode("utf-8") if isinstance(text, str) else text
    return delimited.parse(data, name)


def has_note(spectrum: Spectrum, *words: str) -> bool:
    return any(all(word in note for word in words) for note in spectrum.meta.notes)


# --------------------------------------------------------------------------- separators


@pytest.mark.parametrize(
    "text, separator",
    [
        ("cm-1,A\n2885.5,0.123\n2886.0,0.125\n2886.5,0.121\n", "comma"),
        ("cm-1\tA\n2885.5\t0.123\n2886.0\t0.125\n2886.5\t0.121\n", "tab"),
        ("cm-1;A\n2885.5;0.123\n2886.0;0.125\n2886.5;0.121\n", "semicolon"),
        ("cm-1  A\n2885.5   0.123\n2886.0 0.125\n 2886.5  0.121\n", "whitespace"),
        ("cm-1;A\n2885,5;0,123\n2886,0;0,125\n2886,5;0,121\n", "semicolon, decimal comma"),
        ("cm-1\tA\n2885,5\t0,123\n2886,0\t0,125\n2886,5\t0,121\n", "tab, decimal comma"),
        ("cm-1 A\n2885,5 0,123\n2886,0 0,125\n2886,5 0,121\n", "whitespace, decimal comma"),
    ],
)
def test_separators_and_decimal_marks_give_the_same_numbers(text: str, separator: str) -> None:
    spectrum = read(text)
    assert spectrum.meta.format == f"delimited text ({separator})"
    # Exact: "2885,5" and "2885.5" name the same decimal, so the same double.
    assert spectrum.wavenumber_cm1.tolist() == [2885.5, 2886.0, 2886.5]
    assert spectrum.absorbance.tolist() == [0.123, 0.125, 0.121]


def test_decimal_comma_found_even_when_the_first_row_is_whole_numbers() -> None:
    spectrum = read("4000\t1\n3999,5\t0,5\n3999\t0,25\n")
    assert spectrum.meta.format == "delimited text (tab, decimal comma)"
    assert spectrum.wavenumber_cm1.tolist() == [3999.0, 3999.5, 4000.0]
    assert spectrum.absorbance.tolist() == [0.25, 0.5, 1.0]


def test_no_header_assumes_cm1_and_says_so() -> None:
    spectrum = read("1000.0,0.10\n1001.0,0.20\n1002.0,0.15\n")
    assert spectrum.meta.header == ()
    assert has_note(spectrum, "x units not stated", "assumed cm-1")
    assert spectrum.wavenumber_cm1.tolist() == [1000.0, 1001.0, 1002.0]


# --------------------------------------------------------------------------- y kind


@pytest.mark.parametrize(
    "header, kind",
    [
        ("cm-1,A", "absorbance"),
        ("Wavenumber (cm-1),Absorbance", "absorbance"),
        ("wavenumber,Abs", "absorbance"),
        ("cm-1,%T", "percent_transmittance"),
        ("cm-1,Transmittance (%)", "percent_transmittance"),
        ("1/cm,Transmittance", "transmittance"),
        ("cm-1,T", "transmittance"),
        ("wavenumber_cm-1,percent_transmittance", "percent_transmittance"),
    ],
)
def test_y_kind_comes_from_the_header(header: str, kind: str) -> None:
    # 0.5 is a valid absorbance, transmittance and %T alike: only the header decides.
    spectrum = read(f"{header}\n1000,0.5\n1001,0.5\n1002,0.5\n")
    assert spectrum.original_y_kind == kind
    assert has_note(spectrum, "from the column header")


def test_semicolon_header_with_units_in_parentheses() -> None:
    spectrum = read("Wavenumber (cm-1);Absorbance\n2885,5;0,123\n2886,0;0,125\n")
    assert spectrum.original_y_kind == "absorbance"
    assert not has_note(spectrum, "assumed cm-1")
    assert spectrum.meta.header == (("columns", "Wavenumber (cm-1);Absorbance"),)


def test_whitespace_header_keeps_units_with_their_names() -> None:
    spectrum = read("Wavenumber (cm-1) Transmittance\n1000 0.9\n1001 0.8\n")
    assert spectrum.original_y_kind == "transmittance"
    assert not has_note(spectrum, "assumed cm-1")


def test_transmittance_header_over_percent_values_is_read_as_percent() -> None:
    # A known export slip: values 0..100 under a "Transmittance" label (common practice).
    spectrum = read("cm-1,Transmittance\n1000,98\n1001,50\n1002,97\n")
    assert spectrum.original_y_kind == "percent_transmittance"
    # A = -log10(%T/100): 50 %T -> log10(2) (definition of decadic absorbance).
    assert spectrum.absorbance[1] == pytest.approx(math.log10(2.0), abs=1e-15)
    assert has_note(spectrum, "read as percent transmittance")


def _lines_on_baseline(baseline: float, depth: float, n: int = 200) -> np.ndarray:
    """A gas-like trace: flat baseline with a few narrow features (most points on baseline)."""
    y = np.full(n, baseline)
    y[[20, 21, 80, 81, 82, 150]] += depth
    return y


@pytest.mark.parametrize(
    "baseline, depth, kind",
    [
        (0.98, -0.6, "transmittance"),  # T baseline near 1, lines dip down
        (97.0, -60.0, "percent_transmittance"),  # %T baseline near 100
        (0.02, 0.8, "absorbance"),  # A baseline near 0, lines go up
        (0.5, 0.45, "absorbance"),  # A with a 0.5 offset reaching 0.95: still absorbance
        (0.5, 30.0, "absorbance"),  # out of 0..1 and baseline at the bottom
    ],
)
def test_y_kind_inferred_from_values_with_the_reason(
    baseline: float, depth: float, kind: str
) -> None:
    y = _lines_on_baseline(baseline, depth)
    x = 2000.0 + 0.5 * np.arange(y.size)
    text = "".join(f"{a!r},{b!r}\n" for a, b in zip(x.tolist(), y.tolist()))
    spectrum = read(text)
    assert spectrum.original_y_kind == kind
    assert has_note(spectrum, f"y kind inferred as {kind} because")


def test_absorbance_baseline_offset_near_half_is_kept_as_data() -> None:
    spectrum = read("cm-1,A\n" + "".join(f"{2000 + i},0.5{i % 3}\n" for i in range(10)))
    assert spectrum.absorbance.min() == pytest.approx(0.50, abs=1e-12)
    assert spectrum.original_y_kind == "absorbance"


# --------------------------------------------------------------------------- x units


def test_micrometre_column_is_converted_to_wavenumber() -> None:
    spectrum = read("Wavelength (µm),A\n2.5,0.1\n4.0,0.2\n5.0,0.3\n")
    # cm-1 = 1e4 / um (1 cm = 1e4 um, SI definition): 5 -> 2000, 4 -> 2500, 2.5 -> 4000.
    assert spectrum.wavenumber_cm1.tolist() == [2000.0, 2500.0, 4000.0]
    assert spectrum.absorbance.tolist() == [0.3, 0.2, 0.1]
    assert has_note(spectrum, "converted from micrometre")


def test_latin1_micro_sign_and_um_spelling() -> None:
    spectrum = read(b"Wavelength (\xb5m);A\n2,5;0,1\n5;0,3\n")
    assert spectrum.wavenumber_cm1.tolist() == [2000.0, 4000.0]
    assert read("um,A\n2.5,0.1\n5,0.3\n").wavenumber_cm1.tolist() == [2000.0, 4000.0]


def test_nanometre_column_is_converted_to_wavenumber() -> None:
    spectrum = read("wavelength nm\tabsorbance\n2500\t0.1\n5000\t0.2\n")
    # cm-1 = 1e7 / nm (1 cm = 1e7 nm, SI definition).
    assert spectrum.wavenumber_cm1.tolist() == [2000.0, 4000.0]
    assert has_note(spectrum, "converted from nanometre")


def test_nonpositive_wavelength_names_the_line() -> None:
    with pytest.raises(SpectrumFileError) as caught:
        read("um,A\n-1.0,0.1\n2.0,0.2\n")
    assert caught.value.line == 2
    assert "not positive" in str(caught.value)


# --------------------------------------------------------------------------- export quirks


def test_bom_free_text_trailing_comma_crlf_and_descending_x_together() -> None:
    text = (
        "\ufeffLab 7 export, sample cell B\r\n"
        "cm-1,A,\r\n"
        "3000,0.51,\r\n"
        "2999.5,0.52,\r\n"
        "2999,0.5,\r\n"
        "\r\n"
    )
    spectrum = read(text.encode("utf-8"))
    assert spectrum.wavenumber_cm1.tolist() == [2999.0, 2999.5, 3000.0]
    assert spectrum.absorbance.tolist() == [0.5, 0.52, 0.51]
    assert spectrum.meta.title == "Lab 7 export, sample cell B"
    assert has_note(spectrum, "byte-order mark")
    assert has_note(spectrum, "descending")
    assert not has_note(spectrum, "assumed cm-1")


def test_several_free_text_lines_and_blank_lines_before_the_header() -> None:
    text = "Sample: HCl 10 torr\nOperator: demo\n\nResolution 0.5\n\ncm-1,A\n\n1000,0.1\n1001,0.2\n"
    spectrum = read(text)
    assert spectrum.points == 2
    assert [value for key, value in spectrum.meta.header if key == "text"] == [
        "Sample: HCl 10 torr",
        "Operator: demo",
        "Resolution 0.5",
    ]


def test_whole_numbers_without_decimals() -> None:
    spectrum = read("cm-1,%T\n4000,100\n3999,50\n3998,10\n")
    assert spectrum.wavenumber_cm1.tolist() == [3998.0, 3999.0, 4000.0]
    # A = -log10(%T/100): 10 %T -> 1, 100 %T -> 0 (definition of decadic absorbance).
    np.testing.assert_allclose(spectrum.absorbance, [1.0, math.log10(2.0), 0.0], rtol=0, atol=1e-15)


def test_x_rounded_off_a_regular_grid_is_kept_and_noted() -> None:
    # A 0.125 cm-1 grid written with 2 decimals: steps of 0.12 and 0.13
    # (common practice in exports).
    grid = 2000.0 + 0.125 * np.arange(40)
    rounded = np.round(grid, 2)
    assert np.max(np.abs(rounded - grid)) == pytest.approx(0.005, abs=1e-9)
    spectrum = read("cm-1,A\n" + "".join(f"{x:.2f},0.1\n" for x in rounded))
    assert spectrum.wavenumber_cm1.tolist() == rounded.tolist()
    assert has_note(spectrum, "rounded off a regular grid", "kept as given")


def test_a_fine_regular_grid_gets_no_rounding_note() -> None:
    x = 2000.0 + 0.48212 * np.arange(50)
    spectrum = read("cm-1,A\n" + "".join(f"{v!r},0.1\n" for v in x.tolist()))
    assert not has_note(spectrum, "rounded")


@pytest.mark.parametrize(
    "bad_row, line, words",
    [(23, 25, "duplicated x"), (23, 25, "not monotonic"), (3, 5, "not monotonic"), (39, 41, "duplicated x")],
)
def test_x_checked_block_by_block_names_the_row_in_any_block(
    monkeypatch: pytest.MonkeyPatch, bad_row: int, line: int, words: str
) -> None:
    """x steps are checked in blocks (no step array of the whole axis): a repeated or
    backward x in a later block is named at its line as in the first."""
    monkeypatch.setattr(delimited, "AXIS_BLOCK", 4)
    x = (2000.0 + 0.5 * np.arange(40)).tolist()
    x[bad_row] = x[bad_row - 1] if words == "duplicated x" else x[bad_row - 1] - 0.25
    with pytest.raises(SpectrumFileError) as caught:
        read("cm-1,A\n" + "".join(f"{v!r},0.1\n" for v in x))
    assert caught.value.line == line and words in str(caught.value)


def test_rounding_note_is_the_same_with_any_block_size(monkeypatch: pytest.MonkeyPatch) -> None:
    """The step sizes gathered block by block give the note the whole axis gives: smallest and
    largest step, around the span over the intervals (x rounded to 2 decimals on a 0.125 grid,
    descending as many exports are)."""
    text = "cm-1,A\n" + "".join(f"{x:.2f},0.1\n" for x in (2000.0 + 0.125 * np.arange(100))[::-1])
    notes = []
    for block in (3, 7, 1 << 16):
        monkeypatch.setattr(delimited, "AXIS_BLOCK", block)
        notes.append(read(text).meta.notes)
    assert notes[0] == notes[1] == notes[2]
    assert any("x steps range 0.12..0.13 around 0.125" in note for note in notes[0])


def test_footer_text_after_the_data_is_dropped_and_noted() -> None:
    spectrum = read("cm-1,A\n1000,0.1\n1001,0.2\n1002,0.3\n\nEnd of data\nexported 2026-01-05\n")
    assert spectrum.points == 3
    assert has_note(spectrum, "2 line(s) of text after the data ignored", "End of data")


def test_text_followed_by_more_data_is_an_error_at_the_text_line() -> None:
    with pytest.raises(SpectrumFileError) as caught:
        read("cm-1,A\n1000,0.1\n1001,0.2\n-- segment 2 --\n1002,0.3\n1003,0.3\n")
    assert caught.value.line == 4
    assert "data rows follow it" in str(caught.value)


def test_blank_lines_inside_the_data_are_skipped() -> None:
    spectrum = read("cm-1,A\n1000,0.1\n\n1001,0.2\n   \n1002,0.3\n")
    assert spectrum.wavenumber_cm1.tolist() == [1000.0, 1001.0, 1002.0]
    assert has_note(spectrum, "blank lines")


def test_old_mac_line_endings() -> None:
    spectrum = read(b"cm-1,A\r1000,0.1\r1001,0.2\r")
    assert spectrum.points == 2


def test_more_columns_take_the_first_two_unless_the_header_names_y() -> None:
    unnamed = read("1000,0.1,7\n1001,0.2,8\n1002,0.3,9\n")
    assert unnamed.absorbance.tolist() == [0.1, 0.2, 0.3]
    assert has_note(unnamed, "3 columns", "y from column 2")
    named = read("cm-1,single beam,reference,Absorbance\n1000,5,6,0.1\n1001,5,6,0.2\n")
    assert named.absorbance.tolist() == [0.1, 0.2]
    assert has_note(named, "y from column 4", "Absorbance")


# --------------------------------------------------------------------------- errors


@pytest.mark.parametrize(
    "text, line, words",
    [
        ("cm-1,A\n1000,0.1\n1001,abc\n1002,0.3\n", 3, "'abc' is not a number"),
        ("cm-1,A\n1000,0.1\n1001,0.2\n1002\n1003,0.3\n", 4, "1 value, expected 2"),
        ("cm-1,A\n1000,0.1\n1001,0.2,5\n1002\n1003,0.3\n", 3, "3 values, expected 2"),
        ("cm-1,A\n1000,0.1\n1001,nan\n1002,0.3\n", 3, "not a finite number"),
        ("cm-1,A\n1000,0.1\ninf,0.2\n1002,0.3\n", 3, "not a finite number"),
        ("cm-1,A\n1000,0.1\nnan,0.2\n1002,0.3\n", 3, "not a finite number"),
        ("cm-1,A\n1000,0.1\n1001,0.2\ninf,0.3\n", 4, "not a finite number"),
        ("cm-1,A\n1002,0.1\n1001,0.2\n-inf,0.3\n", 4, "not a finite number"),
        ("cm-1,A\n1000,0.1\n1001,0.2\n1001,0.3\n", 4, "duplicated x"),
        ("cm-1,A\n1000,0.1\n1002,0.2\n1001,0.3\n", 4, "not monotonic"),
        ("cm-1,A\n1000,0.1\n", 2, "at least 2 points"),
    ],
)
def test_bad_rows_name_file_line_and_problem(text: str, line: int, words: str) -> None:
    with pytest.raises(SpectrumFileError) as caught:
        read(text, "/exports/run 7.csv")
    assert caught.value.line == line
    assert str(caught.value).startswith(f"/exports/run 7.csv:{line}: ")
    assert words in str(caught.value)


@pytest.mark.parametrize(
    "data, words",
    [
        (b"", "empty"),
        (b"\xef\xbb\xbf  \r\n\n", "empty"),
        (b"just a note\nwith two lines\n", "only text"),
        (b"1,2\n\x00\x01\x02\x03", "binary"),
    ],
)
def test_files_without_data_are_refused(data: bytes, words: str) -> None:
    with pytest.raises(SpectrumFileError, match=words):
        delimited.parse(data, "x.csv")


# --------------------------------------------------------------------------- identify


@pytest.mark.parametrize(
    "head, expected",
    [
        (b"cm-1,A\n1,2\n2,3\n", True),
        (b"\xef\xbb\xbfExport\ncm-1;A\n1,5;2\n2,5;3\n", True),
        (b"1 2\n3 4\n", True),
        (b"##TITLE=x\n##JCAMP-DX=5.01\n", False),
        (b"hello\nworld\n", False),
        (b"a,b\n1\n2\n", False),  # one number per row is not an x,y table
    ],
)
def test_identify(head: bytes, expected: bool) -> None:
    assert delimited.identify(head) is expected


def test_identify_ignores_a_row_cut_by_the_head_limit() -> None:
    head = (b"cm-1,A\n" + b"1000.0,0.5\n" * 400)[:4096]
    assert delimited.identify(head)


# --------------------------------------------------------------------------- writer


def _awkward_spectrum() -> Spectrum:
    rng = np.random.default_rng(7)
    x = np.sort(rng.uniform(400.0, 4000.0, 500))
    y = rng.normal(0.3, 0.2, 500) ** 2 + np.float64(1e-17)
    y[::50] = [0.1 + 0.2, 1 / 3, 5e-324, 123456789.123456789, 0.0, -0.0, 2.0**-30, 1e300, 7.0, 0.5]
    return Spectrum.from_y(x, y, "absorbance")


def test_write_then_read_round_trips_bit_for_bit(tmp_path: Path) -> None:
    spectrum = _awkward_spectrum()
    path = tmp_path / "out.csv"
    delimited.write_csv(path, spectrum)
    assert path.read_text(encoding="utf-8").splitlines()[0] == "wavenumber_cm-1,absorbance"
    again = delimited.parse(path.read_bytes(), str(path))
    assert np.array_equal(again.wavenumber_cm1, spectrum.wavenumber_cm1)
    assert np.array_equal(again.absorbance, spectrum.absorbance)
    assert again.original_y_kind == "absorbance"
    assert not has_note(again, "assumed")


@pytest.mark.parametrize("kind", ["transmittance", "percent_transmittance"])
def test_transmittance_output_round_trips(kind: str) -> None:
    rng = np.random.default_rng(3)
    x = 2000.0 + 0.25 * np.arange(300)
    spectrum = Spectrum.from_y(x, rng.uniform(0.0, 2.5, 300), "absorbance")
    stream = io.StringIO()
    delimited.write_csv(stream, spectrum, y_kind=kind)
    assert stream.getvalue().splitlines()[0] == f"wavenumber_cm-1,{kind}"
    again = read(stream.getvalue())
    assert again.original_y_kind == kind
    assert np.array_equal(again.wavenumber_cm1, spectrum.wavenumber_cm1)
    # 10**-A then -log10 back: each step is correctly rounded to ~1 ulp, so A (<= 2.5)
    # comes back within a few 1e-16; 1e-14 leaves room and still catches any real slip.
    np.testing.assert_allclose(again.absorbance, spectrum.absorbance, rtol=0, atol=1e-14)
    # The written values themselves are exact: writing the re-read spectrum's y again
    # reproduces the file's numbers to the same rounding.
    text = stream.getvalue()
    written_y = np.array([float(row.split(",")[1]) for row in text.splitlines()[1:]])
    expected = spectrum.transmittance() * (100.0 if kind == "percent_transmittance" else 1.0)
    assert np.array_equal(written_y, expected)


def test_writer_to_a_binary_stream_and_unknown_kind() -> None:
    spectrum = Spectrum.from_y([1.0, 2.0], [0.25, 0.5], "absorbance")
    stream = io.BytesIO()
    delimited.write_csv(stream, spectrum)
    assert stream.getvalue() == b"wavenumber_cm-1,absorbance\n1.0,0.25\n2.0,0.5\n"
    with pytest.raises(ValueError, match="unknown y kind"):
        delimited.write_csv(io.StringIO(), spectrum, y_kind="reflectance")


def test_a_cut_off_last_row_is_an_error_not_a_footer() -> None:
    # A file still being written ends mid-row: that is a ragged row, not trailing text.
    with pytest.raises(SpectrumFileError) as caught:
        read("cm-1,A\n1000,0.1\n1001,0.2\n1002.")
    assert caught.value.line == 4
    assert caught.value.problem == "row has 1 value, expected 2 like the rows above"


def test_numpys_c_reader_is_the_fast_path_on_this_numpy() -> None:
    # If a numpy upgrade removes or changes it, reading still works (fallback below) but
    # slower: this test says so instead of letting the benchmark drift silently.
    assert delimited._TEXT_READER_WORKS


@pytest.mark.parametrize(
    "text",
    ["\ufeffnote\ncm-1,A,\n3000,0.5,\n2999.5,0.25,\n", "cm-1;A\n2999,5;0,25\n3000;0,5\n"],
)
def test_the_fromstring_fallback_reads_the_same(
    monkeypatch: pytest.MonkeyPatch, text: str
) -> None:
    expected = read(text)
    monkeypatch.setattr(delimited, "_TEXT_READER", None)
    again = read(text)
    assert again.wavenumber_cm1.tolist() == expected.wavenumber_cm1.tolist() == [2999.5, 3000.0]
    assert again.absorbance.tolist() == expected.absorbance.tolist() == [0.25, 0.5]
    with pytest.raises(SpectrumFileError) as caught:
        read("cm-1,A\n1,2\n2,3\n3\n4,5\n")
    assert caught.value.line == 4


@pytest.mark.parametrize(
    "line, value",
    [
        ("Resolution: 0.5 cm-1", 0.5),
        ("resolution,4", 4.0),
        ("Resolution (cm-1) = 0,25", 0.25),
        ("Spectral resolution 2 1/cm; 32 scans", 2.0),
        ("Resolution: 0.5 cm-1 Happ-Genzel", 0.5),
    ],
)
def test_resolution_stated_in_the_free_text_is_kept(line: str, value: float) -> None:
    spectrum = read(f"{line}\ncm-1,A\n1000,0.1\n1001,0.2\n")
    assert spectrum.meta.resolution_cm1 == value
    assert has_note(spectrum, "resolution", "taken from the text")


def test_no_resolution_when_the_text_does_not_state_one() -> None:
    text = "Resolution set by operator\nRun 4, 0.5 torr\nResolution: 0.5 nm\ncm-1,A\n1000,0.1\n1001,0.2\n"
    assert read(text).meta.resolution_cm1 is None


def test_a_damaged_last_row_is_an_error_not_a_footer() -> None:
    with pytest.raises(SpectrumFileError) as caught:
        read(b"cm-1,A\n1000,0.1\n1001,0.2\n10\x0002,0.3\n")
    assert caught.value.line == 4


def test_a_nul_deep_in_the_data_names_its_row() -> None:
    rows = b"".join(b"%d,0.1\n" % x for x in range(1000, 3000))
    damaged = rows[:20_000] + b"\x00" + rows[20_000:]
    with pytest.raises(SpectrumFileError) as caught:
        read(b"cm-1,A\n" + damaged)
    assert caught.value.line == damaged[:20_000].count(b"\n") + 2


@pytest.mark.parametrize("encoding", ["utf-16", "utf-16-be"])
def test_utf16_exports_are_read_through_the_registry(encoding: str) -> None:
    import hashlib

    from processing.readers import parse_bytes

    text = "Wavelength (µm)\tT\r\n2.5\t0.5\r\n5\t0.25\r\n"
    data = ("\ufeff" + text).encode(encoding) if encoding.endswith("be") else text.encode(encoding)
    assert data[:2] in (b"\xff\xfe", b"\xfe\xff")  # a byte-order mark either way round
    spectrum = parse_bytes(data, "unicode.txt")
    assert isinstance(spectrum, Spectrum)
    assert spectrum.wavenumber_cm1.tolist() == [2000.0, 4000.0]
    assert spectrum.original_y_kind == "transmittance"
    assert spectrum.meta.sha256 == hashlib.sha256(data).hexdigest()  # of the file's own bytes


@pytest.mark.parametrize("uses_all_cores", [False, True])
def test_a_whole_run_carries_the_sha256_of_the_file_whichever_core_hashes_it(
    tmp_path, monkeypatch, uses_all_cores: bool
) -> None:
    """process_file hashes a large file alongside the parse (numpy's one-core readers) or after
    it, alongside the analysis (polars' threaded reader): the run's sha256 is the file's bytes'
    either way (hashlib, the Python standard library, is the reference)."""
    import hashlib

    from processing.pipeline import process_file
    from processing.readers import registry

    monkeypatch.setattr(registry, "HASH_LATER_BYTES", 1000)
    monkeypatch.setattr(registry, "HASH_ALONGSIDE_BYTES", 1000)
    monkeypatch.setattr(registry, "delimited_parser_uses_all_cores", lambda: uses_all_cores)
    x = np.linspace(2600.0, 3100.0, 4000)
    body = "".join(f"{value:.4f},{0.01 * np.sin(value):.6f}\n" for value in x)
    path = tmp_path / "run.csv"
    path.write_text("cm-1,absorbance\n" + body)
    result = process_file(path)
    assert result.status == "processed"
    assert result.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
