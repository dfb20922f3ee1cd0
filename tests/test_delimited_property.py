"""Mutated delimited files: a valid Spectrum or a SpectrumFileError, never anything else."""
from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from processing.errors import SpectrumFileError
from processing.readers import delimited, parse_bytes
from processing.spectrum import Spectrum


def _valid_files() -> list[bytes]:
    x = 2000.0 + 0.125 * np.arange(40)
    y = 0.5 + 0.01 * np.sin(x)
    comma = "cm-1,A\n" + "".join(f"{a!r},{b!r}\n" for a, b in zip(x.tolist(), y.tolist()))
    quirky = "\ufeffLab export\r\nWavenumber (cm-1);%T;\r\n" + "".join(
        f"{a:.2f};{100 * b:.3f};\r\n".replace(".", ",")
        for a, b in zip(x[::-1].tolist(), y.tolist())
    )
    tabbed = "".join(f"{a:.3f}\t{b:.5f}\t7\n" for a, b in zip(x.tolist(), y.tolist())) + "END\n"
    return [comma.encode(), quirky.encode("utf-8"), tabbed.encode()]


VALID = _valid_files()

mutation = st.one_of(
    st.tuples(st.just("flip"), st.integers(0, 10_000), st.integers(0, 255)),
    st.tuples(st.just("delete"), st.integers(0, 10_000), st.integers(1, 40)),
    st.tuples(st.just("truncate"), st.integers(0, 10_000), st.just(0)),
    st.tuples(st.just("insert"), st.integers(0, 10_000), st.binary(min_size=1, max_size=12)),
)


def mutate(data: bytes, steps: list[tuple[str, int, object]]) -> bytes:
    buffer = bytearray(data)
    for kind, where, arg in steps:
        at = where % (len(buffer) + 1)
        if kind == "flip" and buffer:
            buffer[at % len(buffer)] = int(arg)  # type: ignore[call-overload]
        elif kind == "delete":
            del buffer[at : at + int(arg)]  # type: ignore[call-overload]
        elif kind == "truncate":
            del buffer[at:]
        elif kind == "insert":
            buffer[at:at] = arg  # type: ignore[assignment]
    return bytes(buffer)


@settings(max_examples=200, deadline=2000, suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(range(len(VALID))), st.lists(mutation, min_size=1, max_size=4))
def test_mutated_files_read_or_fail_cleanly(
    which: int, steps: list[tuple[str, int, object]]
) -> None:
    data = mutate(VALID[which], steps)
    readers = (lambda: delimited.parse(data, "mutant.csv"), lambda: parse_bytes(data, "mutant.csv"))
    for read in readers:
        try:
            result = read()
        except SpectrumFileError as error:
            assert str(error).startswith("mutant.csv")
            assert "\n" not in str(error)
            continue
        assert isinstance(result, Spectrum)
        assert result.points >= 2
        assert np.all(np.diff(result.wavenumber_cm1) > 0)
        assert np.all(np.isfinite(result.absorbance))


def test_unmutated_files_are_valid() -> None:
    # Guards the property above: the starting files must themselves read.
    for data in VALID:
        assert delimited.parse(data, "valid.csv").points == 40


finite = st.floats(allow_nan=False, allow_infinity=False, width=64)


@settings(max_examples=100, deadline=2000)
@given(
    st.lists(
        st.tuples(st.floats(0.01, 1e4), finite), min_size=2, max_size=30, unique_by=lambda r: r[0]
    ),
    st.sampled_from([",", ";", "\t", " "]),
    st.booleans(),
)
def test_fast_and_line_by_line_passes_read_the_same_exact_numbers(
    rows: list[tuple[float, float]], separator: str, trailing: bool
) -> None:
    rows.sort()
    end = separator if trailing and separator != " " else ""
    lines = [f"{x!r}{separator}{y!r}{end}" for x, y in rows]
    clean = ("x" + separator + "A\n" + "\n".join(lines) + "\n").encode()
    # A blank line in the middle sends the body through the line-by-line pass instead.
    middle = len(lines) // 2
    spaced = ("x" + separator + "A\n" + "\n".join(lines[:middle] + [""] + lines[middle:])).encode()
    fast, slow = delimited.parse(clean, "a.csv"), delimited.parse(spaced, "b.csv")
    # repr text reads back to the identical double (shortest round-trip repr, Python docs).
    assert fast.wavenumber_cm1.tolist() == [x for x, _ in rows]
    assert fast.absorbance.tolist() == [y for _, y in rows]
    assert np.array_equal(slow.wavenumber_cm1, fast.wavenumber_cm1)
    assert np.array_equal(slow.absorbance, fast.absorbance)
