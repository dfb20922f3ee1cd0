"""JCAMP-DX 4.24 / 5.01 reader (IUPAC open standard): infrared spectra and peak tables.

Reads `##XYDATA=(X++(Y..Y))` in AFFN and every ASDF form (SQZ, DIF, DUP, mixed), with the
DIF Y-check verified; `##XYPOINTS=(XY..XY)` as a spectrum; `##PEAK TABLE=(XY..XY)` as a
`LineList`. The data lines are decoded by vectorised numpy code (`jcamp_asdf`). Header values
(FIRSTX, LASTX, DELTAX, NPOINTS, FIRSTY) are cross-checked against the decoded data; a
mismatch that makes the data wrong is a `SpectrumFileError`, one that does not is a note.
The writers live beside this module in `jcamp_write`.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from processing.errors import SpectrumFileError
from processing.readers.jcamp_asdf import DecodedOrdinates, DecodeError, decode_xydata, parse_pairs
from processing.spectrum import handed_over, FileMetadata, LineList, Spectrum, reverse_in_place, to_absorbance

FORMAT_NAME = "JCAMP-DX"
EXTENSIONS: tuple[str, ...] = (".jdx", ".dx", ".jcamp", ".jcm")

MAX_POINTS = 100_000_000  # NPOINTS beyond this is refused as absurd
# Points one XYDATA section may decode to: DUP compression lets a few bytes stand for any
# number of points, so the count is bounded by the bytes given before anything is allocated.
# Every FTIR spectrum fits in 2**20 points (0-8000 cm-1 at 0.0078 cm-1 spacing); beyond that a
# section must carry at least a quarter byte per point (real data take 2-12 bytes a point).
ANY_SIZE_POINTS = 1 << 20
POINTS_PER_BYTE = 4
DATA_LABELS = ("XYDATA", "XYPOINTS", "PEAKTABLE", "DATATABLE", "NTUPLES")
NOT_INFRARED = ("NMR", "MASS", "UV", "RAMAN", "CHROMATOGRAM")
# A transmittance file whose values go above this holds percent (0-100), not a fraction (0-1):
# fractions exceed 1 only by noise of a few percent (common practice).
PERCENT_THRESHOLD = 1.5

_IDENTIFY = re.compile(rb"(?im)^[ \t]*##[ \t]*(?:TITLE|JCAMP[-_ ]?DX)[ \t]*=")
_LABEL_DROP = str.maketrans("", "", " -/_\t")
_HEADER_NUMBER = re.compile(r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?")
_COMMENT = re.compile(rb"\$\$[^\n]*")


def identify(head: bytes) -> bool:
    """True when the first bytes hold a `##TITLE=` or `##JCAMP-DX=` labelled record."""
    return _IDENTIFY.search(head[:4096]) is not None


def normalise_label(label: str) -> str:
    """Label as the standard compares them: no spaces, dashes, slashes, underscores; upper case."""
    return label.translate(_LABEL_DROP).upper()


class _LineCounter:
    """1-based line numbers of byte offsets, counted on demand (big data sections skipped)."""

    def __init__(self, data: bytes) -> None:
        self.data = data
        self.offset = 0
        self.line = 1

    def at(self, offset: int) -> int:
        if offset < self.offset:
            self.offset, self.line = 0, 1
        self.line += self.data.count(b"\n", self.offset, offset)
        self.offset = offset
        return self.line


@dataclass
class _Record:
    label: str  # normalised
    raw_label: str
    value: str
    offset: int  # byte offset of the `##`
    counter: _LineCounter
    data: bytes = b""  # data lines of a data record (comments removed)

    @property
    def line(self) -> int:
        """1-based line of the `##`."""
        return self.counter.at(self.offset)

    @property
    def data_line(self) -> int:
        """1-based line of the first data line."""
        return self.line + 1


@dataclass
class _Block:
    title: str
    line: int
    records: list[_Record] = field(default_factory=list)
    closed: bool = False

    def values(self, label: str) -> list[_Record]:
        return [record for record in self.records if record.label == label]

    def text(self, label: str) -> str | None:
        found = self.values(label)
        return found[0].value if found else None

    def data_record(self) -> _Record | None:
        for label in ("XYDATA", "XYPOINTS", "PEAKTABLE"):
            found = self.values(label)
            if found:
                return found[0]
        return None


def _decode_text(raw: bytes) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        return raw.decode("latin-1")


def _find_pair(data: bytes, pair: bytes, start: int, end: int | None = None) -> int:
    """`data.find(pair, start, end)` for a doubled byte, by memchr on one byte (much faster)."""
    single = pair[:1]
    stop = len(data) if end is None else end
    position = data.find(single, start, stop)
    while position != -1 and position + 1 < stop and data[position + 1 : position + 2] != single:
        position = data.find(single, position + 2, stop)
    return position if position != -1 and position + 1 < stop else -1


def _record_starts(data: bytes) -> list[int]:
    """Byte offsets of every `##` that begins a line (after optional blanks)."""
    starts: list[int] = []
    position = _find_pair(data, b"##", 0)
    while position != -1:
        line_start = data.rfind(b"\n", 0, position) + 1
        if not data[line_start:position].strip(b" \t"):
            starts.append(position)
            newline = data.find(b"\n", position)
            if newline == -1:
                break
            position = _find_pair(data, b"##", newline)
        else:
            position = _find_pair(data, b"##", position + 2)
    return starts


def _split_records(data: bytes, source: str, notes: list[str]) -> list[_Record]:
    starts = _record_starts(data)
    if not starts:
        raise SpectrumFileError(source, "no JCAMP-DX labelled records (##LABEL=value lines)")
    records: list[_Record] = []
    counter = _LineCounter(data)
    bounds = starts + [len(data)]
    for index, start in enumerate(starts):
        end = bounds[index + 1]
        newline = data.find(b"\n", start, end)
        first = data[start:end] if newline == -1 else data[start:newline]
        rest = b"" if newline == -1 else data[newline + 1 : end]
        equals = first.find(b"=")
        if equals == -1:
            notes.append(f"line {counter.at(start)}: {first[:40].decode('latin-1')!r} has no '='; ignored")
            continue
        raw_label = _decode_text(first[2:equals]).strip()
        label = normalise_label(raw_label)
        head_value = _COMMENT.sub(b"", first[equals + 1 :])
        if label in DATA_LABELS:
            if _find_pair(rest, b"$$", 0) != -1:
                rest = _COMMENT.sub(b"", rest)
            record = _Record(label, raw_label, _decode_text(head_value).strip(), start, counter, rest)
        else:
            text = head_value + (b"\n" + _COMMENT.sub(b"", rest) if rest.strip() else b"")
            record = _Record(label, raw_label, _decode_text(text).strip(), start, counter)
        records.append(record)
    return records


def _blocks(records: list[_Record], source: str, notes: list[str], data: bytes) -> list[_Block]:
    """Group records into blocks: `##TITLE=` opens one (nested in a link block), `##END=` closes."""
    blocks: list[_Block] = []
    stack: list[_Block] = []
    for record in records:
        if record.label == "TITLE":
            block = _Block(record.value.splitlines()[0].strip() if record.value else "", record.line)
            block.records.append(record)
            blocks.append(block)
            stack.append(block)
        elif record.label == "END":
            if stack:
                stack.pop().closed = True
            else:
                notes.append(f"line {record.line}: ##END= with no open block; ignored")
        else:
            if not stack:
                block = _Block("", record.line)
                blocks.append(block)
                stack.append(block)
                notes.append(f"line {record.line}: records before any ##TITLE=")
            stack[-1].records.append(record)
    if stack:
        open_block = stack[-1]
        raise SpectrumFileError(
            source,
            f"truncated: block {open_block.title!r} (from line {open_block.line}) has no ##END=",
            data.count(b"\n") + (0 if data.endswith(b"\n") else 1),
        )
    return blocks


def _choose_block(blocks: list[_Block], source: str, notes: list[str]) -> _Block:
    """The infrared spectrum block; a peak table only when there is no spectrum."""
    candidates: list[tuple[int, int, _Block]] = []
    skipped: list[str] = []
    for number, block in enumerate(blocks, start=1):
        record = block.data_record()
        if record is None:
            continue
        data_type = (block.text("DATATYPE") or "").upper()
        if any(word in data_type for word in NOT_INFRARED):
            skipped.append(data_type)
            continue
        if record.label == "PEAKTABLE":
            score = 1
        elif "INFRARED" in data_type or re.search(r"\bIR\b", data_type):
            score = 3
        else:
            score = 2
        candidates.append((score, -number, block))
    if not candidates:
        if skipped:
            raise SpectrumFileError(source, f"no infrared data (data types: {', '.join(skipped)})")
        other = [r.label for b in blocks for r in b.records if r.label in ("DATATABLE", "NTUPLES")]
        if other:
            raise SpectrumFileError(source, f"##{other[0]}= data are not read; need XYDATA, XYPOINTS or PEAK TABLE")
        raise SpectrumFileError(source, "no ##XYDATA=, ##XYPOINTS= or ##PEAK TABLE= record")
    score, minus_number, chosen = max(candidates, key=lambda item: (item[0], item[1]))
    data_blocks = sum(1 for b in blocks if b.data_record() is not None)
    if data_blocks > 1:
        data_type = chosen.text("DATATYPE") or "no DATA TYPE"
        notes.append(
            f"multi-block file: read block {-minus_number} of {len(blocks)} "
            f"({chosen.title!r}, {data_type}); {data_blocks - 1} other data block(s) ignored"
        )
    return chosen


class _Header:
    """Numbers from a block's records; decimal commas allowed; bad values name their line."""

    def __init__(self, block: _Block, source: str, notes: list[str]) -> None:
        self.block = block
        self.source = source
        self.notes = notes

    def number(self, label: str) -> float | None:
        found = self.block.values(label)
        if not found:
            return None
        values = [self._parse(record) for record in found]
        if len(set(values)) > 1:
            self.notes.append(f"##{label}= given {len(values)} times ({', '.join(f'{v:g}' for v in values)}); first used")
        return values[0]

    def all_numbers(self, label: str) -> list[float]:
        return [self._parse(record) for record in self.block.values(label)]

    def _parse(self, record: _Record) -> float:
        text = record.value.strip().split("\n")[0].strip()
        match = _HEADER_NUMBER.match(text)
        if match is None:
            raise SpectrumFileError(self.source, f"##{record.raw_label}= {text[:30]!r} is not a number", record.line)
        literal = match.group()
        if "," in literal:
            literal = literal.replace(",", ".")
        value = float(literal)
        if not np.isfinite(value):
            raise SpectrumFileError(self.source, f"##{record.raw_label}= is not finite", record.line)
        return value


