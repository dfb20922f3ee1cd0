"""AFFN data lines read by polars (when this process reads text with it) give the very same
doubles as numpy's parser and Python's float(), or are left to numpy's parser; never other
numbers, never another error. Correct rounding of decimal text is the reference (IEEE 754
round-to-nearest-even, which float() implements: common practice)."""
from __future__ import annotations

import io
import sys

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from processing.errors import SpectrumFileError
from processing.readers import delimited, jcamp, jcamp_asdf, text_engine
from processing.readers.jcamp_write import write_jcamp
from processing.spectrum import Spectrum


@pytest.fixture
def polars_in_use(monkeypatch):  # type: ignore[no-untyped-def]
    """This process reads text with polars, and every AFFN section goes to it."""
    pytest.importorskip("polars")
    monkeypatch.setattr(delimited, "_polars_allowed", True)
    monkeypatch.setattr(jcamp_asdf, "POLARS_SECTION_BYTES", 0)
    assert text_engine.polars_in_use() is not None


@pytest.fixture
def numpy_only(monkeypatch):  # type: ignore[no-untyped-def]
    monkeypatch.setattr(delimited, "_polars_allowed", False)
    assert text_engine.polars_in_use() is None


def _bits(values: np.ndarray) -> list[int]:
    return np.ascontiguousarray(values, dtype=np.float64).view(np.uint64).tolist()


_digits = st.text("0123456789", min_size=1, max_size=20)
# Written numbers as AFFN writers print them: signs, leading dots, trailing dots, exponents,
# 17 significant digits and more, leading zeros, extreme exponents (overflow, subnormal, zero).
_number = st.builds(
    lambda sign, whole, dot, fraction, exponent: sign + whole + dot + fraction + exponent,
    st.sampled_from(["", "-", "+"]),
    st.one_of(st.just(""), _digits),
    st.sampled_from([".", ""]),
    st.one_of(st.just(""), _digits),
    st.one_of(
        st.just(""),
        st.builds(lambda e, s, d: e + s + d, st.sampled_from("eE"), st.sampled_from("+-"),
                  st.integers(0, 400).map(str)),
    ),
).filter(lambda text: any(c.isdigit() for c in text.split("e")[0].split("E")[0]))
_from_floats = st.floats(allow_nan=False, allow_infinity=False).map(repr).map(
    lambda text: text if "e" not in text or "e-" in text or "e+" in text else text.replace("e", "e+")
)
# What a damaged file may hold between separators: junk over the AFFN alphabet, the words both
# C parsers know (inf, nan, infinity), near misses and other letters, other whitespace.
_junk = st.one_of(
    st.text("0123456789.+-eE", min_size=1, max_size=8),
    st.sampled_from(["inf", "-inf", "+nan", "NaN", "Infinity", "infinit", "nan(1)", "0x10", "1_0", "1d5", "1.5f",
                     "1\x0b2", "\x0c", "1\t2", "\xe9", "\xff", "i", "n", "iNf"]),
    st.text("0123456789.+-eEinfatyINFATYxpd_", min_size=1, max_size=8),
)


@settings(max_examples=600, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.lists(st.one_of(_number, _from_floats, _junk), min_size=1, max_size=6), min_size=1, max_size=8),
       st.sampled_from([" ", "  ", " , ", "\t", " \t "]))
def test_polars_gives_the_same_doubles_as_numpy_and_float_or_declines(
    polars_in_use: None, lines: list[list[str]], separator: str
) -> None:
    text = "\n".join(separator.join(tokens) for tokens in lines).encode("latin-1") + b"\n"
    text = text.replace(b",", b" ")  # as tokenize hands text over
    marked = text.replace(b"\n", jcamp_asdf._MARKER)
    try:
        by_numpy = jcamp_asdf._parse_numbers(marked)
    except ValueError:
        by_numpy = None
    try:
        by_route = jcamp_asdf._affn_numbers(text)
    except ValueError:
        by_route = None
    if by_numpy is None:
        assert by_route is None  # polars never reads what numpy's parser refuses
        return
    assert by_route is not None
    assert np.array_equal(np.isnan(by_route), np.isnan(by_numpy))  # line ends (and spelled nan)
    assert _bits(by_route[~np.isnan(by_route)]) == _bits(by_numpy[~np.isnan(by_numpy)])
    tokens = [token for token in marked.decode("latin-1").split() if token]
    try:
        expected = np.array([float(token) for token in tokens])  # Python's correctly rounded reading
    except ValueError:
        return  # numpy's parser read tokens float() does not (separated by signs): compared above
    if expected.size == by_numpy.size:
        assert np.array_equal(np.isnan(by_route), np.isnan(expected))
        assert _bits(by_route[~np.isnan(expected)]) == _bits(expected[~np.isnan(expected)])


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.one_of(_number, _from_floats), min_size=1, max_size=40))
def test_valid_numbers_are_read_by_polars_to_floats_bits(polars_in_use: None, tokens: list[str]) -> None:
    """Every well-formed number goes through polars (numpy's parser is not asked) and comes
    back as float() reads it: 17-digit values, exponents, signs, leading and trailing dots,
    subnormals, overflow to infinity."""
    text = (" ".join(tokens) + "\n").encode()
    asked: list[bytes] = []
    real = jcamp_asdf._parse_numbers

    def record(data: bytes) -> np.ndarray:
        asked.append(data)
        return real(data)

    jcamp_asdf._parse_numbers = record  # type: ignore[assignment]
    try:
        values = jcamp_asdf._affn_numbers(text)
    finally:
        jcamp_asdf._parse_numbers = real  # type: ignore[assignment]
    assert asked == []
    assert _bits(values[:-1]) == _bits(np.array([float(token) for token in tokens]))
    assert np.isnan(values[-1])  # the line end


