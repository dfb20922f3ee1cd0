"""Delimited text spectra (CSV, TSV, semicolon, whitespace columns): reader and CSV writer.

The reader is the registry's catch-all. It finds where the numbers start (after a byte-order
mark, free text and a column header), detects the separator and decimal mark from the first
rows, drops trailing text after the data (with a note; text followed by more data is an
error), then parses the numeric body in one C pass: numpy's text-reading engine (the one behind
`numpy.loadtxt`) streams the bytes already in memory, with `numpy.fromstring` as the fallback.
Only when that fast pass refuses the body, or its values fail a check, does a line-by-line pass
run, to name the first offending line.

Inside bandwatch x is wavenumber in cm-1; micrometre and nanometre columns are converted here
(cm-1 = 1e4 / um = 1e7 / nm) and y becomes decadic absorbance via `Spectrum`'s conversion.
"""
from __future__ import annotations

import contextlib
import importlib
import io
import math
import re
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from types import ModuleType
from typing import BinaryIO, TextIO

import numpy as np

from processing.errors import SpectrumFileError
from processing.order_stats import median
from processing.spectrum import FileMetadata, Spectrum, checked_spectrum, handed_over, reverse_in_place, to_absorbance

FORMAT_NAME = "delimited text"
EXTENSIONS: tuple[str, ...] = (".csv", ".txt", ".tsv", ".dat", ".prn", ".asc")

UTF8_BOM = b"\xef\xbb\xbf"
# Lines of free text (titles, export banners) allowed before the first data row.
MAX_LEADING_TEXT_LINES = 60
# Lines of trailing text (footers) allowed after the last data row.
MAX_TRAILING_TEXT_LINES = 60
# Rows sampled at the top of the data to settle separator and decimal mark.
PROBE_ROWS = 50
# x steps varying by more than this fraction of the mean step get a note (values rounded
# off their grid, e.g. 2 decimals on a 0.125 cm-1 grid: +-0.005 is 4 %).
ROUNDING_NOTE_FRACTION = 1e-3

_BLANK = re.compile(rb"\s*")
NO_ROWS = "no rows of numbers (x and y columns)"
SEPARATOR_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", " ": "whitespace"}

_NUMBER = re.compile(
    r"[+-]?(?:(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?|nan|inf|infinity)\Z", re.IGNORECASE
)
# A header token keeps a parenthesised unit with its name: "Wavenumber (cm-1)".
_HEADER_TOKEN = re.compile(r"[^\s(\[]+(?:\s*[(\[][^)\]]*[)\]])?|[(\[][^)\]]*[)\]]")


def _word(pattern: str) -> re.Pattern[str]:
    """A case-insensitive pattern that must not touch other letters on either side."""
    return re.compile(rf"(?<![a-zµμ])(?:{pattern})(?![a-z])", re.IGNORECASE)


_X_CM1 = re.compile(
    r"cm\s*(?:-|−|\^\s*-|⁻)\s*(?:1|¹)|1\s*/\s*cm|wave\s*numbers?|wavenumbers?", re.IGNORECASE
)
_X_UM = _word(r"µm|μm|um|microns?|micrometres?|micrometers?")
_X_NM = _word(r"nm|nanometres?|nanometers?")
_X_WAVELENGTH = _word(r"wavelength|lambda|λ")
# "Resolution: 0.5 cm-1", "resolution,4", "Resolution = 0,25 1/cm" in free text above the data.
_RESOLUTION = re.compile(
    r"resolution\s*(?:\([^)]*\))?\s*[:=,;\t ]\s*(\d+(?:[.,]\d+)?)"
    r"(?:\s*(?:cm-1|1/cm|cm\^-1|cm⁻¹)(?!\w)|(?!\s*[A-Za-zµ%\d.,]))",
    re.IGNORECASE,
)
_Y_PERCENT = re.compile(r"%|percent", re.IGNORECASE)
_Y_ABSORBANCE = _word(r"a|abs|absorbance|absorption|au|a\.u\.")
_Y_TRANSMITTANCE = _word(r"t|trans|transmittance|transmission|transmissivity")


@dataclass(frozen=True)
class _RowFormat:
    """How one data row is laid out."""

    separator: str  # ",", ";", "\t" or " " (any run of whitespace)
    decimal_comma: bool
    columns: int
    trailing_separator: bool


@dataclass(frozen=True)
class _Table:
    """The x column and the chosen y column of the numeric body, and the file line of each row.

    Only these two columns are kept: a (rows, columns) table of a million rows would hold 16 MB
    or more through the whole analysis, for columns nobody reads."""

    x: np.ndarray
    y: np.ndarray
    first_line: int  # line of row 0 when rows are contiguous
    row_lines: np.ndarray | None  # per-row line numbers when rows are not contiguous
    owned: bool = False  # x and y are this reader's own contiguous arrays: convertible in place

    @property
    def rows(self) -> int:
        return int(self.x.size)

    def line_of(self, row: int) -> int:
        if self.row_lines is not None:
            return int(self.row_lines[row])
        return self.first_line + row


def _columns(values: np.ndarray, y_column: int, first_line: int, row_lines: np.ndarray | None = None) -> _Table:
    """The x and y columns of a whole (rows, columns) table."""
    return _Table(values[:, 0], values[:, y_column], first_line, row_lines)


# ----------------------------------------------------------------------------- helpers


