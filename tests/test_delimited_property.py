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


@settings(max_examples=150, deadline=4000, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(st.tuples(st.floats(0.01, 1e4), finite), min_size=2, max_size=30, unique_by=lambda r: r[0]),
    st.sampled_from([(",", False), (";", False), ("\t", False), (";", True), ("\t", True)]),
    st.sampled_from(["{!r}", "{:.17g}", "{:.4f}", "{:.6e}", '"{!r}"', " {!r}", "{!r} ", "+{!r}"]),
    st.sampled_from(["\n", "\r\n"]),
    st.lists(mutation, max_size=2),
)
def test_polars_reads_what_numpy_reads_to_the_same_bits_or_leaves_it(
    rows: list[tuple[float, float]], layout: tuple[str, bool], style: str, ending: str,
    steps: list[tuple[str, int, object]],
) -> None:
    """The polars pass (the fast-text extra) and numpy's reader on the same body: polars either
    gives the very same doubles or declines (then numpy's reader and the slow pass decide, as
    without polars); it never gives other numbers. Written numbers with their usual quirks:
    shortest repr, 17 digits, rounded, exponent, quoted, padded, a plus sign, a decimal comma,
    CRLF; some bodies then damaged."""
    import pytest

    pytest.importorskip("polars")
    separator, decimal_comma = layout

    def text(value: float) -> str:
        written = style.format(value)
        return written.replace(".", ",") if decimal_comma else written

    body = mutate(ending.join(f"{text(x)}{separator}{text(y)}" for x, y in sorted(rows)).encode(), steps)
    row_format = delimited._RowFormat(separator, decimal_comma, 2, False)
    end = len(body.rstrip())
    by_polars = delimited._polars_table(body, 0, end, row_format, 1) if end else None
    if by_polars is None:
        return
    assert delimited._TEXT_READER_WORKS  # numpy's C reader, the reference here
    by_numpy = delimited._loadtxt_table(body, 0, end, row_format, 1)
    if by_numpy is None:  # numpy refused: the slow pass is the reference
        by_numpy = delimited._slow_table(body[:end], row_format, 1, "a.csv")
    assert by_polars.rows == by_numpy.rows
    assert np.array_equal(by_polars.x, by_numpy.x, equal_nan=True)
    assert np.array_equal(by_polars.y, by_numpy.y, equal_nan=True)


