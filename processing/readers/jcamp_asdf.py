"""Vectorised decoding of JCAMP-DX `(X++(Y..Y))` data lines: AFFN and ASDF (SQZ, DIF, DUP).

No per-character or per-line Python loop touches the data:
- ASDF: `bytes.translate` classifies every byte; token starts come from a few boolean array
  operations; each token's first 8 bytes are gathered as one uint64 (an unaligned strided
  view), its SQZ/DIF/DUP letter replaced by the digit it stands for, and the digits combined
  by SWAR integer arithmetic (3 multiply-shift-mask rounds). Longer tokens with a decimal point
  (line-start X) use a 3-word variant; anything else (exponents, junk) goes to numpy's C
  parser, which also finds the line of a bad token.
- AFFN: a C parser reads the whole section, with a ` nan ` marker in place of each line end so
  the line structure survives: polars' CSV reader (one number a row, a space for the row end)
  when the delimited reader in this process reads with it and the section is large, else
  numpy's. Both round every number correctly, so they give the same doubles (and both read
  `inf`, `nan`, `infinity`); anything polars cannot read goes to numpy's parser as before.
Token kinds come from the byte at each token start. DUP expansion, DIF integration and the
per-line DIF Y-check are then done in token space with one `np.repeat` and one `np.cumsum`.

Character meanings (IUPAC JCAMP-DX 4.24 / 5.01 ASDF tables):
    SQZ  @ A-I = 0, +1..+9    a-i = -1..-9     (first digit of an absolute value)
    DIF  % J-R = 0, +1..+9    j-r = -1..-9     (first digit of a difference)
    DUP  S-Z = 1..8           s = 9            (first digit of a repeat count)
In compressed data `E`/`e` are SQZ digits (+5/-5), never an exponent.
"""
from __future__ import annotations

import re
import warnings
from dataclasses import dataclass

import numpy as np

from processing.readers.text_engine import polars_in_use

# Byte classes.
INVALID, DIGIT, DOT, SQZ, DIF, DUP, SIGN, SEP, NEWLINE = range(9)
# Token kinds (what the byte at a token's start makes it).
KIND_AFFN, KIND_SQZ, KIND_DIF, KIND_DUP, KIND_LINE = range(5)

_CLASS = np.zeros(256, dtype=np.uint8)
_KIND = np.full(256, KIND_AFFN, dtype=np.uint8)
_SIGN_BYTE = np.full(256, ord("+"), dtype=np.uint8)
_DIGIT_BYTE = np.zeros(256, dtype=np.uint8)

for _c in b"0123456789":
    _CLASS[_c] = DIGIT
_CLASS[ord(".")] = DOT
for _table, _cls, _kind in (
    ((b"@ABCDEFGHI", b"\x00abcdefghi"), SQZ, KIND_SQZ),
    ((b"%JKLMNOPQR", b"\x00jklmnopqr"), DIF, KIND_DIF),
):
    _positive, _negative = _table
    for _digit, (_p, _n) in enumerate(zip(_positive, _negative)):
        for _byte, _sign in ((_p, "+"), (_n, "-")):
            if _byte == 0:
                continue
            _CLASS[_byte] = _cls
            _KIND[_byte] = _kind
            _SIGN_BYTE[_byte] = ord(_sign)
            _DIGIT_BYTE[_byte] = ord("0") + _digit
for _digit, _byte in enumerate(b"STUVWXYZs", start=1):
    _CLASS[_byte] = DUP
    _KIND[_byte] = KIND_DUP
    _DIGIT_BYTE[_byte] = ord("0") + _digit
for _byte in b"+-":
    _CLASS[_byte] = SIGN
for _byte in b" \t,":
    _CLASS[_byte] = SEP
_CLASS[ord("\n")] = NEWLINE
_KIND[ord("\n")] = KIND_LINE

_AFFN_DELETE = b"0123456789.+-eE \t,\n"
_MARKER = b" nan "
LINE_SAMPLE = 8  # compressed data: line-start X read on every 8th line (and the last)
CHUNK_BYTES = 1 << 20  # compressed data are decoded in pieces of ~1 MB


class DecodeError(Exception):
    """A problem in the data lines; `line` counts from 0 at the section's first line."""

    def __init__(self, line: int, problem: str) -> None:
        super().__init__(problem)
        self.line = line
        self.problem = problem