def _decode_line(raw: bytes) -> str:
    """Text of one header or probe line; tolerant of Latin-1 exports (µ as 0xB5)."""
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        return raw.decode("cp1252", errors="replace")


def _split_fields(text: str, separator: str) -> list[str]:
    if separator == " ":
        return text.split()
    return text.split(separator)


def _number(field: str, decimal_comma: bool) -> float | None:
    """The float in one field, or None when the field is not a plain number."""
    token = field.strip().strip('"')
    if decimal_comma:
        token = token.replace(",", ".")
    if not _NUMBER.match(token):
        return None
    return float(token)


def _row_format(text: str) -> _RowFormat | None:
    """The layout of a row of 2+ numbers, or None when the line is not such a row."""
    stripped = text.strip()
    if not stripped:
        return None
    candidates = [sep for sep in ("\t", ";", ",") if sep in stripped] + [" "]
    for separator in candidates:
        fields = _split_fields(stripped, separator)
        trailing = False
        if separator != " " and len(fields) > 1 and not fields[-1].strip():
            fields = fields[:-1]
            trailing = True
        if len(fields) < 2:
            continue
        decimal_comma = separator != "," and any("," in field for field in fields)
        if decimal_comma and any("." in field for field in fields):
            continue
        if all(_number(field, decimal_comma) is not None for field in fields):
            return _RowFormat(separator, decimal_comma, len(fields), trailing)
    return None


def _row_values(text: str, layout: _RowFormat) -> list[float] | str:
    """The numbers of one row in `layout`, or a sentence saying what is wrong with it."""
    fields = _split_fields(text.strip(), layout.separator)
    if layout.separator != " " and len(fields) > 1 and not fields[-1].strip():
        fields = fields[:-1]
    values: list[float] = []
    for position, field in enumerate(fields, start=1):
        value = _number(field, layout.decimal_comma)
        if value is None:
            shown = field.strip()[:40] or "(empty)"
            return f"field {position} {shown!r} is not a number"
        values.append(value)
    if len(values) != layout.columns:
        count = f"{len(values)} value" + ("" if len(values) == 1 else "s")
        return f"row has {count}, expected {layout.columns} like the rows above"
    return values


def _lines_with_offsets(data: bytes, start: int, limit: int) -> Iterator[tuple[int, int, bytes]]:
    """Up to `limit` lines from `start` as (0-based index from `start`, byte offset, raw), one
    at a time (a caller that finds what it looks for early reads no further)."""
    position = start
    index = 0
    while position < len(data) and index < limit:
        end = data.find(b"\n", position)
        if end < 0:
            end = len(data)
        yield index, position, data[position:end]
        position = end + 1
        index += 1


# ----------------------------------------------------------------------------- identify


def identify(head: bytes) -> bool:
    """True when, after a BOM and any free text, the first lines are rows of 2+ numbers."""
    if head.startswith(UTF8_BOM):
        head = head[len(UTF8_BOM) :]
    if head.lstrip().startswith(b"##") or b"\x00" in head:
        return False
    if b"\n" not in head and b"\r" in head:
        head = head.replace(b"\r", b"\n")
    lines = head.split(b"\n")
    if len(lines) > 1 and len(head) >= 4096:
        lines = lines[:-1]  # the last line may be cut off by the head limit
    rows = 0
    layout: _RowFormat | None = None
    for raw in lines[: MAX_LEADING_TEXT_LINES + 3]:
        text = _decode_line(raw)
        if not text.strip():
            continue
        found = _row_format(text)
        if found is None:
            if rows:
                break
            continue
        if layout is None:
            layout = found
        elif (found.separator, found.columns) != (layout.separator, layout.columns):
            break
        rows += 1
        if rows >= 3:
            break
    return rows >= 2 or (rows == 1 and len(lines) <= MAX_LEADING_TEXT_LINES)


# ----------------------------------------------------------------------------- parse


def parse(data: bytes, source: str) -> Spectrum:
    """Read delimited text into a `Spectrum`; any problem is a `SpectrumFileError`."""
    try:
        # Huge but finite values may overflow sums and steps: checks handle that themselves.
        with np.errstate(over="ignore", invalid="ignore"):
            return _parse(data, source)
    except SpectrumFileError:
        raise
    except (ValueError, TypeError, IndexError, OverflowError, UnicodeError) as error:
        raise SpectrumFileError(source, f"cannot be read as delimited text ({error})") from None


def _normalise_bytes(data: bytes, source: str, notes: list[str]) -> tuple[bytes, int]:
    """(data, where the text starts): skips a byte-order mark (no copy), turns UTF-16 into
    UTF-8 and lone CR line endings into LF."""
    start = 0
    if data.startswith(UTF8_BOM):
        start = len(UTF8_BOM)
        notes.append("UTF-8 byte-order mark skipped")
    elif data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            data = data.decode("utf-16").encode("utf-8")
        except UnicodeDecodeError:
            raise SpectrumFileError(source, "starts like UTF-16 text but does not decode") from None
        notes.append("UTF-16 text decoded")
    if _BLANK.fullmatch(data, start):
        raise SpectrumFileError(source, "file is empty")
    # NUL bytes near the top mean a binary file; one deeper down is a bad field in its row.
    if b"\x00" in data[: start + 4096]:
        line = data.count(b"\n", 0, data.index(b"\x00")) + 1
        raise SpectrumFileError(source, "binary data (NUL bytes), not delimited text", line)
    if b"\n" not in data and b"\r" in data:
        data = data.replace(b"\r", b"\n")
    return data, start