def _rounding_unit(values: np.ndarray) -> float:
    """The coarsest decimal step all values sit on (1, 0.1, ...): how they were rounded.

    Judged on the first 4096 values: a writer rounds every line the same way.
    """
    values = values[:4096]
    scale = np.max(np.abs(values)) if values.size else 0.0
    for decimals in range(0, 10):
        scaled = values * 10.0**decimals
        if np.all(np.abs(scaled - np.rint(scaled)) <= 1e-6 + 1e-12 * scale * 10.0**decimals):
            return 10.0**-decimals
    return 0.0


def _fits_better_unscaled(
    raw: np.ndarray, scaled: np.ndarray, index: np.ndarray, first_x: float | None, delta_x: float | None
) -> bool:
    """True when line-start X make sense without XFACTOR (a writer's slip seen in practice)."""
    if first_x is not None:
        return abs(raw[0] - first_x) < abs(scaled[0] - first_x)
    if delta_x and raw.size >= 2:
        held = np.diff(index)
        return float(np.max(np.abs(np.diff(raw) / delta_x - held))) < float(
            np.max(np.abs(np.diff(scaled) / delta_x - held))
        )
    return False


def _x_axis(
    decoded: DecodedOrdinates,
    header: _Header,
    xfactor: float,
    source: str,
    data_line: int,
    notes: list[str],
) -> np.ndarray:
    """Place the points from FIRSTX/LASTX (or DELTAX); line-start X and NPOINTS only check."""
    n = decoded.y.size
    first_x = header.number("FIRSTX")
    last_x = header.number("LASTX")
    delta_x = header.number("DELTAX")
    stated_counts = header.all_numbers("NPOINTS")
    for stated in stated_counts:
        if stated != int(stated) or stated < 1 or stated > MAX_POINTS:
            record = header.block.values("NPOINTS")[0]
            raise SpectrumFileError(source, f"##NPOINTS={stated:g} is not a plausible point count", record.line)
    index = decoded.line_index
    line_x = decoded.line_x * xfactor
    if xfactor != 1.0 and _fits_better_unscaled(decoded.line_x, line_x, index, first_x, delta_x):
        line_x = decoded.line_x.copy()
        notes.append("line-start X values are in x units, not XFACTOR units")
        xfactor = 1.0
    line_numbers = decoded.line_number + data_line
    span = index[-1] - index[0]
    line_spacing = (line_x[-1] - line_x[0]) / span if span > 0 else None
    if first_x is None:
        first_x = float(line_x[0] - index[0] * (line_spacing or 0.0))
        notes.append("no ##FIRSTX=; the first line's X is used")
    if last_x is not None:
        if last_x == first_x:
            raise SpectrumFileError(source, "##FIRSTX= equals ##LASTX=", header.block.values("LASTX")[0].line)
        spacing = (last_x - first_x) / (n - 1)
        basis = "FIRSTX/LASTX"
    elif delta_x is not None and delta_x != 0:
        spacing = delta_x
        basis = "FIRSTX/DELTAX"
    elif line_spacing:
        spacing = line_spacing
        basis = "line-start X values"
        notes.append("no ##LASTX= or ##DELTAX=; point spacing taken from the line-start X values")
    else:
        raise SpectrumFileError(source, "cannot place the X values: no ##LASTX=, ##DELTAX= or second data line", data_line)
    if delta_x is None and basis == "FIRSTX/LASTX":
        notes.append(f"no ##DELTAX=; spacing {spacing:.10g} derived from FIRSTX, LASTX and the point count")
    elif delta_x is not None and basis == "FIRSTX/LASTX":
        if abs(delta_x - spacing) > 1e-3 * abs(spacing):
            notes.append(f"##DELTAX={delta_x:g} disagrees with (LASTX-FIRSTX)/(n-1) = {spacing:.10g}; FIRSTX/LASTX used")

    unit = _rounding_unit(decoded.line_x) * abs(xfactor)
    magnitude = float(np.max(np.abs(line_x))) if line_x.size else 0.0
    tolerance = unit + 1e-9 * magnitude + 1e-6 * abs(spacing)  # one printed digit, rounded or cut

    # Local check: the X step between consecutive (read) lines must match the points between
    # them. The spacing is the lines' own end-to-end one, so a rounded or wrong DELTAX cannot
    # trip it, while one lost point still shows as a step of one point too many.
    step_spacing = line_spacing if line_spacing else spacing
    if line_x.size >= 2 and 2.0 * tolerance < 0.5 * abs(step_spacing):
        implied = np.diff(line_x) / step_spacing
        held = np.diff(index)
        wrong = np.flatnonzero(np.abs(implied - held) > 0.5)
        if wrong.size:
            k = int(wrong[0])
            raise SpectrumFileError(
                source,
                f"line-start X steps by {implied[k]:.2f} points since line {int(line_numbers[k])}, "
                f"but {held[k]} points lie between: points are missing or extra",
                int(line_numbers[k + 1]),
            )

    stated = [int(s) for s in stated_counts]
    if stated and n not in stated:
        predicted_last = line_x[-1] + (n - 1 - index[-1]) * step_spacing
        reaches_last = last_x is not None and abs(predicted_last - last_x) <= tolerance + 0.5 * abs(step_spacing)
        if reaches_last and line_x.size >= 2:
            notes.append(f"##NPOINTS={stated[0]} but the data hold {n} points ending at LASTX; the data are used")
        elif n < stated[0]:
            raise SpectrumFileError(source, f"truncated: {n} points decoded, ##NPOINTS={stated[0]}", int(line_numbers[-1]))
        else:
            raise SpectrumFileError(source, f"{n} points decoded, ##NPOINTS={stated[0]}", int(line_numbers[-1]))
    elif not stated:
        notes.append(f"no ##NPOINTS=; {n} points decoded")
    elif len(set(stated)) > 1:
        notes.append(f"##NPOINTS= given as {', '.join(map(str, stated))}; {n} points decoded")

    # first + step * index, worked out in one array (the same doubles as the expression)
    x = np.arange(n, dtype=np.float64)
    if basis == "FIRSTX/LASTX":
        x /= n - 1
        x *= last_x - first_x
        x += first_x
        x[-1] = last_x
    else:
        x *= spacing
        x += first_x

    residual = line_x - x[index]
    off = np.abs(residual) > tolerance
    if off.any():
        worst = int(np.argmax(np.abs(residual)))
        if abs(residual[worst]) > tolerance + 0.5 * abs(spacing):
            raise SpectrumFileError(
                source,
                f"line starts at X={line_x[worst]:.10g} but {basis} put its point at "
                f"{x[index[worst]]:.10g} ({residual[worst] / spacing:+.1f} point spacings)",
                int(line_numbers[worst]),
            )
        notes.append(
            f"line-start X values differ from the {basis} placement by up to "
            f"{abs(residual[worst]):.3g} (less than half a point spacing)"
        )
    return x