@dataclass(frozen=True)
class Tokens:
    """Every number in a data section, in order, with its kind; KIND_LINE marks line ends."""

    values: np.ndarray  # float64; meaningless at KIND_LINE markers (NaN or junk)
    kinds: np.ndarray  # uint8 KIND_*
    compressed: bool  # True when ASDF characters were present


@dataclass(frozen=True)
class DecodedOrdinates:
    """Y values of an `(X++(Y..Y))` table, before YFACTOR, with the line-start X values."""

    y: np.ndarray  # float64, one per point, in file order
    line_x: np.ndarray  # raw line-start X (file units, before XFACTOR)
    line_index: np.ndarray  # point index each line-start X belongs to
    line_number: np.ndarray  # section line (from 0) of each line-start X
    forms: tuple[str, ...]  # subset of ("AFFN", "SQZ", "DIF", "DUP") seen
    checks: int  # DIF Y-check values verified and dropped


def _line_of(section: bytes, position: int) -> int:
    return section.count(b"\n", 0, position)


def _parse_numbers(text: bytes) -> np.ndarray:
    """numpy's C parser over separator-delimited numbers; ValueError when any token is bad."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # older numpy warns instead of raising on junk
        try:
            return np.fromstring(text, dtype=np.float64, sep=" ")
        except (ValueError, DeprecationWarning) as error:
            raise ValueError(str(error)) from None


# Sections from this size on go to polars when it is in use (below it numpy's parser is as fast).
POLARS_SECTION_BYTES = 1 << 16


def _affn_numbers(text: bytes) -> np.ndarray:
    """AFFN numbers separated by spaces and line ends, a NaN for each line end; ValueError
    when numpy's parser meets a bad token (the caller then looks further)."""
    marked = text.replace(b"\n", _MARKER)
    polars = polars_in_use() if len(text) >= POLARS_SECTION_BYTES else None
    if polars is not None:
        # One number a row: polars' threaded CSV reader with a space for the row end.
        try:
            column = polars.read_csv(
                marked, has_header=False, schema={"value": polars.Float64}, eol_char=" ", quote_char=None,
                ignore_errors=True,
            ).to_series()
        except (polars.exceptions.PolarsError, polars.exceptions.PanicException, ValueError, TypeError, OverflowError):
            column = None  # as in the delimited reader: numpy's parser decides
        if column is not None and not column.null_count():  # else numpy's parser decides
            return column.to_numpy(writable=True)
    return _parse_numbers(marked)


def _first_bad_line(lines: list[bytes], compressed: bool) -> tuple[int, str]:
    """Slow path, only after a failure: the first line that cannot be read, and a snippet."""
    for number, line in enumerate(lines):
        try:
            _decode_tokens(line, affn=not compressed)
        except (ValueError, DecodeError):
            snippet = line.strip()[:40].decode("latin-1")
            return number, f"cannot read the numbers in {snippet!r}"
    return max(len(lines) - 1, 0), "cannot read the numbers in the data lines"


_CLASS_TABLE = bytes(_CLASS.tolist())
_LEAD = np.full(256, ord("0"), dtype=np.uint64)  # ASCII of a token's leading digit
_NEGATIVE = np.zeros(256, dtype=bool)
for _byte in range(256):
    if _CLASS[_byte] in (SQZ, DIF, DUP):
        _LEAD[_byte] = _DIGIT_BYTE[_byte]
        _NEGATIVE[_byte] = _SIGN_BYTE[_byte] == ord("-")
    elif _CLASS[_byte] in (DIGIT, DOT):
        _LEAD[_byte] = _byte
_NEGATIVE[ord("-")] = True
_SIGN_FACTOR = np.where(_NEGATIVE, -1.0, 1.0)
_KIND_OF_CLASS = np.full(16, KIND_AFFN, dtype=np.uint8)
_KIND_OF_CLASS[[SQZ, DIF, DUP, NEWLINE]] = (KIND_SQZ, KIND_DIF, KIND_DUP, KIND_LINE)
_KIND_SEPARATOR = 255
_KIND_OF_CLASS[SEP] = _KIND_SEPARATOR
_ASCII_ZEROS = np.uint64(0x3030303030303030)
_KEEP_BYTES = np.array([(1 << (8 * k)) - 1 for k in range(8)] + [2**64 - 1], dtype=np.uint64)
_ALIGN = np.array([8 * (8 - k) for k in range(9)], dtype=np.uint64)


