"""JCAMP-DX reader: hand-made snippets following the IUPAC JCAMP-DX 4.24 / 5.01 rules.

Character tables used in the worked arithmetic (IUPAC JCAMP-DX 4.24, ASDF):
    SQZ  @=0 A..I=+1..+9 a..i=-1..-9      DIF  %=0 J..R=+1..+9 j..r=-1..-9
    DUP  S..Z=1..8 s=9 (count = total appearances of the preceding value or difference)
Expected numbers are worked out in comments beside each test.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from processing.errors import SpectrumFileError
from processing.readers import jcamp
from processing.spectrum import LineList, Spectrum


def header(**fields: object) -> str:
    """A minimal infrared block header; keyword order is kept, None drops a label."""
    base: dict[str, object] = {
        "TITLE": "test",
        "JCAMP-DX": "4.24",
        "DATA TYPE": "INFRARED SPECTRUM",
        "XUNITS": "1/CM",
        "YUNITS": "ABSORBANCE",
    }
    base.update({k.replace("_", " "): v for k, v in fields.items()})
    return "".join(f"##{k}={v}\n" for k, v in base.items() if v is not None)


def read(text: str) -> Spectrum | LineList:
    return jcamp.parse(text.encode("latin-1"), "snippet.jdx")


def read_spectrum(text: str) -> Spectrum:
    result = read(text)
    assert isinstance(result, Spectrum)
    return result


def refused(text: str | bytes, *fragments: str) -> SpectrumFileError:
    data = text if isinstance(text, bytes) else text.encode("latin-1")
    with pytest.raises(SpectrumFileError) as caught:
        jcamp.parse(data, "bad.jdx")
    message = str(caught.value)
    assert message.startswith("bad.jdx")
    for fragment in fragments:
        assert fragment in message, message
    return caught.value


# ---------------------------------------------------------------- forms


def test_affn_with_factors() -> None:
    # XFACTOR=0.5, YFACTOR=0.001: line X 2000 -> 1000 cm-1; Y 100 -> 0.1 (IUPAC 4.24 factors)
    text = header(XFACTOR=0.5, YFACTOR=0.001, FIRSTX=1000, LASTX=1005, DELTAX=1, NPOINTS=6, FIRSTY=0.1)
    text += "##XYDATA=(X++(Y..Y))\n2000 100 200 300\n2006 400 500 600\n##END=\n"
    s = read_spectrum(text)
    np.testing.assert_array_equal(s.wavenumber_cm1, [1000, 1001, 1002, 1003, 1004, 1005])
    # 100*0.001 = 0.1 etc.; float products, so compare to 1e-15 (one rounding of the product)
    np.testing.assert_allclose(s.absorbance, [0.1, 0.2, 0.3, 0.4, 0.5, 0.6], rtol=0, atol=1e-15)
    assert s.meta.format == "JCAMP-DX 4.24 XYDATA AFFN"
    assert s.meta.notes == ()


def test_affn_commas_and_signs_separate_values() -> None:
    # "10,-5,+7" and "3-2+1": commas and signs both separate AFFN values (IUPAC 4.24 AFFN)
    text = header(FIRSTX=1, LASTX=6, NPOINTS=6) + "##XYDATA=(X++(Y..Y))\n1,10,-5,+7\n4 3-2+1\n##END=\n"
    s = read_spectrum(text)
    assert s.absorbance.tolist() == [10, -5, 7, 3, -2, 1]


def test_affn_exponents_are_read_as_exponents() -> None:
    text = header(FIRSTX=1, LASTX=3, NPOINTS=3) + "##XYDATA=(X++(Y..Y))\n1 1.5E-03 2.0e+01 -3E-1\n##END=\n"
    s = read_spectrum(text)
    assert s.absorbance.tolist() == [1.5e-3, 20.0, -0.3]


def test_sqz_values() -> None:
    # A23 = +123, b45 = -245, @ = 0, I9 = +99 (SQZ: letter = signed first digit)
    text = header(FIRSTX=10, LASTX=13, NPOINTS=4) + "##XYDATA=(X++(Y..Y))\n10A23b45@I9\n##END=\n"
    assert read_spectrum(text).absorbance.tolist() == [123, -245, 0, 99]


def test_dif_dup_with_y_checks_and_check_only_last_line() -> None:
    # line 1: A00=100, J0=+10 ->110, %=+0 ->110, J0 ->120           points 1000..1003
    # line 2: A20 = check 120 (dropped), k=-2 twice (T=DUP 2) ->118, 116   1004, 1005
    # line 3: A16 = check 116, J0 ->126, % ->126, K=+2 ->128           1006..1008
    # line 4: A28 = check 128 only: dropped, so 9 points = NPOINTS, not 10
    text = header(YFACTOR=0.001, FIRSTX=1000, LASTX=1008, DELTAX=1, NPOINTS=9, FIRSTY=0.1)
    text += "##XYDATA=(X++(Y..Y))\n1000A00J0%J0\n1003A20kT\n1005A16J0%K\n1008A28\n##END=\n"
    s = read_spectrum(text)
    expected = np.array([100, 110, 110, 120, 118, 116, 126, 126, 128]) * 0.001
    np.testing.assert_allclose(s.absorbance, expected, rtol=0, atol=1e-15)
    np.testing.assert_array_equal(s.wavenumber_cm1, np.arange(1000.0, 1009.0))
    assert "3 DIF Y-check values verified and dropped" in s.meta.notes
    assert s.meta.format == "JCAMP-DX 4.24 XYDATA DIF DUP"


def test_mixed_forms_in_one_line() -> None:
    # 5 (AFFN), A0 = 10 (SQZ), J = +1 -> 11 (DIF), T: the +1 appears twice in all -> 12 (DUP),
    # -3 (AFFN)
    text = header(FIRSTX=1, LASTX=5, NPOINTS=5) + "##XYDATA=(X++(Y..Y))\n1 5A0JT -3\n##END=\n"
    assert read_spectrum(text).absorbance.tolist() == [5, 10, 11, 12, -3]


def test_e_is_a_sqz_digit_not_an_exponent() -> None:
    # 1946E434: X = 1946, E = SQZ +5 -> Y = +5434 (DOMAIN pitfall; IUPAC SQZ E = +5)
    # e12 = -512; next line 1948E434 again.
    text = header(FIRSTX=1946, LASTX=1949, NPOINTS=4) + "##XYDATA=(X++(Y..Y))\n1946E434e12\n1948E434E0\n##END=\n"
    s = read_spectrum(text)
    assert s.absorbance.tolist() == [5434, -512, 5434, 50]
    assert s.wavenumber_cm1.tolist() == [1946, 1947, 1948, 1949]


def test_e_after_decimal_line_start_x() -> None:
    # 7800.000000E47630: X = 7800.000000, then SQZ E = +5 -> Y = +547630 (common practice)
    text = header(FIRSTX=7800, LASTX=7798, NPOINTS=2) + "##XYDATA=(X++(Y..Y))\n7800.000000E47630E47631\n##END=\n"
    s = read_spectrum(text)
    # descending in the file: 7800 -> 547630, 7798 -> 547631; ascending inside bandwatch
    assert s.wavenumber_cm1.tolist() == [7798.0, 7800.0]
    assert s.absorbance.tolist() == [547631.0, 547630.0]


def test_multi_character_dup_counts() -> None:
    # A S2: DUP count 12 -> the value 1 appears 12 times in total (S=1, then digit 2)
    text = header(FIRSTX=1, LASTX=13, NPOINTS=13) + "##XYDATA=(X++(Y..Y))\n1AS2B\n##END=\n"
    assert read_spectrum(text).absorbance.tolist() == [1] * 12 + [2]


def test_dup_of_ten_or_more_repeats_a_difference() -> None:
    # @ = 0, then J (DIF +1) with U0 = DUP 30: the difference +1 appears 30 times -> 1..30;
    # next line starts with the Y-check C0 = 30 (dropped).
    text = header(FIRSTX=0, LASTX=30, NPOINTS=31) + "##XYDATA=(X++(Y..Y))\n0@JU0\n30C0\n##END=\n"
    s = read_spectrum(text)
    assert s.absorbance.tolist() == list(range(31))
    # and %U9 (a zero difference 39 times) keeps the level: 5, then 39 more fives
    text = header(FIRSTX=0, LASTX=39, NPOINTS=40) + "##XYDATA=(X++(Y..Y))\n0E%U9\n39E\n##END=\n"
    assert read_spectrum(text).absorbance.tolist() == [5.0] * 40


def test_dif_check_mismatch_names_the_line() -> None:
    # line 2 must start with 120 (100 + 10 + 10) but says 125
    text = header(FIRSTX=1, LASTX=4, NPOINTS=4) + "##XYDATA=(X++(Y..Y))\n1A00J0J0\n3A25J\n4A26\n##END=\n"
    error = refused(text, "DIF check failed")
    assert error.line == 11  # 8 header lines, ##XYDATA= on 9, "1A00J0J0" on 10, "3A25J" on 11


def test_descending_x_is_reversed() -> None:
    text = header(FIRSTX=4000, LASTX=3997, DELTAX=-1, NPOINTS=4) + "##XYDATA=(X++(Y..Y))\n4000 1 2 3 4\n##END=\n"
    s = read_spectrum(text)
    assert s.wavenumber_cm1.tolist() == [3997, 3998, 3999, 4000]
    assert s.absorbance.tolist() == [4, 3, 2, 1]
    assert any("descending" in note for note in s.meta.notes)


# ---------------------------------------------------------------- header cross-checks


def test_missing_deltax_is_derived_from_first_last_and_count() -> None:
    # (1001 - 1000) / (5 - 1) = 0.25 cm-1
    text = header(FIRSTX=1000, LASTX=1001, NPOINTS=5) + "##XYDATA=(X++(Y..Y))\n1000 1 2 3 4 5\n##END=\n"
    s = read_spectrum(text)
    np.testing.assert_array_equal(s.wavenumber_cm1, [1000, 1000.25, 1000.5, 1000.75, 1001])
    assert any("no ##DELTAX=" in note for note in s.meta.notes)


def test_decimal_commas_in_header_values() -> None:
    text = header(FIRSTX="1000,0", LASTX="1001,5", DELTAX="0,5", NPOINTS=4, RESOLUTION="0,5")
    text += "##XYDATA=(X++(Y..Y))\n1000 1 2 3 4\n##END=\n"
    s = read_spectrum(text)
    assert s.wavenumber_cm1.tolist() == [1000.0, 1000.5, 1001.0, 1001.5]
    assert s.meta.resolution_cm1 == 0.5


def test_rounded_line_start_x_is_only_a_check() -> None:
    # true axis 1000.3 + 0.1 i; the writer printed line X rounded to whole numbers
    text = header(FIRSTX=1000.3, LASTX=1001.0, DELTAX=0.1, NPOINTS=8)
    text += "##XYDATA=(X++(Y..Y))\n1000 1 2 3 4\n1001 5 6 7 8\n##END=\n"
    s = read_spectrum(text)
    np.testing.assert_allclose(s.wavenumber_cm1, 1000.3 + 0.1 * np.arange(8), rtol=0, atol=1e-9)
    assert s.meta.notes == ()


def test_line_start_x_in_x_units_despite_xfactor() -> None:
    # XFACTOR=0.01 says line X are hundredths, but the writer put plain cm-1 there
    text = header(XFACTOR=0.01, FIRSTX=1000, LASTX=1007, DELTAX=1, NPOINTS=8)
    text += "##XYDATA=(X++(Y..Y))\n1000 1 2 3 4\n1004 5 6 7 8\n##END=\n"
    s = read_spectrum(text)
    assert s.wavenumber_cm1.tolist() == list(range(1000, 1008))
    assert any("not XFACTOR units" in note for note in s.meta.notes)


def test_line_x_far_off_is_an_error() -> None:
    # the second line claims 1010 where point 5 sits at 1004: points are missing
    text = header(FIRSTX=1000, LASTX=1007, DELTAX=1, NPOINTS=8)
    text += "##XYDATA=(X++(Y..Y))\n1000 1 2 3 4\n1010 5 6 7 8\n##END=\n"
    error = refused(text, "X=1010", "point spacings")
    assert error.line == 12  # 9 header lines, ##XYDATA= on 10, the second data line on 12


def test_wrong_npoints_trusted_when_data_reach_lastx() -> None:
    text = header(FIRSTX=1, LASTX=8, DELTAX=1, NPOINTS=80) + "##XYDATA=(X++(Y..Y))\n1 1 2 3 4\n5 5 6 7 8\n##END=\n"
    s = read_spectrum(text)
    assert s.points == 8
    assert any("##NPOINTS=80 but the data hold 8" in note for note in s.meta.notes)


def test_repeated_npoints_noted() -> None:
    text = header(FIRSTX=1, LASTX=4, NPOINTS=4) + "##NPOINTS=5\n##XYDATA=(X++(Y..Y))\n1 1 2 3 4\n##END=\n"
    s = read_spectrum(text)
    assert any("given as 4, 5" in note for note in s.meta.notes)


def test_fewer_points_than_npoints_is_truncation() -> None:
    # LASTX=10 is not reached by the 4 decoded points: data lost, not a wrong NPOINTS
    text = header(FIRSTX=1, LASTX=10, DELTAX=1, NPOINTS=10) + "##XYDATA=(X++(Y..Y))\n1 1 2 3 4\n##END=\n"
    refused(text, "truncated", "4 points decoded")


def test_firsty_rounded_is_accepted_and_wrong_firsty_noted() -> None:
    body = "##XYDATA=(X++(Y..Y))\n1 123456 2\n##END=\n"
    # 0.123456 printed as 0.1235: within 1e-3 relative (FIRSTY often rounded, common practice)
    s = read_spectrum(header(YFACTOR=1e-6, FIRSTX=1, LASTX=2, NPOINTS=2, FIRSTY=0.1235) + body)
    assert not any("FIRSTY" in note for note in s.meta.notes)
    s = read_spectrum(header(YFACTOR=1e-6, FIRSTX=1, LASTX=2, NPOINTS=2, FIRSTY=0.9) + body)
    assert any("FIRSTY" in note for note in s.meta.notes)
    np.testing.assert_allclose(s.absorbance, [0.123456, 2e-6], rtol=1e-15)


# ---------------------------------------------------------------- units and label variants


def test_percent_transmittance_under_transmittance_label() -> None:
    # values up to 100 under YUNITS=TRANSMITTANCE: %T; A = -log10(%T/100): 100 -> 0, 10 -> 1, 1 -> 2
    text = header(YUNITS="TRANSMITTANCE", FIRSTX=1, LASTX=3, NPOINTS=3) + "##XYDATA=(X++(Y..Y))\n1 100 10 1\n##END=\n"
    s = read_spectrum(text)
    assert s.original_y_kind == "percent_transmittance"
    np.testing.assert_allclose(s.absorbance, [0.0, 1.0, 2.0], atol=1e-15)
    assert any("percent" in note for note in s.meta.notes)


def test_fraction_transmittance() -> None:
    text = header(YUNITS="TRANSMITTANCE", FIRSTX=1, LASTX=2, NPOINTS=2) + "##XYDATA=(X++(Y..Y))\n1 0.5 0.01\n##END=\n"
    s = read_spectrum(text)
    assert s.original_y_kind == "transmittance"
    np.testing.assert_allclose(s.absorbance, [math.log10(2.0), 2.0], atol=1e-15)


def test_micrometers_converted_and_resorted() -> None:
    # cm-1 = 1e4 / um: 2.5 um -> 4000, 4 um -> 2500, 5 um -> 2000 (definition of wavenumber)
    text = header(XUNITS="MICROMETERS") + "##NPOINTS=3\n##XYPOINTS=(XY..XY)\n2.5, 0.1\n4, 0.2\n5, 0.3\n##END=\n"
    s = read_spectrum(text)
    assert s.wavenumber_cm1.tolist() == [2000.0, 2500.0, 4000.0]
    assert s.absorbance.tolist() == [0.3, 0.2, 0.1]
    assert any("micrometers" in note for note in s.meta.notes)


@pytest.mark.parametrize(
    "data_type_line, table_label",
    [
        ("##DATATYPE=INFRARED PEAK TABLE", "##PEAKTABLE"),
        ("##DATA TYPE=INFRARED PEAK TABLE", "##PEAK TABLE"),
        ("##data type =INFRARED PEAK TABLE", "##Peak_Table "),
        ("##Data-Type=INFRARED PEAK TABLE", "##peak-table"),
    ],
)
def test_label_variants_and_peak_table_is_a_line_list(data_type_line: str, table_label: str) -> None:
    text = (
        "##TITLE=peaks\n##JCAMP-DX=5.01\n" + data_type_line + "\n##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n"
        + table_label + "=(XY..XY)\n2906.25, 0.5; 2925.9, 0.25\n2843.6,0.125\n##END=\n"
    )
    result = read(text)
    assert isinstance(result, LineList)
    assert result.position_cm1.tolist() == [2843.6, 2906.25, 2925.9]
    assert result.intensity.tolist() == [0.125, 0.5, 0.25]
    assert result.y_kind == "absorbance"
    assert result.meta.format == "JCAMP-DX 5.01 PEAK TABLE AFFN"


def test_missing_closing_parenthesis_and_comments() -> None:
    text = header(FIRSTX=1, LASTX=3, NPOINTS=3).replace("##TITLE=test", "##TITLE=test $$ a comment")
    text += "$$ a comment line\n##XYDATA=(X++(Y..Y)\n1 1 2 3 $$ trailing comment\n##END=\n"
    s = read_spectrum(text)
    assert s.meta.title == "test"
    assert s.absorbance.tolist() == [1, 2, 3]
    assert any("closing ')'" in note for note in s.meta.notes)


def test_xypoints_read_as_spectrum() -> None:
    text = header() + "##XYPOINTS=(XY..XY)\n1000.5, 0.1\n1001.0, 0.2\n1003.0, 0.4\n##END=\n"
    s = read_spectrum(text)
    assert s.wavenumber_cm1.tolist() == [1000.5, 1001.0, 1003.0]
    assert s.meta.format == "JCAMP-DX 4.24 XYPOINTS AFFN"


def test_multi_block_picks_the_infrared_spectrum() -> None:
    text = (
        "##TITLE=link\n##JCAMP-DX=5.01\n##DATA TYPE=LINK\n##BLOCKS=3\n"
        "##TITLE=peaks\n##JCAMP-DX=5.01\n##DATA TYPE=INFRARED PEAK TABLE\n##BLOCK_ID=1\n"
        "##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n##PEAK TABLE=(XY..XY)\n1001, 2\n##END=\n"
        "##TITLE=mass\n##JCAMP-DX=5.01\n##DATA TYPE=MASS SPECTRUM\n##BLOCK_ID=2\n"
        "##XUNITS=M/Z\n##YUNITS=RELATIVE ABUNDANCE\n##PEAK TABLE=(XY..XY)\n28, 100\n##END=\n"
        "##TITLE=gas cell\n##JCAMP-DX=5.01\n##DATA TYPE=INFRARED SPECTRUM\n##BLOCK_ID=3\n"
        "##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n##FIRSTX=1000\n##LASTX=1002\n##NPOINTS=3\n"
        "##XYDATA=(X++(Y..Y))\n1000 1 2 3\n##END=\n##END=\n"
    )
    s = read_spectrum(text)
    assert s.meta.title == "gas cell"
    assert s.absorbance.tolist() == [1, 2, 3]
    assert any("read block 4 of 4" in note and "gas cell" in note for note in s.meta.notes)


def test_metadata() -> None:
    text = header(**{"JCAMP-DX": "5.01 $$ version"}, LONGDATE="2024/03/05 14:22:10", RESOLUTION=0.5)
    text += "##$APODIZATION=HAPP-GENZEL\n##FIRSTX=1\n##LASTX=2\n##NPOINTS=2\n##XYDATA=(X++(Y..Y))\n1 1 2\n##END=\n"
    meta = read_spectrum(text).meta
    assert meta.title == "test"
    assert meta.acquired == "2024-03-05T14:22:10"
    assert meta.resolution_cm1 == 0.5
    assert meta.apodization == "HAPP-GENZEL"
    assert meta.format == "JCAMP-DX 5.01 XYDATA AFFN"
    assert ("XUNITS", "1/CM") in meta.header and ("$APODIZATION", "HAPP-GENZEL") in meta.header
    text = header(DATE="2021/11/30", TIME="08:15:00", FIRSTX=1, LASTX=2, NPOINTS=2) + "##XYDATA=(X++(Y..Y))\n1 1 2\n##END=\n"
    assert read_spectrum(text).meta.acquired == "2021-11-30T08:15:00"


def test_crlf_line_ends() -> None:
    text = (header(FIRSTX=1, LASTX=3, NPOINTS=3) + "##XYDATA=(X++(Y..Y))\n1A0J%\n##END=\n").replace("\n", "\r\n")
    assert read_spectrum(text).absorbance.tolist() == [10, 11, 11]


def test_identify() -> None:
    assert jcamp.identify(b"##TITLE=x\n##JCAMP-DX=4.24\n")
    assert jcamp.identify(b"$$ exported\n ##JCAMP-DX= 5.01\n")
    assert not jcamp.identify(b"wavenumber,absorbance\n1000,0.1\n")


def test_read_any_through_the_registry(tmp_path) -> None:
    from processing.readers import read_any

    path = tmp_path / "run.jdx"
    path.write_text(header(FIRSTX=1, LASTX=2, NPOINTS=2) + "##XYDATA=(X++(Y..Y))\n1 1 2\n##END=\n")
    s = read_any(path)
    assert isinstance(s, Spectrum) and s.meta.sha256 and s.meta.source_path == str(path)


# ---------------------------------------------------------------- bad input


XY = "##XYDATA=(X++(Y..Y))\n"


@pytest.mark.parametrize(
    "text, fragments",
    [
        ("", ("empty",)),
        ("   \n\n", ("empty",)),
        (b"\x00\x01\x02##TITLE=x\x00", ("binary",)),
        (bytes(range(256)) * 4, ("binary",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3) + XY + "1 1 2 3\n", ("truncated", "no ##END=")),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3) + XY + "1 1 nan 3\n##END=\n", ("not a finite",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3) + XY + "1 1 inf 3\n##END=\n", ("not a finite",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3) + XY + "1 1 1E+999 3\n##END=\n", ("not finite",)),
        (header() + "##XYPOINTS=(XY..XY)\n1,1\n3,2\n2,3\n##END=\n", ("not monotonic",)),
        (header() + "##XYPOINTS=(XY..XY)\n1,1\n2,2\n2,3\n##END=\n", ("repeats",)),
        (header(FIRSTX=1, LASTX=1, NPOINTS=1) + XY + "1 5\n##END=\n", ("only 1 point",)),
        (header() + "##XYPOINTS=(XY..XY)\n1,1\n##END=\n", ("only 1 point",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=200000000) + XY + "1 1 2 3\n##END=\n", ("plausible",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=-3) + XY + "1 1 2 3\n##END=\n", ("plausible",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3) + XY + "1 1 2 3 ? 4\n##END=\n", ("'?'",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3) + XY + "1 1 2.3.4 3\n##END=\n", ("cannot read",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3, YUNITS="KUBELKA-MUNK") + XY + "1 1 2 3\n##END=\n", ("YUNITS",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3) + "##XYDATA=(R..R)\n1 1 2 3\n##END=\n", ("only (X++(Y..Y))",)),
        (header(FIRSTX=1, LASTX=4, NPOINTS=4) + XY + "1 A00 J S99999999999\n##END=\n", ("DUP",)),
        (header(FIRSTX=1, LASTX=3, NPOINTS=3) + XY + "1 J0 J0 J0\n##END=\n", ("no value before",)),
        ("##TITLE=x\n##JCAMP-DX=4.24\n##END=\n", ("no ##XYDATA",)),
        ("just some text\n", ("no JCAMP-DX",)),
        (header(FIRSTX="abc", LASTX=3, NPOINTS=3) + XY + "1 1 2 3\n##END=\n", ("not a number",)),
    ],
)
def test_bad_input_is_one_error(text: str | bytes, fragments: tuple[str, ...]) -> None:
    refused(text, *fragments)


def test_truncated_error_names_the_last_line() -> None:
    text = header(FIRSTX=1, LASTX=3, NPOINTS=3) + XY + "1 1 2 3\n"
    assert refused(text).line == 10  # 8 header lines, ##XYDATA= on 9, the data line on 10


def test_check_only_last_line_with_e_right_after_x() -> None:
    # 1946E434JJ: X 1946, E434 = +5434, J = +1 twice -> 5435, 5436; "1948E436" is the Y-check
    # alone on the last line (X 1948 = the third point), dropped: 3 points, not 4.
    # (the same file is shown in tests/benchmarks/bench_read_jcamp.py)
    text = header(FIRSTX=1946, LASTX=1948, DELTAX=1, NPOINTS=3) + "##XYDATA=(X++(Y..Y))\n1946E434JJ\n1948E436\n##END=\n"
    s = read_spectrum(text)
    assert s.wavenumber_cm1.tolist() == [1946, 1947, 1948]
    assert s.absorbance.tolist() == [5434, 5435, 5436]


def dif_lines(lines: int, short_line: int | None = None) -> str:
    """A DIF file of flat data: each line `X A00 % s` = a check/start value 100 and the zero
    difference 9 more times (s = DUP 9); with `short_line`, that line says Z (DUP 8) instead."""
    body = []
    for k in range(lines):
        dup = "Z" if k == short_line else "s"
        body.append(f"{1000 + 90 * k}A00%{dup}")
    points = 10 + 9 * (lines - 1)
    body.append(f"{1000 + 10 * (points - 1)}A00")  # the check value alone on the last line
    head = header(FIRSTX=1000, LASTX=1000 + 10 * (points - 1), DELTAX=10, NPOINTS=points)
    return head + "##XYDATA=(X++(Y..Y))\n" + "\n".join(body) + "\n##END=\n"


def test_many_dif_lines_read_with_checks() -> None:
    # 40 lines: 10 points on the first, 9 new ones on each of the other 39 -> 361 points
    s = read_spectrum(dif_lines(40))
    assert s.points == 361
    assert np.all(s.absorbance == 100.0)
    np.testing.assert_array_equal(s.wavenumber_cm1, 1000.0 + 10.0 * np.arange(361))


def test_lost_zero_difference_caught_by_line_x_steps() -> None:
    # A zero difference dropped on line 20 passes every DIF check (the sum is unchanged), but
    # the line-start X values then step by one point more than the lines between them hold.
    error = refused(dif_lines(40, short_line=20), "points are missing or extra")
    # 9 header lines, ##XYDATA= on 10, data line k on 11 + k; the error names the first line
    # whose X is read after the short line (line-start X are read on every 8th line)
    assert 11 + 20 < error.line <= 11 + 20 + 8


def test_pieces_of_the_data_section_join_exactly(monkeypatch: pytest.MonkeyPatch) -> None:
    # Compressed data are decoded in pieces cut at line ends; tiny pieces must give the same
    # numbers, and an error in a later piece must still name its own file line.
    from processing.readers import jcamp_asdf

    text = dif_lines(40)
    whole = read_spectrum(text)
    monkeypatch.setattr(jcamp_asdf, "CHUNK_BYTES", 16)
    pieces = read_spectrum(text)
    np.testing.assert_array_equal(pieces.absorbance, whole.absorbance)
    np.testing.assert_array_equal(pieces.wavenumber_cm1, whole.wavenumber_cm1)
    broken = text.replace("1900A00%s", "1900A01%s")  # data line 21 (k = 10): check 101 != 100
    error = refused(broken, "DIF check failed")
    assert error.line == 11 + 10  # ##XYDATA= on line 10, data line k on 11 + k


def test_peak_table_with_widths() -> None:
    # (XYW..XYW): position, intensity, width triples; the width is not kept
    text = header() + "##PEAK TABLE=(XYW..XYW)\n2906.2, 0.5, 0.1\n2925.9, 0.25, 0.2\n##END=\n"
    result = read(text)
    assert isinstance(result, LineList)
    assert result.position_cm1.tolist() == [2906.2, 2925.9]
    assert result.intensity.tolist() == [0.5, 0.25]


def test_dup_on_first_value_and_on_a_check_value() -> None:
    # line 1: A00 = 100, U = it appears 3 times in all -> 100 100 100; J = +1 -> 101  (x 1000-1003)
    # line 2 (X 1003): A01 = check 101 (dropped), T = it appears twice in all -> one new 101;
    #   J -> 102                                                             (x 1004, 1005)
    # line 3 (X 1005): A02 = check only
    text = header(FIRSTX=1000, LASTX=1005, DELTAX=1, NPOINTS=6) + "##XYDATA=(X++(Y..Y))\n1000A00UJ\n1003A01TJ\n1005A02\n##END=\n"
    s = read_spectrum(text)
    assert s.absorbance.tolist() == [100, 100, 100, 101, 101, 102]
    assert s.wavenumber_cm1.tolist() == [1000, 1001, 1002, 1003, 1004, 1005]


def test_rounded_deltax_does_not_trip_the_line_step_check() -> None:
    # DELTAX=10.5 (5 % off the true 10) over 40 DIF lines: only a note, the data are fine
    text = dif_lines(40).replace("##DELTAX=10", "##DELTAX=10.5")
    s = read_spectrum(text)
    assert s.points == 361
    assert any("##DELTAX=10.5 disagrees" in note for note in s.meta.notes)