_X_UNITS = {
    "1/CM": "cm1", "CM1": "cm1", "CM^1": "cm1", "1/CM1": "cm1", "WAVENUMBERS": "cm1", "WAVENUMBER": "cm1",
    "MICROMETERS": "um", "MICROMETER": "um", "MICRONS": "um", "MICRON": "um", "UM": "um", "µM": "um",
    "NANOMETERS": "nm", "NANOMETER": "nm", "NM": "nm",
}


def _to_wavenumber(x: np.ndarray, block: _Block, source: str, notes: list[str]) -> np.ndarray:
    raw = block.text("XUNITS")
    if raw is None:
        raise SpectrumFileError(source, "no ##XUNITS=; cannot tell wavenumber from wavelength")
    key = raw.upper().replace(" ", "").replace("-", "")
    unit = _X_UNITS.get(key) or _X_UNITS.get(raw.upper().replace(" ", ""))
    line = block.values("XUNITS")[0].line
    if unit is None:
        raise SpectrumFileError(source, f"##XUNITS={raw} not read (need 1/CM or MICROMETERS)", line)
    if unit == "cm1":
        return x
    if np.any(x <= 0):
        raise SpectrumFileError(source, f"wavelength values must be positive under ##XUNITS={raw}", line)
    factor = 1e4 if unit == "um" else 1e7
    notes.append(f"x converted from {'micrometers' if unit == 'um' else 'nanometers'}: cm-1 = {factor:g} / x")
    return factor / x


