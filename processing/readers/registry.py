"""Choose a reader by a file's content (then its extension) and read it, read-only.

Each reader module offers:
    FORMAT_NAME: str
    EXTENSIONS: tuple[str, ...]           lower-case, with the dot
    identify(head: bytes) -> bool         True when the first bytes look like this format
    parse(data: bytes, source: str) -> Spectrum | LineList
                                          raises SpectrumFileError naming `source`
    starts_like(head: bytes) -> bool      the bytes begin as this format does (even cut short)
    incomplete_reason(data: bytes) -> str | None
                                          why the bytes are not yet a whole file, or None
    incomplete_reason_of_ends(head, tail, size) -> str | None   (optional)
                                          the same, told by the first and last ENDS_BYTES and
                                          the size (a format that need not count its blocks)
    TAKE_WHEN_WAITED_OUT: bool            still incomplete after the longest wait: analyse
                                          as it stands (True) or record as unreadable
Adding a format = one module with those names, listed in `reader_modules` below; what the formats
are called in messages comes from their FORMAT_NAMEs.
"""
from __future__ import annotations

import hashlib
import importlib
import threading
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
from pathlib import Path
from types import ModuleType

from processing.errors import SpectrumFileError
from processing.readers.text_engine import polars_in_use
from processing.regular_files import ReadPolicy, read_regular
from processing.spectrum import LineList, Spectrum

DEFAULT_MAX_BYTES = 256 * 1024 * 1024
HEAD_BYTES = 4096


# Order matters: the most specific identifier first; delimited text is the catch-all.
READER_MODULES = ("processing.readers.jcamp", "processing.readers.delimited")


def reader_modules() -> tuple[ModuleType, ...]:
    """Every reader, most specific identifier first (importing them)."""
    return tuple(importlib.import_module(name) for name in READER_MODULES)


def load_bytes(path: str | Path, max_bytes: int = DEFAULT_MAX_BYTES, policy: ReadPolicy | None = None) -> bytes:
    """The bytes of a regular file (never a FIFO, device or socket; only where `policy`
    allows), opened read-only; refuses empty and over-size files."""
    data = read_regular(path, max_bytes, policy)
    if not data or data.isspace():
        raise SpectrumFileError(str(path), "file is empty")
    return data


_CONTROL_BYTES = bytes(byte for byte in range(32) if byte < 9 or 13 < byte)  # not tab, LF, VT, FF, CR