def _find_data_start(
    data: bytes, start: int, source: str
) -> tuple[int, int, _RowFormat, list[tuple[int, str]]]:
    """(byte offset, 1-based line, layout, [(line, text) of non-blank lines before data])."""
    before: list[tuple[int, str]] = []
    for index, offset, raw in _lines_with_offsets(data, start, 10 * MAX_LEADING_TEXT_LINES):
        text = _decode_line(raw)
        if not text.strip():
            continue
        layout = _row_format(text)
        if layout is not None:
            return offset, index + 1, layout, before
        before.append((index + 1, text.strip()))
        if len(before) > MAX_LEADING_TEXT_LINES:
            raise SpectrumFileError(
                source,
                f"no rows of numbers (x and y columns) in the first {len(before)} lines of text",
            )
    if len(before) == 1:
        raise SpectrumFileError(source, f"{NO_ROWS}: one line of text", before[0][0])
    raise SpectrumFileError(source, f"{NO_ROWS}; the file holds only text")


def _settle_decimal_mark(data: bytes, offset: int, layout: _RowFormat) -> _RowFormat:
    """Decide the decimal mark from the first rows, not just the first (it may be integers)."""
    if layout.separator == "," or layout.decimal_comma:
        return layout
    for _, _, raw in _lines_with_offsets(data, offset, PROBE_ROWS):
        row = _row_format(_decode_line(raw))
        if row is not None and row.separator == layout.separator and row.decimal_comma:
            return _RowFormat(layout.separator, True, layout.columns, layout.trailing_separator)
    return layout


def _starts_with_number(text: str, layout: _RowFormat) -> bool:
    fields = _split_fields(text, layout.separator)
    return bool(fields) and _number(fields[0], layout.decimal_comma) is not None


def _split_trailing_text(data: bytes, offset: int, layout: _RowFormat) -> tuple[int, list[str]]:
    """End of the numeric body and the text lines after it (a footer), read from the end."""
    end = len(data)
    footer: list[str] = []
    while True:
        while end > offset and data[end - 1] in b" \t\r\n":
            end -= 1
        if end <= offset:
            return end, footer[::-1]
        start = max(data.rfind(b"\n", offset, end) + 1, offset)
        text = _decode_line(data[start:end]).strip()
        if _starts_with_number(text, layout) or not text.replace("\t", " ").isprintable():
            # Data, even if malformed (a cut-off or damaged last row): the body pass reports it.
            return end, footer[::-1]
        footer.append(text)
        if len(footer) > MAX_TRAILING_TEXT_LINES:
            # Too much text to be a footer: leave it in the body, where it is reported.
            end = len(data)
            while end > offset and data[end - 1] in b" \t\r\n":
                end -= 1
            return end, []
        end = start


def _numpy_text_reader() -> Callable[..., np.ndarray] | None:
    """numpy's C text reader (the engine behind `numpy.loadtxt`), called on a stream.

    `numpy.loadtxt` only streams in C from a path; given an in-memory stream it goes line by
    line in Python. The engine itself takes any text stream, so the bytes already read (and
    hashed) are parsed at loadtxt's speed without touching the file again. It is a private
    numpy function: when it is missing or its signature changes, `_fromstring_table` is used.
    """
    for module_name in ("numpy._core._multiarray_umath", "numpy.core._multiarray_umath"):
        try:
            module = importlib.import_module(module_name)
        except ImportError:
            continue
        reader = getattr(module, "_load_from_filelike", None)
        if reader is not None:
            return reader  # type: ignore[no-any-return]
    return None


_TEXT_READER = _numpy_text_reader()
_LOADTXT_DELIMITER = {",": ",", ";": ";", "\t": "\t", " ": None}


def _line_ending(data: bytes, offset: int, end: int) -> bytes:
    """b"\r\n" when any row of data[offset:end] ends so, else b"\n" (a lone CR is looked
    for first: one fast pass over a file without any)."""
    if data.find(b"\r", offset, end) == -1:
        return b"\n"
    return b"\r\n" if data.find(b"\r\n", offset, end) != -1 else b"\n"


def _clean_body(body: bytes, layout: _RowFormat, ending: bytes) -> bytes:
    """Decimal commas to points; a trailing separator on each row removed (rows ending in
    `ending`, the body's line ending)."""
    if layout.decimal_comma:
        body = body.replace(b",", b".")
    if layout.trailing_separator:
        separator = layout.separator.encode()
        # One pass for the file's line ending; a row ending otherwise leaves an empty field,
        # which the C reader refuses and the slow pass then handles.
        body = body.replace(separator + ending, ending)
        if body.endswith(separator):
            body = body[: -len(separator)]
    return body


# The C reader is given the body in pieces of about this size, each cut after a line end: the
# text and the rows of one piece stay small (and in cache), and its x and y go straight into
# the arrays the spectrum keeps, so no (rows, columns) table of the whole body is ever held.
PIECE_BYTES = 1 << 20


def _piece_end(data: bytes, start: int, end: int) -> int:
    """Where the piece of data[:end] that starts at `start` stops: after the first line end
    PIECE_BYTES on, and past any line end inside quotes (a quote left open at a cut would
    read the next rows differently than the whole body does)."""
    stop = start
    while True:
        cut = data.find(b"\n", stop + PIECE_BYTES, end)
        stop = end if cut == -1 else cut + 1
        if stop == end or data.find(b'"', start, stop) == -1 or data.count(b'"', start, stop) % 2 == 0:
            return stop