def _y_kind(y: np.ndarray, block: _Block, source: str, notes: list[str], peaks: bool) -> str:
    raw = block.text("YUNITS")
    if raw is None:
        if peaks:
            return "unknown"
        raise SpectrumFileError(source, "no ##YUNITS=; cannot tell absorbance from transmittance")
    key = raw.upper().replace(" ", "")
    if key in ("ABSORBANCE", "ABS", "A"):
        return "absorbance"
    if key in ("%T", "%TRANSMITTANCE", "PERCENTTRANSMITTANCE", "TRANSMITTANCE(%)", "TRANSMITTANCE%", "%TRANSMISSION"):
        return "percent_transmittance"
    if key in ("TRANSMITTANCE", "TRANSMISSION", "T"):
        if y.size and float(np.max(y)) > PERCENT_THRESHOLD:
            notes.append(
                f"##YUNITS={raw} but values reach {float(np.max(y)):.4g}: read as percent transmittance"
            )
            return "percent_transmittance"
        return "transmittance"
    if peaks:
        return "unknown"
    raise SpectrumFileError(source, f"##YUNITS={raw} not read (need ABSORBANCE or TRANSMITTANCE)", block.values("YUNITS")[0].line)


_LONG_DATE = re.compile(r"(\d{4})[/.-](\d{1,2})[/.-](\d{1,2})(?:[ T,]+(\d{1,2}):(\d{2})(?::(\d{2}(?:\.\d+)?))?)?")
_TIME = re.compile(r"(\d{1,2}):(\d{2})(?::(\d{2}))?")


