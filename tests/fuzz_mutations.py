"""Seeded mutations of real and demo spectrum files, and how one file's processing went.

Shared by the fuzz test in CI (`tests/test_fuzz_files.py`, a few hundred mutations) and the
long run (`tests/benchmarks/fuzz_files.py`, 10,000). Each mutation is what a bad day or an
adversary on the export share produces: flipped, inserted, deleted, repeated or cut bytes;
numbers replaced by NaN, infinities, huge or negative values; header values pushed to absurd
ones (NPOINTS, FIRSTX/LASTX, factors, units); DUP counts that expand to millions of points;
x axes shifted below zero, scaled, reversed or duplicated; files spliced; line ends and
encodings changed; escape sequences in headers.
"""
from __future__ import annotations

import json
import random
import re
import resource
import time
import warnings
from collections.abc import Iterator
from dataclasses import replace
from pathlib import Path
from typing import Any

from processing.results import RunResult

ROOT = Path(__file__).resolve().parents[1]
SEED_FILES = tuple(
    sorted(p for p in (ROOT / "sample_runs").iterdir() if p.suffix in (".jdx", ".csv"))
) + tuple(sorted((ROOT / "tests" / "data" / "realdata").glob("*.csv")))

_NUMBER = re.compile(rb"[-+]?\d+(?:\.\d*)?(?:[eE][-+]?\d+)?")
_HEADER = re.compile(rb"(?m)^##([A-Z .]+)=(.*)$")
ODD_NUMBERS = (b"nan", b"NaN", b"inf", b"-inf", b"1e999", b"-1e308", b"1e-320", b"0", b"-0", b"99999999",
               b"-5000", b"4.2e12", b"", b"1,5", b"0x1F", b"--3")
ODD_HEADERS = {
    b"NPOINTS": (b"99999999", b"0", b"-3", b"1e300", b"nan", b"2"),
    b"FIRSTX": (b"-100", b"0", b"1e300", b"nan"),
    b"LASTX": (b"-4000", b"0", b"inf"),
    b"DELTAX": (b"0", b"-1e-300", b"1e300"),
    b"XFACTOR": (b"0", b"1e300", b"-1", b"1e-300"),
    b"YFACTOR": (b"0", b"1e300", b"-1", b"nan"),
    b"XUNITS": (b"HZ", b"\x1b[2J", b"NANOMETERS", b""),
    b"YUNITS": (b"COUNTS", b"%T\x1b]0;x\x07", b"TRANSMITTANCE"),
    b"XYDATA": (b"(X++(R..R))", b"(XY..XY)", b"garbage"),
    b"PEAK TABLE": (b"(XYZ)", b"(XY..XY)", b"(XYW..XYW)"),
}