class _LatinText:
    """A piece of bytes read as Latin-1 text by numpy's C reader, which asks for `read(size)`
    again and again: each call decodes the next bytes straight from the piece (no copy of the
    piece, no buffered stream around it)."""

    __slots__ = ("view", "at")

    def __init__(self, view: memoryview) -> None:
        self.view = view
        self.at = 0

    def read(self, size: int = -1) -> str:
        start = self.at
        self.at = len(self.view) if size < 0 else start + size
        return str(self.view[start : self.at], "latin-1")


def _read_rows(text: memoryview, layout: _RowFormat) -> np.ndarray | None:
    """The rows of `text` through numpy's C text reader, or None when it refuses."""
    assert _TEXT_READER is not None
    try:
        values = _TEXT_READER(
            _LatinText(text),
            delimiter=_LOADTXT_DELIMITER[layout.separator],
            comment=None,
            quote='"',
            imaginary_unit="j",
            usecols=None,
            skiplines=0,
            max_rows=-1,
            converters=None,
            dtype=np.dtype(np.float64),
            encoding="latin-1",
            filelike=True,
            byte_converters=False,
        )
    except (ValueError, TypeError, OverflowError):
        return None
    return values  # type: ignore[no-any-return]


def _loadtxt_table(
    data: bytes, offset: int, end: int, layout: _RowFormat, first_line: int, y_column: int = 1
) -> _Table | None:
    """data[offset:end] through numpy's C text reader, piece by piece (`PIECE_BYTES`); None
    when it refuses any row (the slow pass then says why). Blank lines are skipped, as the
    reader does on the whole body. x and y are sized from the first piece's rows per byte,
    grown when the guess was short and cut to the rows read at the end."""
    ending = _line_ending(data, offset, end) if layout.trailing_separator else b"\n"
    clean = not (layout.decimal_comma or layout.trailing_separator)
    whole = memoryview(data)
    x = y = np.empty(0)
    filled = 0
    start = offset
    while start < end:
        stop = _piece_end(data, start, end)
        piece = whole[start:stop] if clean else memoryview(_clean_body(data[start:stop], layout, ending))
        values = _read_rows(piece, layout)
        if values is None or values.ndim != 2:
            return None
        count = values.shape[0]
        if count:  # (a piece of blank lines has no rows)
            if values.shape[1] != layout.columns:
                return None
            if filled + count > x.size:
                # rows per byte so far, for what is left, +10 %: the unused end is never
                # touched (no resident memory) and is cut off below; growing may copy
                size = filled + count + int((end - stop) * (filled + count) / (stop - offset) * 1.1) + 64
                for column in (x, y) if x.size else ():
                    column.resize(size, refcheck=False)
                if not x.size:
                    x, y = np.empty(size), np.empty(size)
            x[filled : filled + count] = values[:, 0]
            y[filled : filled + count] = values[:, y_column]
            filled += count
        start = stop
    if filled == 0:
        return None
    x.resize(filled, refcheck=False)
    y.resize(filled, refcheck=False)
    return _Table(x, y, first_line, None, owned=True)


def _fromstring_table(body: bytes, layout: _RowFormat, first_line: int, y_column: int = 1) -> _Table | None:
    """The body parsed by `numpy.fromstring` after separators become spaces; None when the
    value count is not rows x columns (the slow pass then says why)."""
    mapping = {layout.separator: " "} if layout.separator != " " else {}
    if layout.decimal_comma:
        mapping[","] = "."
    if mapping:
        table = bytes.maketrans("".join(mapping).encode(), "".join(mapping.values()).encode())
        translated = body.translate(table)
    else:
        translated = body
    rows = body.count(b"\n") + 1
    try:
        values = np.fromstring(translated, dtype=np.float64, sep=" ")
    except ValueError:
        return None
    if values.size != rows * layout.columns:
        return None
    return _columns(values.reshape(rows, layout.columns), y_column, first_line)


# polars (the `fast-text` extra) parses a delimited body several times faster than numpy's
# reader, to the same bits (both round each decimal to the nearest double): it saves 4-6 ms
# per MB of body. But its import takes ~0.11-0.2 s and 32 MB of resident memory, and its frame
# and the frame's numpy copy hold the body's numbers twice. A whole `bandwatch process` of a
# 1M-point file must stay under 100 MB (33 MB of 17-digit pairs: 168 MB with polars, 86 MB
# without), so a process imports it for its first body only when that body is past
# POLARS_IMPORT_BYTES (the bytes and the spectrum alone are then over the mark anyway). After
# that it rents before it buys: numpy's reader goes on until this process has spent
# POLARS_IMPORT_SECONDS in it, about what the import costs, and polars reads every body from
# then on. A one-shot process reading one file never pays the import; a process that reads
# file after file (a notebook, `bandwatch process` of a folder, the interface) pays at most
# twice what the best choice in hindsight would have (the rule for renting before buying).
# A station worker imports it at start (`worker.warm_up`), unless its memory limit is tight.
POLARS_IMPORT_BYTES = 64_000_000
POLARS_IMPORT_SECONDS = 0.15
_POLARS_SEPARATORS = (",", ";", "\t")