def _acquired(block: _Block) -> str | None:
    """ISO date/time from ##LONGDATE or ##DATE/##TIME; the raw text when it cannot be parsed."""
    long_date = block.text("LONGDATE")
    date = block.text("DATE")
    time = block.text("TIME")
    text = long_date or " ".join(part for part in (date, time) if part)
    if not text:
        return None
    match = _LONG_DATE.search(text)
    if match is None:
        return text.strip()
    year, month, day, hour, minute, second = match.groups()
    if not (1 <= int(month) <= 12 and 1 <= int(day) <= 31):
        return text.strip()
    iso = f"{int(year):04d}-{int(month):02d}-{int(day):02d}"
    if hour is None and time:
        found = _TIME.search(time)
        if found:
            hour, minute, second = found.groups()
    if hour is not None:
        iso += f"T{int(hour):02d}:{minute}" + (f":{second}" if second else "")
    return iso


def _metadata(block: _Block, record_name: str, forms: str, notes: list[str], source: str) -> FileMetadata:
    version = (block.text("JCAMPDX") or "").split()
    resolution = None
    resolution_records = block.values("RESOLUTION")
    if resolution_records:
        match = _HEADER_NUMBER.search(resolution_records[0].value)
        if match:
            resolution = float(match.group().replace(",", "."))
            if not np.isfinite(resolution) or resolution <= 0:
                notes.append(f"##RESOLUTION={resolution_records[0].value} ignored")
                resolution = None
    apodization = next((r.value for r in block.records if "APOD" in r.label and r.value), None)
    format_name = " ".join(part for part in ("JCAMP-DX", version[0] if version else "", record_name, forms) if part)
    header = tuple((r.raw_label, r.value) for r in block.records if r.label not in DATA_LABELS) + tuple(
        (r.raw_label, r.value) for r in block.records if r.label in DATA_LABELS
    )
    return FileMetadata(
        title=block.title,
        acquired=_acquired(block),
        resolution_cm1=resolution,
        apodization=apodization,
        source_path=source,
        format=format_name,
        header=header,
        notes=tuple(notes),
    )


