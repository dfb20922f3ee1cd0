"""Vectorised decoding of JCAMP-DX `(X++(Y..Y))` data lines: AFFN and ASDF (SQZ, DIF, DUP).

The whole data section is handled as one numpy byte array; there is no per-character Python
loop. ASDF characters are rewritten into signed AFFN numbers (`J05` -> ` +105`, `S2` -> ` +12`)
by one `np.repeat` plus a few fancy assignments, a ` nan ` marker is put in place of every line
end, and numpy's C number parser reads the lot. Token kinds come from the byte at each token
start, so DIF integration, DUP expansion and the per-line DIF Y-check are array operations.

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


class DecodeError(Exception):
    """A problem in the data lines; `line` counts from 0 at the section's first line."""

    def __init__(self, line: int, problem: str) -> None:
        super().__init__(problem)
        self.line = line
        self.problem = problem


@dataclass(frozen=True)
class Tokens:
    """Every number in a data section, in order, with its kind; KIND_LINE marks line ends."""

    values: np.ndarray  # float64; NaN at KIND_LINE markers
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


def _first_bad_line(lines: list[bytes], compressed: bool) -> tuple[int, str]:
    """Slow path, only after a failure: the first line that cannot be read, and a snippet."""
    for number, line in enumerate(lines):
        try:
            if compressed:
                _decode_asdf(line)
            else:
                _parse_numbers(line.replace(b",", b" "))
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