def _swar_digits(words: np.ndarray, lengths: np.ndarray, masked: bool = True) -> np.ndarray:
    """Integers from up to 8 ASCII digits per uint64 (first digit in the lowest byte).

    Works in place on `words`: subtract ASCII '0' from every byte, drop bytes past the token,
    right-align, then combine pairs, quads and octets (SIMD-within-a-register arithmetic).
    With `masked=False` (lengths 1-8 only) the right-align shift alone drops the bytes past
    the token: they move out of the top, and a borrow from them only runs further up.
    """
    np.subtract(words, _ASCII_ZEROS, out=words)
    if masked:
        np.bitwise_and(words, _KEEP_BYTES[lengths], out=words)
    np.left_shift(words, _ALIGN[lengths], out=words)
    for multiplier, shift, mask in (
        (10, 8, 0x00FF00FF00FF00FF),
        (100, 16, 0x0000FFFF0000FFFF),
        (10000, 32, 0x00000000FFFFFFFF),
    ):
        high = words >> np.uint64(shift)
        np.multiply(words, np.uint64(multiplier), out=words)
        np.add(words, high, out=words)
        np.bitwise_and(words, np.uint64(mask), out=words)
    return words


_AFFN_CLASS = _CLASS.copy()
for _byte in range(256):
    if _AFFN_CLASS[_byte] in (SQZ, DIF, DUP):
        _AFFN_CLASS[_byte] = INVALID
EXPONENT = 9
_AFFN_CLASS[[ord("E"), ord("e")]] = EXPONENT
_AFFN_CLASS_TABLE = bytes(_AFFN_CLASS.tolist())
_KIND_OF_CLASS[EXPONENT] = KIND_AFFN
_KIND_OF_BYTE = _KIND_OF_CLASS[_CLASS]  # kind of a token from its first byte
_DOTS = np.uint64(0x2E2E2E2E2E2E2E2E)
_ONES = np.uint64(0x0101010101010101)
_HIGHS = np.uint64(0x8080808080808080)
_ABOVE_NINE = np.uint64(0x7676767676767676)  # + 0x76 sets the high bit of any byte above 9
_POW10_INT = np.array([10**k for k in range(9)], dtype=np.uint64)
_POW10_FLOAT = np.array([10.0**k for k in range(30)])