def _factor(header: _Header, label: str, source: str) -> float:
    value = header.number(label)
    if value is None:
        return 1.0
    if value == 0:
        raise SpectrumFileError(source, f"##{label}=0 would make every value zero", header.block.values(label)[0].line)
    return value


def points_holdable(section_bytes: int) -> int:
    """The most points an XYDATA section of this many bytes is allowed to decode to."""
    return min(MAX_POINTS, max(ANY_SIZE_POINTS, POINTS_PER_BYTE * section_bytes))


def _read_xydata(block: _Block, record: _Record, source: str, notes: list[str]) -> Spectrum:
    variables = re.sub(r"\s", "", record.value).upper()
    if variables == "(X++(Y..Y)":
        notes.append("##XYDATA= variable list lacks its closing ')'")
    elif variables != "(X++(Y..Y))":
        raise SpectrumFileError(source, f"##XYDATA={record.value} not read (only (X++(Y..Y)))", record.line)
    header = _Header(block, source, notes)
    xfactor = _factor(header, "XFACTOR", source)
    yfactor = _factor(header, "YFACTOR", source)
    stated = header.all_numbers("NPOINTS")
    plausible = [int(s) for s in stated if s == int(s) and 1 <= s <= MAX_POINTS]
    if stated and not plausible:
        raise SpectrumFileError(source, f"##NPOINTS={stated[0]:g} is not a plausible point count", block.values("NPOINTS")[0].line)
    holdable = points_holdable(len(record.data))
    if plausible and min(plausible) > holdable:
        raise SpectrumFileError(
            source,
            f"##NPOINTS={min(plausible)} is more than {len(record.data)} bytes of data can hold "
            f"(at most {holdable} points); refused before decoding",
            block.values("NPOINTS")[0].line,
        )
    limit = min(holdable, 2 * max(plausible) + 100) if plausible else holdable
    try:
        decoded = decode_xydata(record.data, limit)
    except DecodeError as error:
        raise SpectrumFileError(source, error.problem, record.data_line + error.line) from None
    if decoded.y.size < 2:
        raise SpectrumFileError(source, f"only {decoded.y.size} point in ##XYDATA=; a spectrum needs 2 or more", record.line)
    y = np.multiply(decoded.y, yfactor, out=decoded.y)  # the decoder's own array: scaled in place
    x = _x_axis(decoded, header, xfactor, source, record.data_line, notes)
    first_y = header.number("FIRSTY")
    if first_y is not None:
        # FIRSTY is often printed with few digits: allow 1e-3 relative or one YFACTOR step.
        allowed = 1e-3 * abs(first_y) + abs(yfactor) + 1e-9 * max(float(np.max(y)), -float(np.min(y)))
        if abs(y[0] - first_y) > allowed:
            notes.append(f"##FIRSTY={first_y:g} but the first decoded Y is {y[0]:.8g}; FIRSTY ignored")
    if decoded.checks:
        notes.append(f"{decoded.checks} DIF Y-check values verified and dropped")
    forms = " ".join(f for f in ("DIF", "SQZ", "DUP", "AFFN") if f in decoded.forms and not (f == "SQZ" and "DIF" in decoded.forms))
    return _even_spectrum(x, y, block, source, notes, forms)