def _swar_digits(words: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """Integers from up to 8 ASCII digits per uint64 (first digit in the lowest byte).

    Works in place on `words`: subtract ASCII '0' from every byte, drop bytes past the token,
    right-align, then combine pairs, quads and octets (SIMD-within-a-register arithmetic).
    """
    np.subtract(words, _ASCII_ZEROS, out=words)
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


def _decode_asdf(section: bytes) -> tuple[np.ndarray, np.ndarray]:
    """Values and kinds of every token (and line marker) of a compressed data section.

    Tokens of up to 8 characters without a decimal point (nearly all ASDF tokens) are read
    8 bytes at a time with integer SWAR arithmetic; longer ones (line-start X values) are
    gathered into one string for numpy's C parser.
    """
    size = len(section)
    classes_bytes = section.translate(_CLASS_TABLE)
    bad = classes_bytes.find(b"\x00")
    if bad != -1:
        raise DecodeError(
            _line_of(section, bad), f"character {chr(section[bad])!r} is not allowed in JCAMP-DX data"
        )
    classes = np.frombuffer(classes_bytes, dtype=np.uint8)
    start = classes >= SQZ  # SQZ, DIF, DUP, sign, separator, newline all begin a token
    if size:
        start[1:] |= (classes[1:] <= DOT) & (classes[:-1] >= SEP)
        start[0] = True
    starts = np.flatnonzero(start)
    lengths = np.diff(starts, append=size)
    kinds = _KIND_OF_CLASS[classes[starts]]
    raw = np.frombuffer(section, dtype=np.uint8)
    keep = kinds != _KIND_SEPARATOR
    after_separator = np.zeros(starts.size, dtype=bool)
    after_separator[1:] = kinds[:-1] == _KIND_SEPARATOR
    _refuse_spelled_nonfinite(section, raw, starts[keep & after_separator])
    starts, lengths, kinds = starts[keep], lengths[keep], kinds[keep]
    first_bytes = raw[starts]
    numeric = kinds != KIND_LINE
    values = np.full(starts.size, np.nan)
    simple = numeric & (lengths <= 8)
    if b"." in section:
        dots = np.flatnonzero(raw == ord("."))
        owner = np.searchsorted(starts, dots, side="right") - 1
        simple[owner[owner >= 0]] = False
    lonely_sign = numeric & (lengths == 1) & (classes[starts] == SIGN)
    if lonely_sign.any():
        at = int(starts[np.flatnonzero(lonely_sign)[0]])
        raise DecodeError(_line_of(section, at), "a sign with no digits after it")
    padded = section + b"\x00" * (16 - size % 8)
    words_view = np.lib.stride_tricks.as_strided(
        np.frombuffer(padded, dtype="<u8", count=len(padded) // 8), shape=(size,), strides=(1,)
    )
    pick = np.flatnonzero(simple)
    words = words_view[starts[pick]]
    words = (words & ~np.uint64(0xFF)) | _LEAD[first_bytes[pick]]
    magnitude = _swar_digits(words, lengths[pick]).astype(np.float64)
    magnitude *= _SIGN_FACTOR[first_bytes[pick]]
    values[pick] = magnitude
    rest = np.flatnonzero(numeric & ~simple)
    if rest.size:
        values[rest] = _parse_long_tokens(section, raw, starts[rest], lengths[rest], first_bytes[rest])
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
    """True for sections that hold only plain numbers (E/e then only as exponents)."""
    if section[:4096].translate(None, _AFFN_DELETE) or section.translate(None, _AFFN_DELETE):
        return False
    exponents = section.count(b"E") + section.count(b"e")
    if not exponents:
        return True
    signed = sum(section.count(p) for p in (b"E+", b"E-", b"e+", b"e-"))
    return signed == exponents  # `1946E434`: E followed by a digit is the SQZ digit +5


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
    if _is_affn(section):
        text = section.replace(b",", b" ") if b"," in section else section
        marked = text.replace(b"\n", _MARKER)
        try:
            values = _parse_numbers(marked)
        except ValueError:
            # Signs also separate AFFN numbers: `1.5-2.3` is 1.5 and -2.3 (not after an exponent).
            spaced = re.sub(rb"(?<=[0-9.])([+-])", rb" \1", text)
            try:
                values = _parse_numbers(spaced.replace(b"\n", _MARKER))
            except ValueError:
                line, problem = _first_bad_line(spaced.split(b"\n"), compressed=False)
                raise DecodeError(line, problem) from None
        kinds = np.where(np.isnan(values), KIND_LINE, KIND_AFFN).astype(np.uint8)
        return Tokens(values, kinds, compressed=False)
    try:
        values, kinds = _decode_asdf(section)
    except ValueError:
        line, problem = _first_bad_line(section.split(b"\n"), compressed=True)
        raise DecodeError(line, problem) from None
    return Tokens(values, kinds, compressed=True)


def decode_xydata(section: bytes, max_points: int) -> DecodedOrdinates:
    """Decode `(X++(Y..Y))` lines: DUP expansion, DIF integration, Y-check verification.

    `max_points` bounds the expanded size (a corrupt DUP count must not exhaust memory).
    """
    tokens = tokenize(section)
    values, kinds = tokens.values, tokens.kinds
    if values.size and not np.all(np.isfinite(values[kinds != KIND_LINE])):
        bad = int(np.flatnonzero(~np.isfinite(values) & (kinds != KIND_LINE))[0])
        raise DecodeError(int(np.count_nonzero(kinds[:bad] == KIND_LINE)), "value is not finite")
    is_line = kinds == KIND_LINE
    line_of_token = np.cumsum(is_line)  # marker belongs to the next line; tokens to their own
    line_of_token[is_line] -= 1
    previous_is_line = np.empty(kinds.size, dtype=bool)
    if kinds.size:
        previous_is_line[0] = True
        previous_is_line[1:] = is_line[:-1]
    is_x = previous_is_line & ~is_line
    x_kinds = kinds[is_x]
    wrong_x = np.flatnonzero((x_kinds == KIND_DIF) | (x_kinds == KIND_DUP))
    if wrong_x.size:
        line = int(line_of_token[is_x][wrong_x[0]])
        raise DecodeError(line, "line starts with a DIF or DUP character where its X value belongs")
    is_y = ~is_x & ~is_line
    y_values = values[is_y]
    y_kinds = kinds[is_y]
    y_lines = line_of_token[is_y]
    if y_values.size == 0:
        raise DecodeError(0, "no Y values in the data lines")

    forms = {"AFFN" if k == KIND_AFFN else ("SQZ", "DIF", "DUP")[k - 1] for k in np.unique(y_kinds).tolist()}

    # DUP: the count is how often the preceding value (or difference) appears in total.
    is_dup = y_kinds == KIND_DUP
    if is_dup.any():
        dups = np.flatnonzero(is_dup)
        previous = dups - 1
        if dups[0] == 0 or np.any(is_dup[previous]) or np.any(y_lines[previous] != y_lines[dups]):
            bad = next(
                int(d) for d in dups if d == 0 or is_dup[d - 1] or y_lines[d - 1] != y_lines[d]
            )
            raise DecodeError(int(y_lines[bad]), "DUP count with no value before it on the line")
        counts = y_values[dups]
        if np.any(counts < 1) or np.any(counts != np.rint(counts)):
            bad = int(dups[np.flatnonzero((counts < 1) | (counts != np.rint(counts)))[0]])
            raise DecodeError(int(y_lines[bad]), "DUP count is not a whole number of at least 1")
        repeats = np.ones(y_values.size, dtype=np.float64)
        repeats[previous] = counts
        keep = ~is_dup
        repeats = repeats[keep]
        total = float(repeats.sum())
        if total > max_points:
            raise DecodeError(
                int(y_lines[dups[np.argmax(counts)]]),
                f"DUP counts expand to {total:.0f} points, more than the {max_points} possible",
            )
        repeats_int = repeats.astype(np.intp)
        y_values = np.repeat(y_values[keep], repeats_int)
        y_kinds = np.repeat(y_kinds[keep], repeats_int)
        y_lines = np.repeat(y_lines[keep], repeats_int)
    elif y_values.size > max_points:
        raise DecodeError(int(y_lines[-1]), f"more than {max_points} Y values")

    # DIF: integrate differences from the last absolute value.
    is_absolute = y_kinds != KIND_DIF
    if not is_absolute[0]:
        raise DecodeError(int(y_lines[0]), "first Y value is a DIF difference with no value before it")
    absolute_at = np.flatnonzero(is_absolute)
    group = np.cumsum(is_absolute) - 1
    steps = np.where(is_absolute, 0.0, y_values)
    running = np.cumsum(steps)
    y = y_values[absolute_at][group] + (running - running[absolute_at][group])

    # Y-check: a line after one ending in a DIF starts by repeating that line's last value.
    first_on_line = np.flatnonzero(np.concatenate(([True], y_lines[1:] != y_lines[:-1])))
    later = first_on_line[1:]
    is_check = (y_kinds[later - 1] == KIND_DIF) & is_absolute[later]
    check_at = later[is_check]
    if check_at.size:
        scale = float(np.max(np.abs(y))) + 1.0
        tolerance = 1e-9 * scale  # exact for integer ordinates below 1e9 (common practice)
        mismatch = np.abs(y[check_at] - y[check_at - 1]) > tolerance
        if mismatch.any():
            bad = int(check_at[np.flatnonzero(mismatch)[0]])
            raise DecodeError(
                int(y_lines[bad]),
                f"DIF check failed: line starts with Y={y_values[bad]:.10g} but the previous "
                f"line's differences end at {y[bad - 1]:.10g}",
            )
    keep_point = np.ones(y.size, dtype=bool)
    keep_point[check_at] = False
    new_index = np.cumsum(keep_point) - 1
    # Point index of each line's X: the check point (previous line's last) or its first value.
    line_first = first_on_line
    line_is_check = np.zeros(line_first.size, dtype=bool)
    line_is_check[1:] = is_check
    point_of_line = np.where(line_is_check, new_index[np.maximum(line_first - 1, 0)], new_index[line_first])
    lines_with_y = y_lines[line_first]
    x_lines = line_of_token[is_x]
    x_values = values[is_x]
    order = np.searchsorted(x_lines, lines_with_y)
    return DecodedOrdinates(
        y=y[keep_point],
        line_x=x_values[order],
        line_index=point_of_line.astype(np.int64),
        line_number=lines_with_y.astype(np.int64),
        forms=tuple(f for f in ("AFFN", "SQZ", "DIF", "DUP") if f in forms),
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