def looks_binary(head: bytes) -> bool:
    """True for data that is not text: NUL bytes or many control characters."""
    if b"\x00" in head:
        return True
    sample = head[:HEAD_BYTES]
    control = len(sample) - len(sample.translate(None, _CONTROL_BYTES))  # counted in C
    return control > max(2, len(sample) // 100)


def choose_reader(data: bytes, source: str) -> ModuleType:
    """The reader for these bytes: by content first, then by the file's extension."""
    head = data[:HEAD_BYTES]
    if looks_binary(head):
        raise SpectrumFileError(source, "binary data, not a text spectrum format bandwatch reads")
    for name in READER_MODULES:  # imported one by one: a reader found first spares the others' import
        reader = importlib.import_module(name)
        if reader.identify(head):
            return reader
    readers = reader_modules()
    suffix = Path(source).suffix.lower()
    for reader in readers:
        if suffix in reader.EXTENSIONS:
            return reader
    raise SpectrumFileError(source, f"not a recognised spectrum format ({' or '.join(r.FORMAT_NAME for r in readers)})")


@dataclass(frozen=True)
class Incomplete:
    """Bytes that are not yet a whole file: why, and what to do when they stay so past the
    longest wait (analyse them as they stand, or record the file as unreadable)."""

    reason: str
    take_when_waited_out: bool


def incomplete(data: bytes) -> Incomplete | None:
    """Whether `data` is a whole file, by the rules of the format it starts like (the station
    waits for more while it is not); None when it looks complete."""
    reader = _started_like(data[:HEAD_BYTES])
    why = reader.incomplete_reason(data) if reader is not None else None
    return Incomplete(why, reader.TAKE_WHEN_WAITED_OUT) if reader is not None and why else None


ENDS_BYTES = HEAD_BYTES  # of each end of a file, for `looks_whole_by_ends`


def looks_whole_by_ends(head: bytes, tail: bytes, size: int) -> bool:
    """True when a file of `size` bytes is whole by the rules of its format told by its first
    and last ENDS_BYTES alone (delimited text); False when it looks cut off, or its format
    needs all of it to say (JCAMP-DX counts its blocks): then `incomplete` of the whole says."""
    reader = _started_like(head[:HEAD_BYTES])
    of_ends = getattr(reader, "incomplete_reason_of_ends", None)
    return reader is None or (of_ends is not None and of_ends(head, tail, size) is None)


def _started_like(head: bytes) -> ModuleType | None:
    """The reader whose format the bytes begin as (the most specific first)."""
    for reader in reader_modules():
        if reader.starts_like(head):
            return reader
    return None


def incomplete_reason(data: bytes) -> str | None:
    """Why `data` looks still being written, or None when it looks complete."""
    found = incomplete(data)
    return found.reason if found is not None else None


def as_utf8(data: bytes, source: str) -> bytes:
    """UTF-16 text (with its byte-order mark, as some Windows exports write it) as UTF-8;
    anything else unchanged. Without this its NUL bytes would make it look binary."""
    if not data.startswith((b"\xff\xfe", b"\xfe\xff")):
        return data
    try:
        return data.decode("utf-16").encode("utf-8")
    except UnicodeDecodeError:
        raise SpectrumFileError(source, "starts like UTF-16 text but does not decode") from None


def parse_bytes(data: bytes, source: str = "<data>") -> Spectrum | LineList:
    """Parse bytes already in memory; stamps the sha256 (of the bytes as given) and source
    path into the metadata."""
    sha256 = _sha256_alongside(data)
    result = _parse_unstamped(data, source)
    return result.with_meta(replace(result.meta, source_path=source, sha256=sha256()))


def parse_bytes_digest_later(data: bytes, source: str = "<data>") -> tuple[Spectrum | LineList, Callable[[], str]]:
    """Parse bytes already in memory, for a caller with more work before it needs their sha256
    (a whole analysis): the source path is stamped, the sha256 is left out (None) and comes
    as a function to call later. With polars' reader in this process (the fast-text extra,
    which keeps both cores busy while it parses) a large body is hashed after the parse,
    alongside the caller's work; with numpy's readers (one core) alongside the parse, so that
    the bytes are not held into the analysis (a 1M-point one-shot run's memory). On a
    problem the bytes cannot be read, SpectrumFileError is raised as by parse_bytes."""
    if len(data) >= HASH_LATER_BYTES and delimited_parser_uses_all_cores():
        result = parse_bytes_unhashed(data, source)
        return result, _sha256_alongside(data, HASH_LATER_BYTES)
    sha256 = _sha256_alongside(data)
    return parse_bytes_unhashed(data, source), sha256


def parse_bytes_unhashed(data: bytes, source: str = "<data>") -> Spectrum | LineList:
    """Parse bytes already in memory: the source path stamped, no sha256 (None)."""
    result = _parse_unstamped(data, source)
    return result.with_meta(replace(result.meta, source_path=source))


def delimited_parser_uses_all_cores() -> bool:
    """True when delimited bodies in this process go to polars' threaded reader."""
    return polars_in_use() is not None


def _parse_unstamped(data: bytes, source: str) -> Spectrum | LineList:
    text = as_utf8(data, source)
    reader = choose_reader(text, source)
    return _physical_values(_positive_wavenumbers(reader.parse(text, source), source), source)


# A file this large is hashed on a second thread while it is parsed (hashlib lets go of the
# interpreter lock while it hashes): 15 ms of a 1M-point CSV's read on a second core. Hashed
# alongside an analysis (~30 ms for 64k points), from HASH_LATER_BYTES: 0.8 ms of a 64k CSV.
HASH_ALONGSIDE_BYTES = 4_000_000
HASH_LATER_BYTES = 256_000


def _sha256_alongside(data: bytes, threshold: int = HASH_ALONGSIDE_BYTES) -> Callable[[], str]:
    """The sha256 hex digest of `data`, as a function to call when it is needed; `data` of
    `threshold` bytes or more is hashed meanwhile on a second thread."""
    if len(data) < threshold:
        digest = hashlib.sha256(data).hexdigest()
        return lambda: digest
    found: list[str] = []
    thread = threading.Thread(target=lambda: found.append(hashlib.sha256(data).hexdigest()), name="sha256", daemon=True)
    thread.start()

    def digest() -> str:
        thread.join()
        return found[0]

    return digest


# Beyond these the numbers are not an infrared absorbance spectrum (a wrong YFACTOR, counts
# labelled as absorbance, an axis in the wrong unit): decadic absorbance 1e6 is a transmittance
# of 10**-1000000, and 1e5 cm-1 is a wavelength of 100 nm (common practice).
MAX_ABSORBANCE = 1e6
MAX_WAVENUMBER_CM1 = 1e5


def _physical_values(data: Spectrum | LineList, source: str) -> Spectrum | LineList:
    """Refuse numbers no infrared spectrum holds (they also overflow the analysis)."""
    x = data.wavenumber_cm1 if isinstance(data, Spectrum) else data.position_cm1
    if x[-1] > MAX_WAVENUMBER_CM1:
        raise SpectrumFileError(
            source, f"x axis reaches {x[-1]:.6g} cm-1: not an infrared spectrum (above {MAX_WAVENUMBER_CM1:g} cm-1)"
        )
    if isinstance(data, Spectrum):
        largest = max(float(np.max(data.absorbance)), -float(np.min(data.absorbance)))  # no |A| array
        if largest > MAX_ABSORBANCE:
            raise SpectrumFileError(
                source, f"absorbance values up to {largest:.3g}: not a physical absorbance (a wrong YFACTOR or YUNITS?)"
            )
    return data


def _positive_wavenumbers(data: Spectrum | LineList, source: str) -> Spectrum | LineList:
    """Only the part at positive wavenumbers: zero and below are not infrared light (and the
    analysis takes logarithms of positions). Dropped points are noted; nothing left is an error."""
    x = data.wavenumber_cm1 if isinstance(data, Spectrum) else data.position_cm1
    if x[0] > 0:
        return data
    keep = x > 0
    kept = int(np.count_nonzero(keep))
    needed = 2 if isinstance(data, Spectrum) else 1
    if kept < needed:
        raise SpectrumFileError(
            source, f"no usable wavenumbers: the x axis runs from {x[0]:.6g} to {x[-1]:.6g} cm-1 (must be above 0)"
        )
    note = f"{x.size - kept} points at or below 0 cm-1 left out (not a physical wavenumber)"
    if isinstance(data, Spectrum):
        return replace(
            data,
            wavenumber_cm1=data.wavenumber_cm1[keep],
            absorbance=data.absorbance[keep],
            saturated=data.saturated[keep],
            meta=data.meta.with_notes(note),
        )
    return replace(
        data, position_cm1=data.position_cm1[keep], intensity=data.intensity[keep], meta=data.meta.with_notes(note)
    )


def read_any(
    path: str | Path, max_bytes: int = DEFAULT_MAX_BYTES, policy: ReadPolicy | None = None
) -> Spectrum | LineList:
    """Read a spectrum or line-list file of any supported format (read-only)."""
    return parse_bytes(load_bytes(path, max_bytes, policy), str(path))