_polars_allowed = True
_numpy_parse_seconds = 0.0  # time this process has spent in numpy's readers on delimited bodies


def forgo_polars() -> None:
    """Never use polars in this process (a station worker under a tight memory limit)."""
    global _polars_allowed
    _polars_allowed = False


@contextlib.contextmanager
def numpy_reader_only() -> Iterator[None]:
    """numpy's reader for the reads inside, in this process (what a one-shot process of one file
    uses): for benchmarks that time both readers in one run."""
    global _polars_allowed
    allowed = _polars_allowed
    _polars_allowed = False
    try:
        yield
    finally:
        _polars_allowed = allowed


def polars_in_use() -> bool:
    """True when this process reads delimited bodies with polars (imported and allowed)."""
    return _polars_allowed and "polars" in sys.modules


def polars_module(body_bytes: int = POLARS_IMPORT_BYTES) -> ModuleType | None:
    """polars, when installed, allowed, and worth it for a body of `body_bytes` in this process
    (see POLARS_IMPORT_BYTES and POLARS_IMPORT_SECONDS); else None."""
    if not _polars_allowed:
        return None
    module = sys.modules.get("polars")
    if module is None and (body_bytes >= POLARS_IMPORT_BYTES or _numpy_parse_seconds >= POLARS_IMPORT_SECONDS):
        try:
            import polars as module
        except ImportError:  # not installed (the extra), or unusable on this CPU
            return None
    return module


def _polars_table(
    data: bytes, offset: int, end: int, layout: _RowFormat, first_line: int, y_column: int = 1
) -> _Table | None:
    """data[offset:end] through polars' CSV reader, or None when polars is not at hand, the
    layout is one it does not read the way the other readers do (whitespace columns, a
    separator at the end of each row), or any field is not a number (the other passes then
    read it, or say which line is wrong). Quotes are not interpreted: a quoted number is not a
    number here and goes to numpy's reader (polars 2.1 panics on a quote left open at the end
    of the bytes; seeded fuzzing of 100,000 damaged bodies without quote handling: none)."""
    if layout.separator not in _POLARS_SEPARATORS or layout.trailing_separator:
        return None
    polars = polars_module(end - offset)
    if polars is None:
        return None
    # Read in place (no copy of the body) when it starts a line and only a line ending follows.
    in_place = (offset == 0 or data[offset - 1] == 0x0A) and data[end:] in (b"", b"\n", b"\r\n")
    try:
        frame = polars.read_csv(
            data if in_place else data[offset:end], skip_lines=data.count(b"\n", 0, offset) if in_place else 0,
            has_header=False, separator=layout.separator, decimal_comma=layout.decimal_comma,
            schema={f"column{index}": polars.Float64 for index in range(layout.columns)},
            quote_char=None, truncate_ragged_lines=False, raise_if_empty=True,
        )
    except (polars.exceptions.PolarsError, polars.exceptions.PanicException, ValueError, TypeError, OverflowError):
        return None  # a field that is not a number, a ragged row: the other passes name it
    if frame.height == 0 or any(column.null_count() for column in frame.get_columns()):  # (kept counts: no query)
        return None
    values = frame.to_numpy()  # column-major: each column one contiguous block
    return _Table(values[:, 0], values[:, y_column], first_line, None, owned=values.flags.writeable)


def _fast_table(
    data: bytes, offset: int, end: int, layout: _RowFormat, first_line: int, y_column: int
) -> _Table | None:
    """data[offset:end] parsed at C speed, or None when it is not clean (slow pass follows)."""
    global _numpy_parse_seconds
    table = _polars_table(data, offset, end, layout, first_line, y_column)
    if table is not None:
        return table
    started = time.perf_counter()
    try:
        if _TEXT_READER is not None:
            table = _loadtxt_table(data, offset, end, layout, first_line, y_column)
            if table is not None or _TEXT_READER_WORKS:
                return table
        return _fromstring_table(data[offset:end], layout, first_line, y_column)
    finally:
        _numpy_parse_seconds += time.perf_counter() - started


def _text_reader_works() -> bool:
    """True when the private reader answers as expected on a tiny sample."""
    if _TEXT_READER is None:
        return False
    sample = _loadtxt_table(b"1,2\n3,4", 0, 7, _RowFormat(",", False, 2, False), 1)
    return sample is not None and sample.x.tolist() == [1.0, 3.0] and sample.y.tolist() == [2.0, 4.0]


_TEXT_READER_WORKS = _text_reader_works()


def _slow_table(body: bytes, layout: _RowFormat, first_line: int, source: str, y_column: int = 1) -> _Table:
    """Line by line: names the first bad row; tolerates blank lines inside the data."""
    rows: list[list[float]] = []
    lines: list[int] = []
    raw_lines = body.split(b"\n")
    for index, raw in enumerate(raw_lines):
        line = first_line + index
        text = _decode_line(raw).strip()
        if not text:
            continue
        parsed = _row_values(text, layout)
        if isinstance(parsed, str):
            if any(later.strip() for later in raw_lines[index + 1 :]):
                parsed += "; data rows follow it"
            raise SpectrumFileError(source, parsed, line)
        rows.append(parsed)
        lines.append(line)
    values = np.array(rows, dtype=np.float64).reshape(len(rows), layout.columns)
    return _columns(values, y_column, first_line, np.array(lines, dtype=np.int64))