def test_edge_numbers_read_exactly(polars_in_use: None) -> None:
    # Values whose decimal text sits next to a rounding boundary or a range limit of IEEE 754
    # binary64 (IEEE 754-2008; limits as in sys.float_info).
    tokens = [
        "2.2250738585072014e-308", "2.2250738585072011e-308", "4.9406564584124654e-324", "2.4703282292062328e-324",
        "1.7976931348623157e+308", "1.7976931348623159e+308", "9007199254740993", "9007199254740992.5",
        "0.30000000000000004", "0.1", "-0.0", "+.5", "5.", "-.00000000000000000000000000001", "1e+400", "1e-400",
        "123456789012345678901234567890", "0.000000000000000000000000000000000000000000001",
    ]
    values = jcamp_asdf._affn_numbers((" ".join(tokens) + "\n").encode())
    assert _bits(values[:-1]) == _bits(np.array([float(token) for token in tokens]))
    assert sys.float_info.max == float(tokens[4])


def _written(points: int, digits: int | None) -> bytes:
    x = 1850.0 + 0.02 * np.arange(points)
    y = 0.2 + 0.1 * np.sin(x / 3.0) * np.exp(-((x - 1900.0) / 30.0) ** 2) + 1e-6 * np.cos(x)
    y[::97] *= 1e-9  # values printed with exponents
    buffer = io.BytesIO()
    write_jcamp(buffer, Spectrum.from_y(x, y, "absorbance"), form="affn", digits=digits)
    return buffer.getvalue()


@pytest.mark.parametrize("digits", [13, 17, None])
def test_whole_files_read_the_same_with_and_without_polars(monkeypatch, digits: int | None) -> None:  # type: ignore[no-untyped-def]
    pytest.importorskip("polars")
    data = _written(20_000, digits)
    assert len(data) > jcamp_asdf.POLARS_SECTION_BYTES  # the usual threshold: polars reads it
    monkeypatch.setattr(delimited, "_polars_allowed", False)
    by_numpy = jcamp.parse(data, "a.jdx")
    monkeypatch.setattr(delimited, "_polars_allowed", True)
    assert text_engine.polars_in_use() is not None
    by_polars = jcamp.parse(data, "a.jdx")
    assert _bits(by_polars.wavenumber_cm1) == _bits(by_numpy.wavenumber_cm1)
    assert _bits(by_polars.absorbance) == _bits(by_numpy.absorbance)
    assert by_polars.meta == by_numpy.meta


@pytest.mark.parametrize("bad", [b"1.5.3", b"12x4", b"--5", b"7e5", b"nan", b"1.0\t2.0"])
def test_a_bad_token_gives_the_same_error_with_and_without_polars(monkeypatch, bad: bytes) -> None:  # type: ignore[no-untyped-def]
    """One line naming the file and the line, as without polars (or the same spectrum, where
    numpy's parser reads the token: a tab separates values)."""
    pytest.importorskip("polars")
    lines = _written(20_000, 13).split(b"\n")
    at = 5000  # a data line
    lines[at] = lines[at].rsplit(b" ", 1)[0] + b" " + bad
    data = b"\n".join(lines)
    outcomes = []
    for allowed in (False, True):
        monkeypatch.setattr(delimited, "_polars_allowed", allowed)
        try:
            spectrum = jcamp.parse(data, "bad.jdx")
            outcomes.append(("read", _bits(spectrum.absorbance), spectrum.meta.notes))
        except SpectrumFileError as error:
            outcomes.append(("error", str(error), ()))
    assert outcomes[0] == outcomes[1]
    if bad in (b"1.5.3", b"--5"):
        assert outcomes[0][0] == "error" and outcomes[0][1].startswith(f"bad.jdx:{at + 1}: cannot read the numbers")