def _byte_windows(section: bytes) -> np.ndarray:
    """A uint64 view starting at every byte (unaligned), padded so reads past the end are 0."""
    padded = section + b"\x00" * (32 - len(section) % 8)
    return np.lib.stride_tricks.as_strided(
        np.frombuffer(padded, dtype="<u8", count=len(padded) // 8), shape=(len(section) + 17,), strides=(1,)
    )


def _lowest_byte(flags: np.ndarray) -> np.ndarray:
    """Index (0-7) of the lowest byte whose high bit is set; 8 when none is."""
    isolated = flags & (~flags + np.uint64(1))
    position = np.full(flags.size, 8, dtype=np.int64)
    found = isolated != 0
    position[found] = (np.log2(isolated[found].astype(np.float64)).astype(np.int64) - 7) // 8
    return position


def _swar_decimal(
    windows: np.ndarray, starts: np.ndarray, lengths: np.ndarray, lead: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Magnitudes of plain decimals (digits, at most one '.', up to 24 bytes, 19 digits).

    `lead` is the ASCII byte that replaces each token's first byte (its SQZ/DIF digit, or '0'
    for a sign). Returns (magnitude, ok); tokens not ok (exponents, junk) go to the slow path.
    The result is the integer mantissa over a power of ten: at most 1 ulp from correct rounding.
    """
    count = starts.size
    words = [windows[starts + offset] for offset in (0, 1, 8, 9, 16, 17)]
    words[0] &= ~np.uint64(0xFF)
    words[0] |= lead
    keep = [_KEEP_BYTES[np.clip(lengths - 8 * k, 0, 8)] for k in range(3)]
    dot = np.full(count, 24, dtype=np.int64)
    for k in (2, 1, 0):  # lowest word last, so the first dot wins
        probe = words[2 * k] ^ _DOTS
        flags = (probe - _ONES) & ~probe & _HIGHS & keep[k]
        position = _lowest_byte(flags)
        found = position < 8
        dot[found] = 8 * k + position[found]
    has_dot = dot < lengths
    digits = lengths - has_dot
    mantissa = np.zeros(count, dtype=np.uint64)
    ok = (lengths <= 24) & (digits >= 1) & (digits <= 19)
    for k in range(3):
        here, following = words[2 * k], words[2 * k + 1]
        inside = dot - 8 * k
        low = _KEEP_BYTES[np.clip(inside, 0, 8)]
        dotless = np.where(inside >= 8, here, np.where(inside < 0, following, (here & low) | (following & ~low)))
        size = np.clip(digits - 8 * k, 0, 8)
        shifted = (dotless - _ASCII_ZEROS) & _KEEP_BYTES[size]
        ok &= ((shifted + _ABOVE_NINE) | shifted) & _HIGHS & _KEEP_BYTES[size] == 0
        part = _swar_digits(shifted + _ASCII_ZEROS & _KEEP_BYTES[size] | (~_KEEP_BYTES[size] & _ASCII_ZEROS), size)
        mantissa = mantissa * _POW10_INT[size] + part
    fraction = np.where(has_dot, lengths - dot - 1, 0)
    magnitude = mantissa.astype(np.float64) / _POW10_FLOAT[np.clip(fraction, 0, 29)]
    return magnitude, ok


def _decode_tokens(section: bytes, affn: bool) -> tuple[np.ndarray, np.ndarray]:
    """Values and kinds of every token (and line marker) of a data section.

    Tokens of up to 8 characters without a decimal point (nearly all ASDF tokens) are read
    8 bytes at a time with integer SWAR arithmetic; decimals of up to 24 bytes by a 3-word
    variant; anything else (exponents) is gathered into one string for numpy's C parser.
    """
    size = len(section)
    classes_bytes = section.translate(_AFFN_CLASS_TABLE if affn else _CLASS_TABLE)
    bad = classes_bytes.find(b"\x00")
    if bad != -1:
        raise DecodeError(
            _line_of(section, bad), f"character {chr(section[bad])!r} is not allowed in JCAMP-DX data"
        )
    classes = np.frombuffer(classes_bytes, dtype=np.uint8)
    start = (classes >= SQZ) & (classes != EXPONENT)  # SQZ DIF DUP sign separator newline
    if size:
        start[1:] |= (classes[1:] <= DOT) & (classes[:-1] >= SEP) & (classes[:-1] != EXPONENT)
        if affn and (b"E" in section or b"e" in section):
            start[1:] &= ~((classes[1:] == SIGN) & (classes[:-1] == EXPONENT))  # 1E-3
        start[0] = True
    starts = np.flatnonzero(start)
    lengths = np.diff(starts, append=size)
    raw = np.frombuffer(section, dtype=np.uint8)
    first_bytes = raw[starts]
    kinds = _KIND_OF_BYTE[first_bytes]
    if b" " in section or b"\t" in section or b"," in section:
        keep = kinds != _KIND_SEPARATOR
        if not affn:
            after_separator = np.zeros(starts.size, dtype=bool)
            after_separator[1:] = kinds[:-1] == _KIND_SEPARATOR
            _refuse_spelled_nonfinite(section, raw, starts[keep & after_separator])
        starts, lengths, kinds, first_bytes = starts[keep], lengths[keep], kinds[keep], first_bytes[keep]
    numeric = kinds != KIND_LINE
    windows = _byte_windows(section)
    words = windows[starts]
    words &= ~np.uint64(0xFF)
    words |= _LEAD[first_bytes]
    values = _swar_digits(words, np.minimum(lengths, 8), masked=False).astype(np.float64)
    values *= _SIGN_FACTOR[first_bytes]  # (line markers hold junk: only their kind is used)
    long_token = lengths > 8
    if b"." in section:
        dots = np.flatnonzero(raw == ord("."))
        owner = np.searchsorted(starts, dots, side="right") - 1
        long_token[owner[owner >= 0]] = True
    if affn and (b"E" in section or b"e" in section):
        marks = np.flatnonzero(classes == EXPONENT)
        owner = np.searchsorted(starts, marks, side="right") - 1
        long_token[owner[owner >= 0]] = True
    if b"+" in section or b"-" in section:
        bare = numeric & (lengths == 1) & (classes[starts] == SIGN)
        if bare.any():
            at = int(starts[np.flatnonzero(bare)[0]])
            raise DecodeError(_line_of(section, at), "a sign with no digits after it")
    rest = np.flatnonzero(numeric & long_token)
    if rest.size and not affn:
        # Line-start X values are checks only: those of every LINE_SAMPLE-th line (and the last)
        # are read; the step check between read lines still counts every point between them.
        previous = np.maximum(rest - 1, 0)
        is_x = (rest == 0) | (kinds[previous] == KIND_LINE)
        x_rest = np.flatnonzero(is_x)
        if x_rest.size > 2 * LINE_SAMPLE:
            skip = np.zeros(rest.size, dtype=bool)
            skip[x_rest] = True
            skip[x_rest[::LINE_SAMPLE]] = False
            skip[x_rest[-1]] = False
            values[rest[skip]] = np.nan
            rest = rest[~skip]
    if rest.size:
        magnitude, ok = _swar_decimal(windows, starts[rest], lengths[rest], _LEAD[first_bytes[rest]])
        values[rest[ok]] = magnitude[ok] * _SIGN_FACTOR[first_bytes[rest[ok]]]
        slow = rest[~ok]
        if slow.size:
            values[slow] = _parse_long_tokens(section, raw, starts[slow], lengths[slow], first_bytes[slow])
    return values, kinds


def _parse_long_tokens(
    section: bytes, raw: np.ndarray, starts: np.ndarray, lengths: np.ndarray, first: np.ndarray
) -> np.ndarray:
    """Tokens with a decimal point or over 8 characters: gathered, then numpy's C parser."""
    count = starts.size
    widths = lengths + 1  # each token and the byte after it, which becomes a space
    offsets = np.cumsum(widths) - widths
    source = np.arange(int(widths.sum())) + np.repeat(starts - offsets, widths)
    np.minimum(source, raw.size - 1, out=source)
    out = raw[source]
    out[offsets + lengths] = ord(" ")
    out[offsets] = _LEAD[first].astype(np.uint8)
    magnitude = _parse_numbers(out.tobytes())  # ValueError: the caller finds the line
    if magnitude.size != count:
        raise ValueError("token count changed while parsing")
    return np.where(_NEGATIVE[first], -magnitude, magnitude)


def _is_affn(section: bytes) -> bool:
    """True for sections that look like plain numbers (E/e only as exponents, `1E-3`).

    Judged on the first 4 kB for letters; a later letter makes numpy's parser fail, and
    `tokenize` then takes the compressed path. `1946E434`: E before a digit is SQZ +5.
    """
    if section[:4096].translate(None, _AFFN_DELETE):
        return False
    upper, lower = b"E" in section, b"e" in section
    if not (upper or lower):
        return True
    raw = np.frombuffer(section, dtype=np.uint8)
    if upper and lower:
        marks = np.flatnonzero((raw | 0x20) == ord("e"))
    else:  # one case only (as a writer prints them): one pass fewer over the section
        marks = np.flatnonzero(raw == (ord("E") if upper else ord("e")))
    following = raw[np.minimum(marks + 1, raw.size - 1)]
    return bool(np.all((following == ord("+")) | (following == ord("-"))) and marks[-1] + 1 < raw.size)


_NONFINITE_WORD = re.compile(rb"(?i)[+-]?(?:nan|inf(?:inity)?)")


def _refuse_spelled_nonfinite(section: bytes, raw: np.ndarray, first: np.ndarray) -> None:
    """`nan`/`inf` written out: letters that would otherwise decode as SQZ/DIF digits.

    Only a whole word after a separator counts, so genuine ASDF such as `A5nan` is read.
    """
    first = first[np.isin(raw[first], np.frombuffer(b"nNiI+-", dtype=np.uint8))]
    first = first[first + 2 < raw.size]
    letters = np.where(np.isin(raw[first], np.frombuffer(b"+-", dtype=np.uint8)), first + 1, first)
    pair = raw[np.minimum(letters, raw.size - 2)] | 0x20, raw[np.minimum(letters + 1, raw.size - 1)] | 0x20
    plausible = ((pair[0] == ord("n")) & (pair[1] == ord("a"))) | (
        (pair[0] == ord("i")) & (pair[1] == ord("n"))
    )
    for position in first[plausible].tolist():
        match = _NONFINITE_WORD.match(section, position)
        if match is None:
            continue
        end = match.end()
        if end == len(section) or section[end] in b" \t,\n":
            word = match.group().decode("latin-1")
            raise DecodeError(_line_of(section, position), f"{word!r} is not a finite number")


def tokenize(section: bytes) -> Tokens:
    """All numbers of a `(X++(Y..Y))` data section with kinds; KIND_LINE after each line."""
    affn = _is_affn(section)
    if affn:
        # a C parser over the whole section, a NaN marker in place of each line end
        text = section.replace(b",", b" ") if b"," in section else section
        try:
            values = _affn_numbers(text)
        except ValueError:
            # Signs also separate AFFN numbers: `1.5-2.3` is 1.5 and -2.3 (not after an exponent).
            spaced = re.sub(rb"(?<=[0-9.])([+-])", rb" \1", text)
            try:
                values = _parse_numbers(spaced.replace(b"\n", _MARKER))
            except ValueError:
                if section.translate(None, _AFFN_DELETE):
                    affn = False  # letters after the first 4 kB: compressed data after all
                else:
                    line, problem = _first_bad_line(spaced.split(b"\n"), compressed=False)
                    raise DecodeError(line, problem) from None
        if affn:
            kinds = np.isnan(values).view(np.uint8) * np.uint8(KIND_LINE)  # KIND_AFFN is 0
            return Tokens(values, kinds, compressed=False)
    # Pieces of about CHUNK_BYTES, cut after a line end, keep the arrays in cache.
    value_parts: list[np.ndarray] = []
    kind_parts: list[np.ndarray] = []
    begin = 0
    lines_before = 0
    while begin < len(section):
        cut = section.find(b"\n", begin + CHUNK_BYTES)
        end = len(section) if cut == -1 else cut + 1
        piece = section[begin:end]
        try:
            values, kinds = _decode_tokens(piece, affn)
        except ValueError:
            line, problem = _first_bad_line(piece.split(b"\n"), compressed=True)
            raise DecodeError(lines_before + line, problem) from None
        except DecodeError as error:
            raise DecodeError(lines_before + error.line, error.problem) from None
        value_parts.append(values)
        kind_parts.append(kinds)
        lines_before += piece.count(b"\n")
        begin = end
    if len(value_parts) <= 1:
        empty = (np.empty(0), np.empty(0, dtype=np.uint8))
        values, kinds = (value_parts[0], kind_parts[0]) if value_parts else empty
        return Tokens(values, kinds, compressed=True)
    return Tokens(np.concatenate(value_parts), np.concatenate(kind_parts), compressed=True)


def decode_xydata(section: bytes, max_points: int) -> DecodedOrdinates:
    """Decode `(X++(Y..Y))` lines: DUP expansion, DIF integration, Y-check verification.

    Works in token space: each token gets a repeat count (1 for a Y value, the DUP count for a
    value followed by DUP, one less for a Y-check value, 0 for X values, line markers and DUP
    tokens), so one `np.repeat` expands DUPs and drops everything that is not a point. `max_points` bounds the
    expanded size (a corrupt DUP count must not exhaust memory).
    """
    tokens = tokenize(section)
    values, kinds = tokens.values, tokens.kinds
    size = kinds.size
    is_line = kinds == KIND_LINE
    if np.isinf(values).any():  # an overflowing number is inf (markers hold NaN or junk)
        bad = int(np.flatnonzero(np.isinf(values))[0])
        raise DecodeError(int(np.count_nonzero(is_line[:bad])), "value is not finite")
    markers = np.flatnonzero(is_line)

    def line_of(token: int) -> int:
        return int(np.searchsorted(markers, token))

    is_x = np.empty(size, dtype=bool)
    if size:
        is_x[0] = True
        is_x[1:] = is_line[:-1]
    is_x &= ~is_line
    # X tokens: the first token and each one after a line marker, with the markers before
    # them counted on the way (so no search is needed for the line of a line's first Y).
    line_starts = np.empty(markers.size + 1, dtype=np.int64)
    line_starts[0] = 0
    line_starts[1:] = markers + 1
    is_line_start = line_starts < size
    is_line_start[is_line_start] = is_x[line_starts[is_line_start]]
    x_at = line_starts[is_line_start]
    x_markers = np.flatnonzero(is_line_start)  # markers before each X token
    x_kinds = kinds[x_at]
    wrong_x = np.flatnonzero((x_kinds == KIND_DIF) | (x_kinds == KIND_DUP))
    if wrong_x.size:
        raise DecodeError(line_of(int(x_at[wrong_x[0]])), "line starts with a DIF or DUP character where its X value belongs")
    is_y = ~(is_x | is_line)
    followed = x_at + 1 < size
    after_x = x_at[followed] + 1
    holds_y = is_y[after_x]
    line_first = after_x[holds_y]  # first Y token of every line holding Y values
    line_first_markers = x_markers[followed][holds_y]  # = np.searchsorted(markers, line_first)
    # tokens before a line's first Y that are not Y: the X tokens up to its own, and markers
    line_first_not_y = np.flatnonzero(followed)[holds_y] + 1 + line_first_markers
    if line_first.size == 0:
        raise DecodeError(0, "no Y values in the data lines")
    seen = np.zeros(5, dtype=np.int64)
    if tokens.compressed:
        for kind in (KIND_SQZ, KIND_DIF, KIND_DUP):
            seen[kind] = np.count_nonzero(kinds == kind) - np.count_nonzero(x_kinds == kind)
    seen[KIND_AFFN] = np.count_nonzero(is_y) - seen[KIND_SQZ] - seen[KIND_DIF] - seen[KIND_DUP]
    forms = tuple(
        name for name, kind in (("AFFN", KIND_AFFN), ("SQZ", KIND_SQZ), ("DIF", KIND_DIF), ("DUP", KIND_DUP)) if seen[kind]
    )
    first = int(line_first[0])
    if kinds[first] == KIND_DIF:
        raise DecodeError(line_of(first), "first Y value is a DIF difference with no value before it")
    if not (seen[KIND_DIF] or seen[KIND_DUP]):
        # plain values (AFFN or SQZ): every Y token is one point
        y_at = np.flatnonzero(is_y)
        if y_at.size > max_points:
            raise DecodeError(line_of(int(y_at[-1])), f"{y_at.size} points decoded, more than the {max_points} possible")
        line_x = values[line_first - 1]
        kept = ~np.isnan(line_x)
        return DecodedOrdinates(
            y=values[y_at],
            line_x=line_x[kept],
            line_index=(line_first - line_first_not_y)[kept],  # = np.searchsorted(y_at, line_first)
            line_number=line_first_markers[kept],
            forms=forms,
            checks=0,
        )
    is_dif = kinds == KIND_DIF
    repeats = is_y.astype(np.intp)

    # DUP: the count is how often the preceding value (or difference) appears in total.
    if seen[KIND_DUP]:
        dups = np.flatnonzero(kinds == KIND_DUP)
        before = dups - 1
        orphan = (dups == 0) | ~is_y[np.maximum(before, 0)] | (kinds[np.maximum(before, 0)] == KIND_DUP)
        if orphan.any():
            raise DecodeError(line_of(int(dups[np.flatnonzero(orphan)[0]])), "DUP count with no value before it on the line")
        counts = values[dups]
        wrong = (counts < 1) | (counts != np.rint(counts)) | (counts > max_points)
        if wrong.any():
            bad = int(dups[np.flatnonzero(wrong)[0]])
            raise DecodeError(line_of(bad), "DUP count is not a whole number from 1 to the point limit")
        repeats[dups] = 0
        repeats[before] = counts.astype(np.intp)

    # Y-check: a line after one ending in a DIF starts by repeating that line's last value.
    later = line_first[1:]
    if seen[KIND_DIF]:
        # last Y token of the line before: usually three tokens back (Y, marker, X, here)
        previous = later - 3
        direct = is_y[np.maximum(previous, 0)] & (previous >= 0)
        if not direct.all():
            y_tokens = np.flatnonzero(is_y)
            far = ~direct
            previous[far] = y_tokens[np.searchsorted(y_tokens, later[far]) - 1]
        base = np.where(kinds[previous] == KIND_DUP, previous - 1, previous)
        is_check = is_dif[base] & ~is_dif[later]
    else:
        is_check = np.zeros(later.size, dtype=bool)
    check_at = later[is_check]
    repeats[check_at] -= 1  # the check repeats the previous point; a DUP after it adds points
    total = int(repeats.sum())
    if total > max_points:
        raise DecodeError(line_of(int(np.flatnonzero(is_y)[-1])), f"{total} points decoded, more than the {max_points} possible")
    absolute_y = int(seen[KIND_AFFN] + seen[KIND_SQZ])
    simple = (
        absolute_y == 1 + check_at.size and repeats[first] == 1 and not np.any(repeats[check_at])
    )
    # What is read from the tokens later, taken now: the tokens are let go before the running
    # sums, and the point counts are summed up in `repeats` itself (a million tokens are 8 MB
    # of values and 8 MB of repeats).
    check_values = values[check_at]
    line_x = values[line_first - 1]
    check_repeats = repeats[check_at]
    line_first_repeats = repeats[line_first]
    if seen[KIND_DIF] and simple:
        # The usual layout: one starting value, then differences (checks add nothing).
        # Only the first value and differences have repeats > 0 here (X values, markers, DUP
        # counts and checks have 0), so the running sum of the expanded values is y.
        y = np.repeat(values, repeats)
        del tokens, values
        np.cumsum(y, out=y)
    elif seen[KIND_DIF]:
        expanded = np.repeat(values, repeats)
        is_absolute = ~np.repeat(is_dif, repeats)
        absolute_at = np.flatnonzero(is_absolute)
        group = np.cumsum(is_absolute)
        group -= 1
        running = np.cumsum(np.where(is_absolute, 0.0, expanded))
        y = running + (expanded[absolute_at] - running[absolute_at])[group]
    else:
        y = np.repeat(values, repeats)
    points_through = np.cumsum(repeats, out=repeats)  # points up to and including each token
    if check_at.size:
        before_check = points_through[check_at] - check_repeats - 1
        scale = max(float(np.max(y)), -float(np.min(y))) + 1.0 if y.size else 1.0
        tolerance = 1e-9 * scale  # exact for integer ordinates below 1e9 (common practice)
        mismatch = (before_check < 0) | (np.abs(check_values - y[np.maximum(before_check, 0)]) > tolerance)
        if mismatch.any():
            bad = int(np.flatnonzero(mismatch)[0])
            raise DecodeError(
                line_of(int(check_at[bad])),
                f"DIF check failed: line starts with Y={check_values[bad]:.10g} but the previous "
                f"line's differences end at {y[max(int(before_check[bad]), 0)]:.10g}",
            )
    # Point index of each line's X: the check point (previous line's last) or its first value.
    line_point = points_through[line_first] - line_first_repeats
    line_point[1:][is_check] -= 1
    kept = ~np.isnan(line_x)  # line-start X not read (see LINE_SAMPLE) are NaN
    return DecodedOrdinates(
        y=y,
        line_x=line_x[kept],
        line_index=line_point[kept].astype(np.int64),
        line_number=line_first_markers[kept],
        forms=forms,
        checks=int(check_at.size),
    )


def parse_pairs(section: bytes, group: int) -> tuple[np.ndarray, np.ndarray]:
    """AFFN `(XY..XY)`-style tables: numbers separated by spaces, commas, semicolons, lines.

    Returns (numbers reshaped to rows of `group`, section line of each row's first number).
    """
    text = section.translate(bytes.maketrans(b",;", b"  "))
    if text.translate(None, b"0123456789.+-eE \t\n"):
        leftover = re.search(rb"[^0-9.+\-eE \t\n]", text)
        position = leftover.start() if leftover else 0
        raise DecodeError(
            _line_of(section, position),
            f"character {chr(section[position])!r} is not allowed in a point table",
        )
    marked = text.replace(b"\n", _MARKER)
    try:
        values = _parse_numbers(marked)
    except ValueError:
        spaced = re.sub(rb"(?<=[0-9.])([+-])", rb" \1", text)
        try:
            values = _parse_numbers(spaced.replace(b"\n", _MARKER))
        except ValueError:
            line, problem = _first_bad_line(spaced.split(b"\n"), compressed=False)
            raise DecodeError(line, problem) from None
    is_line = np.isnan(values)
    line_of_value = np.cumsum(is_line)[~is_line]
    numbers = values[~is_line]
    if not np.all(np.isfinite(numbers)):
        bad = int(np.flatnonzero(~np.isfinite(numbers))[0])
        raise DecodeError(int(line_of_value[bad]), "value is not finite")
    if numbers.size % group:
        last = int(line_of_value[-1]) if line_of_value.size else 0
        raise DecodeError(
            last, f"{numbers.size} numbers do not make whole groups of {group} (X, Y, ...)"
        )
    rows = numbers.reshape(-1, group)
    return rows, line_of_value[::group]
