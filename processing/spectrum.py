"""The values every reader returns: a `Spectrum` (y as decadic absorbance) or a `LineList`.

Inside bandwatch the x axis is always wavenumber in cm-1, ascending, float64, and y is
decadic absorbance A = -log10(T). Readers convert at the edge and note what they did.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from processing.order_stats import median_of_sorted

YKind = Literal["absorbance", "transmittance", "percent_transmittance"]
Y_KINDS: tuple[str, ...] = ("absorbance", "transmittance", "percent_transmittance")

# Where transmittance is zero or negative the absorbance is not measurable. Those points are
# flagged in `saturated` and hold this value (or the largest measured absorbance if larger), so
# arrays stay finite. A ~ 6 means T ~ 1e-6: beyond any FTIR's photometric range (common practice).
UNMEASURABLE_ABSORBANCE = 6.0


@dataclass(frozen=True)
class FileMetadata:
    """What the file said about itself, and what the reader did to it."""

    title: str = ""
    acquired: str | None = None  # date/time as the file gives it (ISO when it could be parsed)
    resolution_cm1: float | None = None  # stated resolution; convention varies, never assume FWHM
    apodization: str | None = None
    source_path: str | None = None
    sha256: str | None = None
    format: str = ""  # e.g. "JCAMP-DX 5.01 XYDATA DIF", "delimited text (comma)"
    header: tuple[tuple[str, str], ...] = ()  # raw header label/value pairs, in file order
    notes: tuple[str, ...] = ()  # reader remarks: inferences, conversions, chosen block

    def with_notes(self, *more: str) -> FileMetadata:
        from dataclasses import replace

        return replace(self, notes=self.notes + tuple(more))


def _frozen_float_array(values: np.ndarray | list[float], name: str) -> np.ndarray:
    """A read-only float64 copy; an array that is already read-only float64 is taken as it is
    (handed over by a reader that owns it: no copy of a million points)."""
    if isinstance(values, np.ndarray) and values.dtype == np.float64 and not values.flags.writeable:
        if values.ndim != 1:
            raise ValueError(f"{name} must be one-dimensional, got shape {values.shape}")
        return values
    array = np.array(values, dtype=np.float64, copy=True)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {array.shape}")
    array.setflags(write=False)
    return array


@dataclass(frozen=True)
class Spectrum:
    """An infrared absorption spectrum on an ascending wavenumber axis.

    `absorbance` is decadic. `saturated` marks points whose transmittance was zero or negative
    in the file (not measurable); they hold a finite stand-in value, never inf or NaN.
    """

    wavenumber_cm1: np.ndarray
    absorbance: np.ndarray
    saturated: np.ndarray
    original_y_kind: str = "absorbance"
    conversion: str = "none (file holds decadic absorbance)"
    meta: FileMetadata = field(default_factory=FileMetadata)

    def __post_init__(self) -> None:
        x = _frozen_float_array(self.wavenumber_cm1, "wavenumber_cm1")
        y = _frozen_float_array(self.absorbance, "absorbance")
        if isinstance(self.saturated, np.ndarray) and self.saturated.dtype == bool and not self.saturated.flags.writeable:
            mask = self.saturated
        else:
            mask = np.array(self.saturated, dtype=bool, copy=True)
            mask.setflags(write=False)
        object.__setattr__(self, "wavenumber_cm1", x)
        object.__setattr__(self, "absorbance", y)
        object.__setattr__(self, "saturated", mask)
        if not (x.shape == y.shape == mask.shape):
            raise ValueError(f"x, y and mask lengths differ: {x.size}, {y.size}, {mask.size}")
        if x.size < 2:
            raise ValueError(f"a spectrum needs at least 2 points, got {x.size}")
        # a sum is finite when every value is (one pass, no array of flags); an overflowing
        # sum of finite values only sends us to the full check
        if not (np.isfinite(np.sum(x)) and np.isfinite(np.sum(y))) and not (
            np.all(np.isfinite(x)) and np.all(np.isfinite(y))
        ):
            raise ValueError("wavenumber and absorbance must be finite")
        if not np.all(x[1:] > x[:-1]):  # (no array of steps: a million points are 8 MB)
            raise ValueError("wavenumber axis must be strictly ascending")
        if self.original_y_kind not in Y_KINDS:
            raise ValueError(f"unknown y kind {self.original_y_kind!r}")

    @property
    def points(self) -> int:
        return int(self.wavenumber_cm1.size)

    def with_meta(self, meta: FileMetadata) -> Spectrum:
        """The same spectrum with other metadata (arrays shared: they are read-only and were
        validated when this spectrum was made)."""
        return _copy_with_meta(self, meta)

    @functools.cached_property
    def spacing_cm1(self) -> float:
        """Median point spacing in cm-1 (computed once: the axis is read-only).

        The steps are sorted, not partitioned: an axis's steps take a few distinct values (a
        rounded or computed axis), on which numpy's partition is slow (1M steps: 7.5 ms
        against 1.8 ms for the sort). The same number as `median`."""
        steps = np.sort(np.diff(self.wavenumber_cm1))
        if steps.size == 0 or np.isnan(steps[-1]):  # (NaN sorts last)
            return math.nan
        return median_of_sorted(steps)

    @property
    def first_cm1(self) -> float:
        return float(self.wavenumber_cm1[0])

    @property
    def last_cm1(self) -> float:
        return float(self.wavenumber_cm1[-1])

    def transmittance(self) -> np.ndarray:
        """Fraction transmitted, 10**-A (saturated points give their stand-in's value)."""
        return np.power(10.0, -self.absorbance)

    @classmethod
    def from_y(
        cls,
        wavenumber_cm1: np.ndarray,
        y: np.ndarray,
        y_kind: str,
        meta: FileMetadata | None = None,
    ) -> Spectrum:
        """Build from file values: sorts a descending axis, converts y to decadic absorbance.

        Raises ValueError (readers turn it into `SpectrumFileError`) on non-finite values,
        non-monotonic or duplicated x, or fewer than 2 points.
        """
        x = np.asarray(wavenumber_cm1, dtype=np.float64)
        values = np.asarray(y, dtype=np.float64)
        meta = meta or FileMetadata()
        if x.ndim != 1 or values.ndim != 1 or x.size != values.size:
            raise ValueError(f"x and y lengths differ: {x.size} and {values.size}")
        if x.size < 2:
            raise ValueError(f"a spectrum needs at least 2 points, got {x.size}")
        if not np.all(np.isfinite(x)):
            bad = int(np.flatnonzero(~np.isfinite(x))[0])
            raise ValueError(f"x value at point {bad + 1} is not finite")
        if not np.all(np.isfinite(values)):
            bad = int(np.flatnonzero(~np.isfinite(values))[0])
            raise ValueError(f"y value at point {bad + 1} is not finite")
        steps = np.diff(x)
        if np.all(steps < 0):
            x = x[::-1]
            values = values[::-1]
            meta = meta.with_notes("x axis was descending; reversed to ascending")
        elif not np.all(steps > 0):
            zero = np.flatnonzero(steps == 0)
            if zero.size:
                raise ValueError(f"x value repeats at points {zero[0] + 1} and {zero[0] + 2}")
            turn = int(np.flatnonzero(np.sign(steps) != np.sign(steps[0]))[0])
            raise ValueError(f"x is not monotonic: direction changes at point {turn + 2}")
        absorbance, saturated, conversion = to_absorbance(values, y_kind)
        return cls(x, absorbance, saturated, y_kind, conversion, meta)


def checked_spectrum(
    x: np.ndarray, absorbance: np.ndarray, saturated: np.ndarray, kind: str, conversion: str, meta: FileMetadata
) -> Spectrum:
    """A Spectrum from arrays its reader has checked point by point already (finite x and
    absorbance, x strictly ascending) and handed over: only the checks that cost nothing are
    made again, not the passes over every point (a 1M-point read checked the same numbers
    twice). Arrays that are not a reader's own go through the full constructor."""
    own = all(
        isinstance(array, np.ndarray) and array.ndim == 1 and not array.flags.writeable and array.shape == x.shape
        for array in (x, absorbance, saturated)
    )
    if not (own and x.dtype == absorbance.dtype == np.float64 and saturated.dtype == bool and x.size >= 2
            and x[0] < x[-1] and kind in Y_KINDS):
        return Spectrum(x, absorbance, saturated, kind, conversion, meta)
    spectrum = object.__new__(Spectrum)
    for name, value in (("wavenumber_cm1", x), ("absorbance", absorbance), ("saturated", saturated),
                        ("original_y_kind", kind), ("conversion", conversion), ("meta", meta)):
        object.__setattr__(spectrum, name, value)
    return spectrum


def handed_over(*arrays: np.ndarray) -> None:
    """Mark arrays a reader owns as read-only, so `Spectrum` takes them without copying."""
    for array in arrays:
        array.setflags(write=False)


# Arrays are reversed in blocks of this many points: no copy of a whole spectrum.
REVERSE_BLOCK = 1 << 16


def reverse_in_place(array: np.ndarray) -> None:
    """Reverse a one-dimensional writable array where it lies (a reader's own axis read in
    descending order), a block at a time."""
    size = array.size
    for start in range(0, size // 2, REVERSE_BLOCK):
        stop = min(start + REVERSE_BLOCK, size // 2)
        front = array[start:stop].copy()
        array[start:stop] = array[size - stop : size - start][::-1]
        array[size - stop : size - start] = front[::-1]


def to_absorbance(
    values: np.ndarray, y_kind: str, in_place: bool = False
) -> tuple[np.ndarray, np.ndarray, str]:
    """Convert y values of `y_kind` to decadic absorbance; returns (A, saturated mask, note).

    With `in_place` the caller hands `values` over (a reader's own array, which nobody else
    holds): a contiguous writable one becomes the absorbance itself, to the same doubles,
    instead of being copied (a million points are 8 MB)."""
    values = np.asarray(values, dtype=np.float64)
    reuse = in_place and values.flags.c_contiguous and values.flags.writeable
    if y_kind == "absorbance":
        return (values if reuse else values.copy()), np.zeros(values.shape, dtype=bool), "none (file holds decadic absorbance)"
    if y_kind == "transmittance":
        fraction, note = values, "A = -log10(T)"
    elif y_kind == "percent_transmittance":
        note = "A = -log10(%T / 100)"
        fraction = np.divide(values, 100.0, out=values) if reuse else values / 100.0
    else:
        raise ValueError(f"unknown y kind {y_kind!r}")
    saturated = fraction <= 0.0
    if reuse and not saturated.any():
        # every point measurable: the same ufuncs over the same contiguous values, in place
        return np.negative(np.log10(fraction, out=fraction), out=fraction), saturated, note
    absorbance = np.empty_like(fraction)
    positive = ~saturated
    absorbance[positive] = -np.log10(fraction[positive])
    if saturated.any():
        highest = float(absorbance[positive].max()) if positive.any() else 0.0
        absorbance[saturated] = max(UNMEASURABLE_ABSORBANCE, highest)
        note += f"; {int(saturated.sum())} points with T <= 0 marked saturated"
    return absorbance, saturated, note


@dataclass(frozen=True)
class LineList:
    """A table of line positions read from a file (e.g. a JCAMP-DX peak table).

    Kept apart from `Spectrum`: it has no baseline or shapes, and goes straight to assignment.
    `intensity` is as the file gives it (its kind in `y_kind`, may be "unknown").
    """

    position_cm1: np.ndarray
    intensity: np.ndarray
    y_kind: str = "unknown"
    meta: FileMetadata = field(default_factory=FileMetadata)

    def __post_init__(self) -> None:
        x = _frozen_float_array(self.position_cm1, "position_cm1")
        y = _frozen_float_array(self.intensity, "intensity")
        if x.shape != y.shape:
            raise ValueError(f"positions and intensities differ in length: {x.size}, {y.size}")
        if x.size < 1:
            raise ValueError("a line list needs at least one line")
        if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
            raise ValueError("line positions and intensities must be finite")
        order = np.argsort(x, kind="stable")
        if np.any(order != np.arange(x.size)):
            x, y = x[order], y[order]
            x.setflags(write=False)
            y.setflags(write=False)
        object.__setattr__(self, "position_cm1", x)
        object.__setattr__(self, "intensity", y)

    @property
    def points(self) -> int:
        return int(self.position_cm1.size)

    def with_meta(self, meta: FileMetadata) -> LineList:
        """The same line list with other metadata (arrays shared, already validated)."""
        return _copy_with_meta(self, meta)


def _copy_with_meta(value: Any, meta: FileMetadata) -> Any:
    clone = object.__new__(type(value))
    for name, field_value in vars(value).items():
        object.__setattr__(clone, name, field_value)
    object.__setattr__(clone, "meta", meta)
    return clone
