"""JCAMP-DX 5.01 writers: the exact inverse of `jcamp.parse` for spectra and peak tables.

Round-trip guarantees (tested in tests/test_jcamp_write.py):
- form="affn": y (and line-start x) written with `digits` significant digits, 13 by default
  (`repr` when that is as short and exact), so every value comes back within 5e-13 relative
  (half a unit in the 13th digit); with
  digits=None they are written with `repr` and come back bit for bit. x itself is rebuilt
  from repr-exact FIRSTX/LASTX, within a few ulp (1e-12 relative) of the input grid.
- form="dif": y quantised to integers with YFACTOR = (largest |y|) / 1e7, so every value comes
  back within YFACTOR / 2 = 5e-8 of full scale (plus float rounding of one product); when all
  y are already integers below 2**31, YFACTOR = 1 and the round trip is exact.
A spectrum whose x is not evenly spaced (beyond 1e-9 of a spacing) is written as
`##XYPOINTS=(XY..XY)` in AFFN, whatever the form asked for.
"""
from __future__ import annotations

import io
from pathlib import Path
from typing import IO, Callable, Literal

import numpy as np

from processing.spectrum import LineList, Spectrum

DIF_FULL_SCALE = 10_000_000  # integer full scale of DIF data: y quantised to 1e-7 of max |y|
LINE_LIMIT = 80  # the standard's maximum line length
AFFN_DIGITS = 13  # significant digits of AFFN values: <= 5e-13 relative, inside the 1e-12 target

_SQZ_POSITIVE = "@ABCDEFGHI"
_SQZ_NEGATIVE = "@abcdefghi"
_DIF_POSITIVE = "%JKLMNOPQR"
_DIF_NEGATIVE = "%jklmnopqr"
_DUP = "?STUVWXYZs"  # index = first digit of the count (0 never leads)

YWrite = Literal["absorbance", "transmittance", "percent_transmittance", "original"]


def _sqz(value: int) -> str:
    digits = str(abs(value))
    table = _SQZ_NEGATIVE if value < 0 else _SQZ_POSITIVE
    return table[int(digits[0])] + digits[1:]


def _dif(value: int) -> str:
    digits = str(abs(value))
    table = _DIF_NEGATIVE if value < 0 else _DIF_POSITIVE
    return table[int(digits[0])] + digits[1:]


def _dup(count: int) -> str:
    digits = str(count)
    return _DUP[int(digits[0])] + digits[1:]


def _y_values(spectrum: Spectrum, y_kind: YWrite) -> tuple[np.ndarray, str]:
    """The values to write and their YUNITS; "original" means the kind the file had."""
    if y_kind == "original":
        y_kind = spectrum.original_y_kind  # type: ignore[assignment]
    if y_kind == "absorbance":
        return np.asarray(spectrum.absorbance, dtype=np.float64), "ABSORBANCE"
    transmitted = np.power(10.0, -spectrum.absorbance)
    transmitted[spectrum.saturated] = 0.0
    if y_kind == "transmittance":
        return transmitted, "TRANSMITTANCE"
    if y_kind == "percent_transmittance":
        return 100.0 * transmitted, "%T"
    raise ValueError(f"unknown y kind {y_kind!r}")


def _is_even(x: np.ndarray) -> bool:
    steps = np.diff(x)
    spacing = (x[-1] - x[0]) / (x.size - 1)
    return bool(np.all(np.abs(steps - spacing) <= 1e-9 * abs(spacing) + 4 * np.spacing(np.max(np.abs(x)))))


def _header(title: str, data_type: str, y_units: str, extra: list[tuple[str, str]]) -> list[str]:
    lines = [
        f"##TITLE={title}",
        "##JCAMP-DX=5.01",
        f"##DATA TYPE={data_type}",
        "##ORIGIN=bandwatch",
        "##OWNER=public domain",
        "##XUNITS=1/CM",
        f"##YUNITS={y_units}",
    ]
    lines += [f"##{label}={value}" for label, value in extra]
    return lines


def _affn_text(digits: int | None) -> Callable[[float], str]:
    """Number formatter: `repr` when it is exact within `digits`, else `digits` significant."""
    if digits is None:
        return repr
    pattern = f"%.{digits}g"

    def text(value: float) -> str:
        short = pattern % value
        return repr(value) if float(short) == value else short

    return text


def _affn_lines(x: np.ndarray, y: np.ndarray, digits: int | None, decimals: int | None = None) -> list[str]:
    form = _affn_text(digits)
    y_form = form if decimals is None else f"{{:.{decimals}f}}".format
    texts = [y_form(value) for value in y.tolist()]
    lines: list[str] = []
    index = 0
    while index < y.size:
        parts = [form(float(x[index]))]
        length = len(parts[0])
        start = index
        while index < y.size:
            text = texts[index]
            if index > start and length + 1 + len(text) > LINE_LIMIT:
                break
            parts.append(text)
            length += 1 + len(text)
            index += 1
        lines.append(" ".join(parts))
    return lines