def _flip(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    buffer = bytearray(data)
    for _ in range(rng.randint(1, 8)):
        if buffer:
            buffer[rng.randrange(len(buffer))] = rng.randrange(256)
    return bytes(buffer)


def _insert(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    at = rng.randint(0, len(data))
    junk = bytes(rng.choice((0, 7, 8, 13, 27, 127, 155, 255, rng.randrange(256))) for _ in range(rng.randint(1, 16)))
    return data[:at] + junk + data[at:]


def _delete(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    if not data:
        return data
    start = rng.randrange(len(data))
    return data[:start] + data[start + rng.randint(1, max(1, len(data) // 4)):]


def _duplicate(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    if not data:
        return data
    start = rng.randrange(len(data))
    piece = data[start:start + rng.randint(1, 4096)]
    return data[:start] + piece * rng.randint(2, 20) + data[start:]


def _truncate(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    return data[: rng.randint(0, len(data))]


def _odd_number(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    matches = list(_NUMBER.finditer(data[:200_000]))
    if not matches:
        return data
    for match in rng.sample(matches, min(len(matches), rng.randint(1, 5))):
        data = data[: match.start()] + rng.choice(ODD_NUMBERS) + data[match.end():]
        break  # offsets move after one replacement; one per pass
    return data


def _odd_header(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    headers = [m for m in _HEADER.finditer(data[:20_000]) if m.group(1).strip() in ODD_HEADERS]
    if not headers:
        return _odd_number(rng, data, seeds)
    match = rng.choice(headers)
    value = rng.choice(ODD_HEADERS[match.group(1).strip()])
    return data[: match.start(2)] + value + data[match.end(2):]


def _dup_bomb(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    lines = data.split(b"\n")
    candidates = [i for i, line in enumerate(lines) if line[:1].isdigit()]
    if not candidates:
        return data
    index = rng.choice(candidates)
    lines[index] = lines[index] + rng.choice((b"@s9999999", b"%S048576", b"JS99999", b"@Z99999999"))
    return b"\n".join(lines)


def _transform_axis(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    """Delimited rows x,y with x shifted (also below zero), scaled, reversed or repeated."""
    rows = []
    for line in data.splitlines():
        parts = re.split(rb"[,;\t ]+", line.strip())
        try:
            rows.append((float(parts[0]), parts[1] if len(parts) > 1 else b"0"))
        except (ValueError, IndexError):
            continue
    if len(rows) < 2:
        return _odd_number(rng, data, seeds)
    choice = rng.randrange(4)
    if choice == 0:
        shift = rng.uniform(-5000.0, 5000.0)
        rows = [(x + shift, y) for x, y in rows]
    elif choice == 1:
        scale = rng.choice((-1.0, 1e-6, 1e6, rng.uniform(-3.0, 3.0)))
        rows = [(x * scale, y) for x, y in rows]
    elif choice == 2:
        rows = rows[::-1]
    else:
        rows = rows + rows[: rng.randint(1, len(rows))]
    return b"x,y\n" + b"".join(b"%.6g,%s\n" % (x, y) for x, y in rows)


def _splice(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    other = rng.choice(seeds)
    return data[: rng.randint(0, len(data))] + other[rng.randint(0, len(other)):]


def _repeat_line(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    lines = data.split(b"\n")
    index = rng.randrange(len(lines))
    lines[index:index + 1] = [lines[index]] * rng.choice((100, 1000, 10_000))
    return b"\n".join(lines)


def _line_ends_and_encoding(rng: random.Random, data: bytes, seeds: list[bytes]) -> bytes:
    choice = rng.randrange(4)
    if choice == 0:
        return data.replace(b"\n", b"\r\n")
    if choice == 1:
        return data.replace(b"\n", b"\r")
    if choice == 2:
        return b"\xff\xfe" + data.decode("latin-1").encode("utf-16-le")
    return b"\xef\xbb\xbf" + data


MUTATIONS = (_flip, _insert, _delete, _duplicate, _truncate, _odd_number, _odd_header, _dup_bomb,
             _transform_axis, _splice, _repeat_line, _line_ends_and_encoding)


def mutated_files(count: int, seed: int) -> Iterator[tuple[str, bytes]]:
    """`count` (name, content) pairs: each a seed file with 1-3 mutations, reproducible."""
    rng = random.Random(seed)
    seeds = [path.read_bytes() for path in SEED_FILES]
    for index in range(count):
        which = rng.randrange(len(SEED_FILES))
        data = seeds[which]
        applied = []
        for _ in range(rng.choice((1, 1, 2, 3))):
            mutation = rng.choice(MUTATIONS)
            data = mutation(rng, data, seeds)
            applied.append(mutation.__name__.strip("_"))
        name = f"{index:05d}-{'+'.join(applied)}{SEED_FILES[which].suffix}"
        yield name, data


FUZZ_NOTE = "fuzz measurement "


def process_and_measure(path: str, settings: Any = None) -> RunResult:
    """Process one file; its result with one more note, FUZZ_NOTE + JSON of the warnings
    raised, seconds and this process's peak resident memory (KB) so far (`measurement` reads
    it back). Used in the station's worker processes too."""
    from processing.pipeline import process_file

    started = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = process_file(path, settings)
    measured = {
        "warnings": [f"{w.category.__name__}: {w.message} ({Path(w.filename).name}:{w.lineno})" for w in caught],
        "seconds": time.perf_counter() - started,
        "peak_kb": int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss),
    }
    return replace(result, notes=(result.notes or ()) + (FUZZ_NOTE + json.dumps(measured),))


def measurement(result: RunResult) -> dict[str, Any]:
    """The measurement `process_and_measure` noted ({} when none)."""
    for note in result.notes or ():
        if note.startswith(FUZZ_NOTE):
            return dict(json.loads(note[len(FUZZ_NOTE):]))
    return {}


def verdict_of(path: str, result: RunResult) -> str:
    """'processed', 'refused' (one clean line naming the file), or what went wrong:
    'unclean refusal', 'warning'."""
    if measurement(result).get("warnings"):
        return "warning"
    if result.status == "processed":
        return "processed"
    error = str(result.error or "")
    clean = error.startswith(path) and "\n" not in error and "\x1b" not in error and "reader fault" not in error
    return "refused" if clean else "unclean refusal"