def _even_spectrum(x: np.ndarray, y: np.ndarray, block: _Block, source: str, notes: list[str], forms: str) -> Spectrum:
    """XYDATA points: x is evenly spaced by construction, so only y needs checking here."""
    x = _to_wavenumber(x, block, source, notes)
    kind = _y_kind(y, block, source, notes, peaks=False)
    if not np.all(np.isfinite(y)):
        bad = int(np.flatnonzero(~np.isfinite(y))[0])
        raise SpectrumFileError(source, f"y value at point {bad + 1} is not finite")
    if x[-1] < x[0]:
        for column in (x, y):  # this reader's own arrays: reversed where they lie
            reverse_in_place(column)
        notes.append("x axis was descending; reversed to ascending")
    absorbance, saturated, conversion = to_absorbance(y, kind, in_place=True)
    meta = _metadata(block, "XYDATA", forms, notes, source)
    handed_over(x, absorbance, saturated)
    try:
        return Spectrum(x, absorbance, saturated, kind, conversion, meta)
    except ValueError as error:  # e.g. spacing below float resolution: not ascending
        raise SpectrumFileError(source, str(error)) from None


def _spectrum(x: np.ndarray, y: np.ndarray, block: _Block, source: str, notes: list[str], record: str, forms: str) -> Spectrum:
    x = _to_wavenumber(x, block, source, notes)
    kind = _y_kind(y, block, source, notes, peaks=False)
    meta = _metadata(block, record, forms, notes, source)
    try:
        return Spectrum.from_y(x, y, kind, meta)
    except ValueError as error:
        raise SpectrumFileError(source, str(error)) from None