def test_without_polars_large_bodies_are_read_by_numpy(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """The fast-text extra is optional: without it (import fails) a body over the import size
    is read by numpy's reader, to the same numbers."""
    import sys

    x = 2000.0 + 0.001 * np.arange(400_000)
    data = ("x,A\n" + "".join(f"{a!r},{a / 1e4!r}\n" for a in x.tolist())).encode()
    monkeypatch.setattr(delimited, "POLARS_IMPORT_BYTES", 1000)
    monkeypatch.setitem(sys.modules, "polars", None)  # `import polars` raises ImportError
    assert delimited.polars_module(len(data)) is None
    spectrum = delimited.parse(data, "big.csv")
    assert spectrum.wavenumber_cm1.tolist() == x.tolist()


def test_whole_files_read_the_same_with_and_without_polars(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """Files with a title and header, a footer, a byte-order mark, CRLF, trailing blank lines,
    a decimal comma, quoted numbers: the same spectrum and notes whether polars reads the body
    (in place or from a copy) or numpy's reader does."""
    import sys

    import pytest

    pytest.importorskip("polars")
    x = 2000.0 + 0.125 * np.arange(300)
    y = 0.5 + 0.01 * np.sin(x)
    rows = [f"{a!r},{b!r}" for a, b in zip(x.tolist(), y.tolist())]
    files = [
        "Lab export\ncm-1,A\n" + "\n".join(rows) + "\n",
        "\ufeff" + "\n".join(rows) + "\n",
        "cm-1,A\r\n" + "\r\n".join(rows) + "\r\n",
        "cm-1,A\n" + "\n".join(rows) + "\n\n\n",
        "cm-1,A\n" + "\n".join(rows) + "\nEND OF DATA\n",
        "cm-1;A\n" + "\n".join(row.replace(",", ";").replace(".", ",") for row in rows) + "\n",
        "cm-1,A\n" + "\n".join(f'"{a!r}","{b!r}"' for a, b in zip(x.tolist(), y.tolist())) + "\n",
        "\n".join(rows),
    ]
    monkeypatch.setattr(delimited, "POLARS_IMPORT_BYTES", 0)
    for text in files:
        data = text.encode("utf-8")
        with_polars = delimited.parse(data, "a.csv")
        with monkeypatch.context() as hidden:
            hidden.setitem(sys.modules, "polars", None)
            without = delimited.parse(data, "a.csv")
        assert with_polars.wavenumber_cm1.tolist() == without.wavenumber_cm1.tolist() == x.tolist(), text[:20]
        assert np.array_equal(with_polars.absorbance, without.absorbance)
        assert with_polars.meta.notes == without.meta.notes


def test_measured_and_demo_csv_files_read_the_same_with_and_without_polars(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """The measured teaching-lab spectra (tests/data/realdata) and the demo's CSV exports: the
    same doubles and notes whether polars reads the body (forced, as in a station worker) or
    numpy's reader does."""
    import sys
    from pathlib import Path

    import pytest

    pytest.importorskip("polars")
    root = Path(__file__).resolve().parents[1]
    files = sorted((root / "tests" / "data" / "realdata").glob("*.csv")) + sorted((root / "sample_runs").glob("*.csv"))
    assert len(files) >= 6
    monkeypatch.setattr(delimited, "POLARS_IMPORT_BYTES", 0)
    polars_pass = delimited._polars_table
    read_by_polars: list[str] = []

    def counted(*args):  # type: ignore[no-untyped-def]
        table = polars_pass(*args)
        if table is not None:
            read_by_polars.append(path.name)
        return table

    monkeypatch.setattr(delimited, "_polars_table", counted)
    for path in files:
        data = path.read_bytes()
        with_polars = delimited.parse(data, path.name)
        with monkeypatch.context() as hidden:
            hidden.setitem(sys.modules, "polars", None)
            without = delimited.parse(data, path.name)
        assert np.array_equal(with_polars.wavenumber_cm1, without.wavenumber_cm1), path.name
        assert np.array_equal(with_polars.absorbance, without.absorbance), path.name
        assert with_polars.meta.notes == without.meta.notes, path.name
    assert len(read_by_polars) >= len(files) - 1  # all but the export with a separator ending each row


@settings(max_examples=300, deadline=4000, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(st.tuples(st.floats(0.01, 1e4), finite), min_size=1, max_size=40, unique_by=lambda r: r[0]),
    st.sampled_from([(",", False, False), (";", False, False), ("\t", False, False), (" ", False, False),
                     (";", True, False), (",", False, True), ("\t", True, True)]),
    st.sampled_from(["{!r}", "{:.4f}", "{:.6e}", '"{!r}"', " {!r}", "+{!r}"]),
    st.sampled_from(["\n", "\r\n"]),
    st.integers(1, 200),
    st.lists(mutation, max_size=3),
)
def test_a_body_read_in_pieces_gives_what_one_piece_gives(
    rows: list[tuple[float, float]], layout: tuple[str, bool, bool], style: str, ending: str, piece: int,
    steps: list[tuple[str, int, object]],
) -> None:
    """numpy's reader given the body in pieces of `piece` bytes (cut after a line end, never
    inside quotes) reads the very same doubles as given the whole body at once, or refuses
    both times: written numbers with their quirks (quoted, padded, a plus sign, a decimal
    comma, a separator ending each row, CRLF), some bodies damaged (blank lines, a quote left
    open, ragged rows)."""
    separator, decimal_comma, trailing = layout

    def text(value: float) -> str:
        written = style.format(value)
        return written.replace(".", ",") if decimal_comma else written

    end_of_row = separator if trailing else ""
    body = mutate(ending.join(f"{text(x)}{separator}{text(y)}{end_of_row}" for x, y in rows).encode(), steps)
    row_format = delimited._RowFormat(separator, decimal_comma, 2, trailing)
    end = len(body.rstrip())
    if end == 0:
        return
    whole = delimited._read_rows(
        memoryview(delimited._clean_body(body[:end], row_format, delimited._line_ending(body, 0, end))), row_format
    )
    import pytest

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(delimited, "PIECE_BYTES", piece)
        pieces = delimited._loadtxt_table(body, 0, end, row_format, 1)
    if whole is None or whole.ndim != 2 or whole.shape[0] == 0 or whole.shape[1] != 2:
        assert pieces is None
        return
    assert pieces is not None
    assert pieces.x.tolist() == whole[:, 0].tolist() and pieces.y.tolist() == whole[:, 1].tolist()
    assert pieces.x.flags.c_contiguous and pieces.y.flags.c_contiguous and pieces.owned


def test_pieces_are_never_cut_inside_quotes(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """numpy's reader takes a line break inside quotes as part of the field (`1,"\\n2"` is one
    row, 1 and 2): a piece cut there would read other rows, so pieces run on to where the
    quotes close."""
    rows = [f'{2000 + i},"\n{i / 7!r}"' if i % 5 == 2 else f"{2000 + i},{i / 7!r}" for i in range(60)]
    body = "\n".join(rows).encode()
    row_format = delimited._RowFormat(",", False, 2, False)
    whole = delimited._read_rows(memoryview(body), row_format)
    assert whole is not None and whole.shape == (60, 2)  # the reference: one row per quoted pair
    for piece in (1, 5, 17, 40):
        monkeypatch.setattr(delimited, "PIECE_BYTES", piece)
        table = delimited._loadtxt_table(body, 0, len(body), row_format, 1)
        assert table is not None, piece
        assert table.x.tolist() == whole[:, 0].tolist() and table.y.tolist() == whole[:, 1].tolist(), piece


def test_arrays_sized_from_the_first_piece_grow_and_shrink_to_the_rows(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """x and y are sized from the first piece's rows per byte: long rows first (too few rows
    guessed for the short rows after them: the arrays grow) and short rows first (too many:
    cut to the rows read) both give exactly the rows of the body."""
    short = [f"{i},{i % 7}" for i in range(3000)]
    long = [f"{3000 + i + 0.123456789012345!r},{i / 7!r}" for i in range(3000)]
    row_format = delimited._RowFormat(",", False, 2, False)
    monkeypatch.setattr(delimited, "PIECE_BYTES", 4096)
    for rows in (long + [f"{6000 + i},{i}" for i in range(3000)], short + [f"{3000 + i + 0.5!r},{i / 7!r}" for i in range(3000)]):
        body = "\n".join(rows).encode()
        table = delimited._loadtxt_table(body, 0, len(body), row_format, 1)
        assert table is not None
        assert table.x.size == table.y.size == 6000
        assert table.x.tolist() == [float(row.split(",")[0]) for row in rows]
        assert table.y.tolist() == [float(row.split(",")[1]) for row in rows]


def test_a_process_imports_polars_once_numpy_has_cost_it_the_import_not_before() -> None:
    """A one-shot process reading one body keeps numpy's reader (polars' import alone is 32 MB
    resident: a 1M-point `bandwatch process` must stay under 100 MB) unless that body is past
    POLARS_IMPORT_BYTES; once numpy's reader has taken POLARS_IMPORT_SECONDS in this process,
    the next body brings polars in. Run in a fresh interpreter: this one may have imported
    polars already. (Thresholds scaled: any parse takes more than a nanosecond, none a day.)"""
    import subprocess
    import sys

    import pytest

    pytest.importorskip("polars")
    code = (
        "import sys\n"
        "from processing.readers import delimited\n"
        "delimited.POLARS_IMPORT_BYTES = 50_000\n"
        "delimited.POLARS_IMPORT_SECONDS = float(sys.argv[2])\n"
        "small = b'x,A\\n' + b''.join(b'%d,0.5\\n' % (1000 + i) for i in range(200))\n"
        "huge = b'x,A\\n' + b''.join(b'%d,0.125\\n' % (1000 + i) for i in range(9000))\n"
        "seen = []\n"
        "for body in (sys.argv[1].split(',')):\n"
        "    table = delimited.parse({'small': small, 'huge': huge}[body], 'a.csv')\n"
        "    assert table.wavenumber_cm1.size in (200, 9000)\n"
        "    seen.append('polars' in sys.modules)\n"
        "print(seen)\n"
    )
    for bodies, seconds, expected in (
        ("small,small,small", "1e-9", [False, True, True]),
        ("small,small,small", "86400", [False, False, False]),
        ("huge", "86400", [True]),
    ):
        done = subprocess.run([sys.executable, "-c", code, bodies, seconds], capture_output=True, text=True, check=True)
        assert done.stdout.strip() == str(expected), (bodies, seconds)


def test_numpy_reader_only_holds_polars_back_inside_and_gives_it_back_after() -> None:
    """The benchmarks time numpy's reader (a one-shot run's) in a process that reads with polars:
    inside the block no body goes to polars, after it the process's own choice is back."""
    import pytest

    pytest.importorskip("polars")
    from processing.readers import delimited

    assert delimited.polars_module(delimited.POLARS_IMPORT_BYTES) is not None  # imports it
    with delimited.numpy_reader_only():
        assert delimited.polars_module(delimited.POLARS_IMPORT_BYTES) is None
        assert not delimited.polars_in_use()
    assert delimited.polars_in_use()