def _header_fields(text: str, layout: _RowFormat) -> tuple[str, ...] | None:
    """The column names in a header line, or None when it does not split into the columns."""
    attempts: list[list[str]] = []
    if layout.separator == " ":
        attempts.append(re.split(r"\t|\s{2,}", text.strip()))
        attempts.append(_HEADER_TOKEN.findall(text))
        attempts.append(text.split())
    else:
        attempts.append(text.strip().split(layout.separator))
        if layout.separator == "," and ";" in text:
            attempts.append(text.strip().split(";"))
    for fields in attempts:
        if len(fields) > 1 and not fields[-1].strip():
            fields = fields[:-1]
        if len(fields) == layout.columns:
            return tuple(field.strip().strip('"').strip("'").strip() for field in fields)
    return None


def _x_unit(name: str) -> str | None:
    """'cm-1', 'micrometre', 'nanometre', 'wavelength' (no unit) or None (not stated)."""
    if _X_CM1.search(name):
        return "cm-1"
    if _X_UM.search(name):
        return "micrometre"
    if _X_NM.search(name):
        return "nanometre"
    if _X_WAVELENGTH.search(name):
        return "wavelength"
    return None


def _y_kind(name: str) -> str | None:
    if _Y_PERCENT.search(name):
        return "percent_transmittance"
    if _Y_ABSORBANCE.search(name):
        return "absorbance"
    if _Y_TRANSMITTANCE.search(name):
        return "transmittance"
    return None


def _infer_y_kind(y: np.ndarray) -> tuple[str, str]:
    """Guess the y kind from values: (kind, reason). Gas spectra are mostly baseline, so the
    median sits at the baseline: near the top for transmittance, near the bottom for absorbance."""
    low, high = float(np.min(y)), float(np.max(y))
    middle = median(y)
    baseline_on_top = (high - middle) < (middle - low)
    summary = f"values {low:.4g}..{high:.4g}, median {middle:.4g}"
    if low >= -0.05 and high <= 1.05 and high >= 0.8 and baseline_on_top:
        return "transmittance", f"{summary}: within 0..1.05, max near 1, baseline at the top"
    if low >= -5.0 and high <= 105.0 and middle > 10.0 and baseline_on_top:
        return (
            "percent_transmittance",
            f"{summary}: within 0..105, median > 10, baseline at the top",
        )
    return (
        "absorbance",
        f"{summary}: not a transmittance pattern (baseline at the bottom or out of 0..1 / 0..100)",
    )


# x is checked in blocks of this many steps: no array of a million steps is made.
AXIS_BLOCK = 1 << 16


@dataclass(frozen=True)
class _Steps:
    """The sizes of the x steps: smallest, largest and mean (span over intervals)."""

    count: int
    low: float
    high: float
    typical: float


def _check_axis(x: np.ndarray, table: _Table, source: str) -> _Steps:
    """Strictly monotonic x (already finite); returns the step sizes. Names the offending line."""
    steps = _axis_steps(x)
    if steps is None:
        _refuse_axis(x, table, source)
    return steps


def _axis_steps(x: np.ndarray) -> _Steps | None:
    """The step sizes of an x column whose steps are all finite and of one sign, x[0] finite
    (so every x is finite); None otherwise."""
    count = x.size - 1
    low, high = math.inf, 0.0
    ascending = count > 0 and x[1] > x[0]
    if not math.isfinite(x[0]):
        return None
    for first in range(0, count, AXIS_BLOCK):
        steps = np.diff(x[first : first + AXIS_BLOCK + 1])
        smallest, largest = float(steps.min()), float(steps.max())
        if not ((0 < smallest and largest < math.inf) if ascending else (-math.inf < smallest and largest < 0)):
            return None
        size_low, size_high = (smallest, largest) if ascending else (-largest, -smallest)
        low, high = min(low, size_low), max(high, size_high)
    typical = float(abs(x[-1] - x[0])) / count if count else 0.0
    return _Steps(count, float(low), high, typical)


def _refuse_axis(x: np.ndarray, table: _Table, source: str) -> None:
    """Raise for an x column that is not strictly monotonic, naming the first offending row."""
    steps = np.diff(x)
    zero = np.flatnonzero(steps == 0)
    direction = np.sign(steps[0])
    turn = np.flatnonzero(np.sign(steps) != direction)
    first_turn = int(turn[0]) if turn.size else steps.size
    if zero.size and int(zero[0]) <= first_turn:
        row = int(zero[0]) + 1
        raise SpectrumFileError(
            source,
            f"x value {float(x[row])!r} repeats the previous row's "
            f"(line {table.line_of(row - 1)}): duplicated x",
            table.line_of(row),
        )
    row = first_turn + 1
    way = "ascending" if direction > 0 else "descending"
    raise SpectrumFileError(
        source,
        f"x is not monotonic: {float(x[row])!r} breaks the {way} order of the rows above "
        f"(previous x {float(x[row - 1])!r})",
        table.line_of(row),
    )


def _check_finite(table: _Table, y_column: int, source: str) -> None:
    # one cheap pass per column; an overflowing sum only sends us to the full check
    if np.isfinite(np.sum(table.x)) and np.isfinite(np.sum(table.y)):
        return
    used = np.column_stack([table.x, table.y])
    finite = np.isfinite(used)
    if not finite.all():
        row, column = (int(i) for i in np.argwhere(~finite)[0])
        raise SpectrumFileError(
            source,
            f"value {float(used[row, column])!r} in column {(0, y_column)[column] + 1} "
            "is not a finite number",
            table.line_of(row),
        )