def _read_table(block: _Block, record: _Record, source: str, notes: list[str]) -> Spectrum | LineList:
    variables = re.sub(r"\s", "", record.value).upper().rstrip(")").lstrip("(")
    groups = {"XY..XY": 2, "XYW..XYW": 3, "XYM..XYM": 3}
    if variables not in groups:
        raise SpectrumFileError(source, f"##{record.raw_label}={record.value} not read (need (XY..XY))", record.line)
    header = _Header(block, source, notes)
    xfactor = _factor(header, "XFACTOR", source)
    yfactor = _factor(header, "YFACTOR", source)
    try:
        rows, lines = parse_pairs(record.data, groups[variables])
    except DecodeError as error:
        raise SpectrumFileError(source, error.problem, record.data_line + error.line) from None
    x = rows[:, 0] * xfactor
    y = rows[:, 1] * yfactor
    stated = header.all_numbers("NPOINTS")
    if stated and int(stated[0]) != x.size:
        if stated[0] < 1 or stated[0] > MAX_POINTS:
            raise SpectrumFileError(source, f"##NPOINTS={stated[0]:g} is not a plausible point count", block.values("NPOINTS")[0].line)
        last_x = header.number("LASTX")
        if last_x is not None and x.size and abs(x[-1] - last_x) <= 1e-6 * max(1.0, abs(last_x)):
            notes.append(f"##NPOINTS={stated[0]:g} but {x.size} points end at LASTX; the data are used")
        else:
            where = record.data_line + int(lines[-1]) if lines.size else record.line
            raise SpectrumFileError(source, f"{x.size} points read, ##NPOINTS={stated[0]:g}", where)
    if record.label == "PEAKTABLE":
        if x.size == 0:
            raise SpectrumFileError(source, "empty ##PEAK TABLE=", record.line)
        x = _to_wavenumber(x, block, source, notes)
        kind = _y_kind(y, block, source, notes, peaks=True)
        meta = _metadata(block, "PEAK TABLE", "AFFN", notes, source)
        try:
            return LineList(x, y, kind, meta)
        except ValueError as error:
            raise SpectrumFileError(source, str(error)) from None
    if x.size < 2:
        raise SpectrumFileError(source, f"only {x.size} point in ##XYPOINTS=; a spectrum needs 2 or more", record.line)
    return _spectrum(x, y, block, source, notes, "XYPOINTS", "AFFN")


def _prepare(data: bytes, source: str) -> bytes:
    data = bytes(data)
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    if re.search(rb"\S", data) is None:
        raise SpectrumFileError(source, "file is empty")
    if b"\x00" in data:
        raise SpectrumFileError(source, "binary data (NUL bytes), not a JCAMP-DX text file")
    if b"\r" in data:
        data = data.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    return data


def parse(data: bytes, source: str) -> Spectrum | LineList:
    """Read JCAMP-DX bytes; every problem is a `SpectrumFileError` naming `source` and line."""
    try:
        with np.errstate(all="ignore"):
            return _parse(data, source)
    except (SpectrumFileError, MemoryError):
        raise  # out of memory is the machine's limit, not a fault of the file or the reader
    except Exception as error:  # noqa: BLE001
        # Contract: parse() raises only SpectrumFileError. Not swallowed: the message says
        # "reader fault" and names the original type (the property test asserts it never shows).
        raise SpectrumFileError(source, f"reader fault ({type(error).__name__}: {error})") from error


def _parse(data: bytes, source: str) -> Spectrum | LineList:
    data = _prepare(data, source)
    notes: list[str] = []
    records = _split_records(data, source, notes)
    blocks = _blocks(records, source, notes, data)
    block = _choose_block(blocks, source, notes)
    record = block.data_record()
    if record is None:  # _choose_block only returns blocks with data
        raise SpectrumFileError(source, "no data record")
    if record.label == "XYDATA":
        return _read_xydata(block, record, source, notes)
    return _read_table(block, record, source, notes)


# ----------------------------------------------------------------------------- completeness
_TITLE_LABEL = re.compile(rb"^[ \t]*##[ \t]*TITLE[ \t]*=", re.IGNORECASE | re.MULTILINE)
_END_LABEL = re.compile(rb"^[ \t]*##[ \t]*END[ \t]*=", re.IGNORECASE | re.MULTILINE)
# A JCAMP-DX file still incomplete after the station's longest wait is unreadable (its data may
# stop anywhere); it is never analysed as it stands.
TAKE_WHEN_WAITED_OUT = False


def starts_like(head: bytes) -> bool:
    """True when the bytes begin as a JCAMP-DX file does (a labelled record, `##`), even one
    cut off before its first full label."""
    return head.lstrip(b"\xef\xbb\xbf \t\r\n")[:2] == b"##"


def incomplete_reason(data: bytes) -> str | None:
    """Why JCAMP-DX bytes are not yet a whole file (one ##END= per ##TITLE=), or None."""
    titles = len(_TITLE_LABEL.findall(data))
    ends = len(_END_LABEL.findall(data))
    if ends == 0:
        return "JCAMP-DX file has no ##END= (still being written?)"
    if ends < titles:
        return f"JCAMP-DX file has {titles} ##TITLE= blocks but only {ends} ##END= (still being written?)"
    return None