def _dif_lines(x: np.ndarray, ints: np.ndarray) -> list[str]:
    """DIF/DUP lines: each starts with X and a SQZ value; the last line repeats the final Y."""
    values = ints.tolist()
    steps = np.diff(ints).tolist()
    lines: list[str] = []
    index = 0  # point whose SQZ value starts the line
    n = len(values)
    while True:
        head = f"{float(x[index])!r}{_sqz(values[index])}"
        parts = [head]
        length = len(head)
        point = index
        while point + 1 < n:
            step = steps[point]
            run = 1
            while point + run + 1 < n and steps[point + run] == step:
                run += 1
            token = _dif(step) + (_dup(run) if run > 1 else "")
            if length + len(token) > LINE_LIMIT and point > index:
                break
            if length + len(token) > LINE_LIMIT:  # one run longer than a line: split it
                run = 1
                token = _dif(step)
            parts.append(token)
            length += len(token)
            point += run
        lines.append("".join(parts))
        if point == index:  # only the Y-check left on this line: it was the last point
            break
        index = point
    return lines


def write_jcamp(
    target: str | Path | IO[str] | IO[bytes],
    spectrum: Spectrum,
    form: Literal["affn", "dif"] = "dif",
    title: str | None = None,
    y_kind: YWrite = "absorbance",
    descending: bool = False,
    digits: int | None = AFFN_DIGITS,
    decimals: int | None = None,
) -> None:
    """Write `spectrum` as JCAMP-DX 5.01 `(X++(Y..Y))` in cm-1 (or XYPOINTS if x is uneven).

    `descending` writes from high to low wavenumber, as many instruments do. `digits` is the
    number of significant digits of AFFN values (None: `repr`, exact). `decimals` writes y
    rounded to that many decimal places instead (AFFN: fixed-point text; DIF: YFACTOR
    10^-decimals), as instrument software exports rounded values.
    """
    if digits is not None and not 13 <= digits <= 17:
        raise ValueError("digits must be 13 to 17 (1e-12 relative or better) or None")
    if form not in ("affn", "dif"):
        raise ValueError(f"form must be 'affn' or 'dif', not {form!r}")
    x = np.asarray(spectrum.wavenumber_cm1, dtype=np.float64)
    y, y_units = _y_values(spectrum, y_kind)
    if descending:
        x, y = x[::-1], y[::-1]
    meta = spectrum.meta
    name = title if title is not None else (meta.title or "spectrum")
    extra: list[tuple[str, str]] = []
    if meta.resolution_cm1 is not None:
        extra.append(("RESOLUTION", repr(float(meta.resolution_cm1))))
    if meta.apodization:
        extra.append(("$APODIZATION", meta.apodization))
    if meta.acquired:
        extra.append(("LONGDATE", meta.acquired.replace("-", "/").replace("T", " ")))
    if not _is_even(x):
        extra += [("NPOINTS", str(x.size)), ("FIRSTX", repr(float(x[0]))), ("LASTX", repr(float(x[-1])))]
        body = ["##XYPOINTS=(XY..XY)"] + [f"{float(a)!r}, {float(b)!r}" for a, b in zip(x, y)]
        _emit(target, _header(name, "INFRARED SPECTRUM", y_units, extra) + body + ["##END="])
        return
    spacing = (x[-1] - x[0]) / (x.size - 1)
    if decimals is not None:
        y = np.round(y, decimals)
    if form == "affn":
        y_factor = 1.0
        data_lines = _affn_lines(x, y, digits, decimals)
    elif decimals is not None:
        y_factor = 10.0**-decimals
        data_lines = _dif_lines(x, np.rint(y / y_factor).astype(np.int64))
    else:
        largest = float(np.max(np.abs(y)))
        integral = bool(np.all(y == np.rint(y))) and largest < 2**31
        y_factor = 1.0 if integral or largest == 0.0 else largest / DIF_FULL_SCALE
        ints = np.rint(y / y_factor).astype(np.int64)
        data_lines = _dif_lines(x, ints)
    extra += [
        ("XFACTOR", "1"),
        ("YFACTOR", repr(y_factor)),
        ("FIRSTX", repr(float(x[0]))),
        ("LASTX", repr(float(x[-1]))),
        ("DELTAX", repr(float(spacing))),
        ("FIRSTY", repr(float(y[0]))),
        ("NPOINTS", str(x.size)),
    ]
    lines = _header(name, "INFRARED SPECTRUM", y_units, extra)
    lines += ["##XYDATA=(X++(Y..Y))"] + data_lines + ["##END="]
    _emit(target, lines)


def write_peak_table(
    target: str | Path | IO[str] | IO[bytes], lines: LineList, title: str | None = None
) -> None:
    """Write a `LineList` as `##PEAK TABLE=(XY..XY)`, one `x, y` pair per line, repr-exact."""
    units = {"absorbance": "ABSORBANCE", "transmittance": "TRANSMITTANCE", "percent_transmittance": "%T"}
    name = title if title is not None else (lines.meta.title or "peak table")
    header = _header(name, "INFRARED PEAK TABLE", units.get(lines.y_kind, "ARBITRARY UNITS"), [])
    body = ["##NPOINTS=" + str(lines.points), "##PEAK TABLE=(XY..XY)"]
    body += [f"{float(a)!r}, {float(b)!r}" for a, b in zip(lines.position_cm1, lines.intensity)]
    _emit(target, header + body + ["##END="])


def _emit(target: str | Path | IO[str] | IO[bytes], lines: list[str]) -> None:
    text = "\n".join(lines) + "\n"
    if isinstance(target, (str, Path)):
        with open(target, "w", encoding="ascii", errors="replace", newline="\n") as handle:
            handle.write(text)
    elif isinstance(target, io.TextIOBase):
        target.write(text)
    else:
        target.write(text.encode("ascii", errors="replace"))  # type: ignore[arg-type]