def _check_table(table: _Table, y_column: int, source: str) -> _Steps:
    """At least 2 rows, finite x and y, strictly monotonic x; returns the x step sizes."""
    if table.rows < 2:
        raise SpectrumFileError(
            source, "only one data row: a spectrum needs at least 2 points", table.line_of(0)
        )
    # one pass over x: steps that are all finite and of one sign from a finite start make every
    # x finite; any doubt and the checks run in order, each naming its own problem
    if np.isfinite(np.sum(table.y)):
        steps = _axis_steps(table.x)
        if steps is not None:
            return steps
    _check_finite(table, y_column, source)
    return _check_axis(table.x, table, source)


def _choose_y_column(header: tuple[str, ...] | None, columns: int) -> tuple[int, str | None]:
    """(column index, y kind from the header or None)."""
    if header is None:
        return 1, None
    for index in range(1, columns):
        kind = _y_kind(header[index])
        if kind is not None:
            return index, kind
    return 1, None


def _parse(data: bytes, source: str) -> Spectrum:
    notes: list[str] = []
    data, start = _normalise_bytes(data, source, notes)
    offset, first_line, layout, before = _find_data_start(data, start, source)
    layout = _settle_decimal_mark(data, offset, layout)

    header: tuple[str, ...] | None = None
    header_text = ""
    free_text = [text for _, text in before]
    if before:
        header = _header_fields(before[-1][1], layout)
        if header is not None:
            header_text = free_text.pop()
    if free_text:
        notes.append(f"{len(free_text)} line(s) of free text before the data kept as title/header")
    resolution = _stated_resolution(free_text, notes)

    end, footer = _split_trailing_text(data, offset, layout)
    if footer:
        notes.append(
            f"{len(footer)} line(s) of text after the data ignored (first: {footer[0][:60]!r})"
        )
    y_column, header_kind = _choose_y_column(header, layout.columns)
    table = _fast_table(data, offset, end, layout, first_line, y_column)
    if table is None:
        body = data[offset:end]  # CR of CRLF endings is whitespace to the parsers: left in place
        table = _slow_table(body, layout, first_line, source, y_column)
        if table.rows < body.count(b"\n") + 1:
            notes.append("blank lines inside the data skipped")

    try:
        steps = _check_table(table, y_column, source)
    except SpectrumFileError:
        if table.row_lines is not None:
            raise
        # The fast pass skips blank lines and may have checked only the total count: re-read
        # line by line so that the problem is named with its file line.
        table = _slow_table(data[offset:end], layout, first_line, source, y_column)
        steps = _check_table(table, y_column, source)
    if layout.columns > 2:
        names = f" ({header[0]!r}, {header[y_column]!r})" if header else ""
        notes.append(
            f"{layout.columns} columns: x from column 1, y from column {y_column + 1}{names}"
        )
    x_file, y = table.x, table.y

    x_unit = _x_unit(header[0]) if header else None
    x_cm1 = _to_wavenumber(x_file, x_unit, table, source, notes)
    if header_kind is None:
        kind, reason = _infer_y_kind(y)
        notes.append(f"y kind inferred as {kind} because {reason}")
    else:
        kind = header_kind
        if kind == "transmittance" and 1.5 < float(np.max(y)) <= 105.0:
            kind = "percent_transmittance"
            notes.append(
                f"header says transmittance ({header[y_column]!r}) but values reach "
                f"{float(np.max(y)):.4g}: read as percent transmittance"
            )
        else:
            notes.append(f"y kind {kind} from the column header {header[y_column]!r}")

    _note_rounding(steps, notes)

    descending = bool(x_cm1[-1] < x_cm1[0])
    if descending:
        notes.append("x axis was descending; reversed to ascending")
    if table.owned:
        # the reader's own contiguous columns: converted and reversed where they lie
        absorbance, saturated, conversion = to_absorbance(y, kind, in_place=True)
        if descending:
            for column in (x_cm1, absorbance, saturated):
                reverse_in_place(column)
    else:
        if descending:
            x_cm1, y = x_cm1[::-1], y[::-1]
        absorbance, saturated, conversion = to_absorbance(y, kind)
    separator_name = SEPARATOR_NAMES[layout.separator]
    file_format = f"delimited text ({separator_name}" + (
        ", decimal comma)" if layout.decimal_comma else ")"
    )
    header_pairs = tuple(("text", text) for text in free_text)
    if header_text:
        header_pairs += (("columns", header_text),)
    meta = FileMetadata(
        title=free_text[0] if free_text else "",
        resolution_cm1=resolution,
        format=file_format,
        header=header_pairs,
        notes=tuple(notes),
    )
    handed_over(x_cm1, absorbance, saturated)
    if x_cm1 is x_file and kind == "absorbance":
        # every point already checked above: finite x and y, x strictly monotonic (ascending now)
        return checked_spectrum(x_cm1, absorbance, saturated, kind, conversion, meta)
    try:
        return Spectrum(x_cm1, absorbance, saturated, kind, conversion, meta)
    except ValueError as error:  # e.g. two x values equal after unit conversion
        raise SpectrumFileError(source, str(error)) from None


def _stated_resolution(free_text: list[str], notes: list[str]) -> float | None:
    """A resolution stated in the free text above the data (cm-1), as the file gives it."""
    for text in free_text:
        found = _RESOLUTION.search(text)
        if found is not None:
            value = float(found.group(1).replace(",", "."))
            if value > 0:
                notes.append(f"resolution {value:g} cm-1 taken from the text {text[:60]!r}")
                return value
    return None


def _to_wavenumber(
    x: np.ndarray, unit: str | None, table: _Table, source: str, notes: list[str]
) -> np.ndarray:
    """x in cm-1; converts wavelength columns and notes what was assumed."""
    if unit == "cm-1":
        return x
    if unit is None:
        notes.append("x units not stated in a column header: assumed cm-1")
        return x
    if unit == "wavelength":
        unit = "micrometre" if float(np.max(np.abs(x))) < 100.0 else "nanometre"
        notes.append(f"x header says wavelength without a unit: values suggest {unit}")
    nonpositive = np.flatnonzero(x <= 0)
    if nonpositive.size:
        row = int(nonpositive[0])
        raise SpectrumFileError(
            source,
            f"wavelength {float(x[row])!r} is not positive: cannot convert to cm-1",
            table.line_of(row),
        )
    factor = 1e4 if unit == "micrometre" else 1e7
    notes.append(f"x converted from {unit}: cm-1 = {factor:g} / x")
    return factor / x


def _note_rounding(steps: _Steps, notes: list[str]) -> None:
    """Note x steps that wobble around a regular grid (values rounded off the grid)."""
    if steps.count < 2:
        return
    # The mean step (span / intervals) stands in for the grid step: no sort needed.
    typical, low, high = steps.typical, steps.low, steps.high
    wobble = max(typical - low, high - typical)
    if wobble > ROUNDING_NOTE_FRACTION * typical:
        if wobble < 0.5 * typical:
            notes.append(
                f"x steps range {low:.6g}..{high:.6g} around {typical:.6g}: values look "
                "rounded off a regular grid; x kept as given"
            )
        else:
            notes.append(f"x spacing is irregular ({low:.6g}..{high:.6g}); x kept as given")


# ----------------------------------------------------------------------------- write

Y_HEADER = {
    "absorbance": "absorbance",
    "transmittance": "transmittance",
    "percent_transmittance": "percent_transmittance",
}


def write_csv(
    target: str | Path | BinaryIO | TextIO, spectrum: Spectrum, y_kind: str = "absorbance", decimals: int | None = None
) -> None:
    """Write `wavenumber_cm-1,<y kind>` then one `x,y` row per point, floats as repr.

    repr gives the shortest text that reads back to the identical float, so parse(write(s))
    returns the same x and absorbance bit for bit (transmittance output goes through
    10**-A and back, good to rounding). `decimals` writes y rounded to that many places
    instead, as instrument software exports it.
    """
    if y_kind not in Y_HEADER:
        raise ValueError(f"unknown y kind {y_kind!r}; choose from {', '.join(Y_HEADER)}")
    if y_kind == "absorbance":
        y = spectrum.absorbance
    elif y_kind == "transmittance":
        y = spectrum.transmittance()
    else:
        y = spectrum.transmittance() * 100.0
    y_format = "{!r}" if decimals is None else f"{{:.{decimals}f}}"
    rows = map(("{!r}," + y_format).format, spectrum.wavenumber_cm1.tolist(), y.tolist())
    text = f"wavenumber_cm-1,{Y_HEADER[y_kind]}\n" + "\n".join(rows) + "\n"
    if isinstance(target, (str, Path)):
        with open(target, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
    elif isinstance(target, io.TextIOBase):
        target.write(text)
    else:
        target.write(text.encode("utf-8"))  # type: ignore[arg-type]


# ----------------------------------------------------------------------------- completeness
WRITE_BLOCK = 512  # writers flush their buffers in multiples of this
_FIELD_SPLIT = re.compile(rb"[,;\t ]+")
# A text file whose last line still looks cut off after the station's longest wait is taken as
# it is (a writer may simply not end its last line).
TAKE_WHEN_WAITED_OUT = True


def starts_like(head: bytes) -> bool:
    """Delimited text is the catch-all of the text formats: any bytes no other reader claims."""
    return True


def incomplete_reason(data: bytes) -> str | None:
    """Why text bytes look still being written, or None (`incomplete_reason_of_ends`)."""
    return incomplete_reason_of_ends(data[:ENDS_BYTES], data[-ENDS_BYTES:], len(data))


ENDS_BYTES = 4096  # `incomplete_reason_of_ends` looks at no more than this of each end


def incomplete_reason_of_ends(head: bytes, tail: bytes, size: int) -> str | None:
    """Why text bytes look still being written, or None, from the first and last ENDS_BYTES
    and the size: no newline at the end and either the size is a multiple of 512 (a writer
    flushing its buffer mid-line) or the last line has fewer fields than the one before. A
    file simply not ending in a newline is complete."""
    if not size or tail.endswith((b"\n", b"\r", b"\n\x00", b"\r\x00")):
        return None
    if size % WRITE_BLOCK == 0:
        return "last line looks cut off (still being written?)"
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        return None  # UTF-16: fields are not compared
    lines = tail[-ENDS_BYTES:].splitlines()
    if len(lines) < 3:
        return None
    if len(_FIELD_SPLIT.split(lines[-1].strip())) < len(_FIELD_SPLIT.split(lines[-2].strip())):
        return "last line looks cut off (still being written?)"
    return None
