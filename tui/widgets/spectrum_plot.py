"""A spectrum drawn in braille cells, with line markers by isotopologue and branch.

The drawing is a pure function (`draw_spectrum`) from arrays to rich `Text` rows, so it can be
tested without a terminal; `SpectrumPlot` is the focusable widget that keeps the view window
(zoom, pan, axis direction) and calls it on every render. Only rendering happens here: line
positions and assignments come from the analysis result as they are.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
from rich.markup import escape
from rich.text import Text
from textual.reactive import reactive
from textual.widget import Widget

from processing.results import Line
from processing.safe_text import safe_text
from tui import bindings

BRAILLE_BASE = 0x2800
# Braille dot bit for (column 0..1, row 0..3) inside one character cell (Unicode braille block).
_DOT_BITS = np.array([[0x01, 0x02, 0x04, 0x40], [0x08, 0x10, 0x20, 0x80]], dtype=np.int32)

# Marker characters: one pair (P branch, R branch) per isotopologue, in order of appearance,
# so branch and isotopologue are told apart by shape, not by colour.
BRANCH_MARKERS: tuple[tuple[str, str], ...] = (("P", "R"), ("p", "r"), ("<", ">"), ("{", "}"))
UNASSIGNED_MARKER = "?"
EXCLUDED_MARKER = "x"
SATURATED_MARKER = "s"  # on a row of its own under the isotopologues: the line's top is flat (saturated)
MIN_WIDTH, MIN_HEIGHT = 10, 3  # the least room the plot draws in
MARKER_STYLES: tuple[str, ...] = ("bold cyan", "bold magenta", "bold yellow", "bold green")
GUTTER = 7  # characters left of the plot: y tick labels, isotopologue names on marker rows


@dataclass(frozen=True)
class PlotLine:
    """One line to mark: its position and, when assigned, isotopologue and branch."""

    position_cm1: float
    isotopologue: str | None = None
    branch: str | None = None  # "P" | "R" | None
    excluded: bool = False
    saturated: bool = False

    @classmethod
    def from_result_line(cls, line: Line, excluded: bool = False) -> PlotLine:
        """Build from one of the result's lines."""
        assigned = line.assigned
        return cls(
            position_cm1=float(line.position.value),
            isotopologue=assigned.isotopologue if assigned else None,
            branch=assigned.branch if assigned else None,
            excluded=excluded,
            saturated=line.saturated,
        )


def lines_region(lines: Sequence[PlotLine]) -> tuple[float, float] | None:
    """(lowest, highest) assigned line, or None when no line is assigned."""
    positions = [line.position_cm1 for line in lines if line.isotopologue]
    return (min(positions), max(positions)) if positions else None


def choose_window(
    full: tuple[float, float], previous: tuple[float, float] | None, lines: Sequence[PlotLine]
) -> tuple[tuple[float, float], str]:
    """The view of a newly shown run, and why: the zoom kept from the run shown before when
    it holds most of this run's assigned lines (to compare one region across runs); else this
    run's own bands (their lines with a margin); else the whole spectrum."""
    low, high = full
    assigned = [line.position_cm1 for line in lines if line.isotopologue]
    if previous is not None and low <= previous[0] < previous[1] <= high:
        inside = sum(1 for x in assigned if previous[0] <= x <= previous[1])
        if assigned and inside * 2 >= len(assigned):
            return previous, "zoom kept"
    region = lines_region(lines)
    if region is None:
        return full, "whole spectrum"
    margin = max(0.08 * (region[1] - region[0]), 5.0)
    window = (max(low, region[0] - margin), min(high, region[1] + margin))
    if window[1] - window[0] >= 0.9 * (high - low):
        return full, "whole spectrum"
    return window, "this run's bands"


def braille_rows(columns_low: np.ndarray, columns_high: np.ndarray, dot_rows: int) -> list[str]:
    """Braille text for filled vertical spans: dot column i lit from columns_low[i] to columns_high[i].

    Rows count from the top (0) down to dot_rows - 1; a column with low > high stays dark.
    """
    dot_cols = columns_low.size
    cells_x = (dot_cols + 1) // 2
    cells_y = (dot_rows + 3) // 4
    bits = np.zeros((cells_y, cells_x), dtype=np.int32)
    rows = np.arange(dot_rows)
    for col in range(dot_cols):
        low, high = columns_low[col], columns_high[col]
        if low > high:
            continue
        lit = rows[(rows >= low) & (rows <= high)]
        np.bitwise_or.at(bits, (lit // 4, np.full(lit.size, col // 2)), _DOT_BITS[col % 2, lit % 4])
    return ["".join(chr(BRAILLE_BASE + int(v)) for v in row) for row in bits]


def _tick_label(value: float) -> str:
    if abs(value) >= 100:
        return f"{value:.0f}"
    text = f"{value:.3f}" if abs(value) < 10 else f"{value:.2f}"
    return "0.000" if text == "-0.000" else text


def draw_spectrum(
    x: np.ndarray,
    y: np.ndarray,
    lines: Sequence[PlotLine],
    window: tuple[float, float],
    width: int,
    height: int,
    high_to_low: bool = True,
) -> list[Text]:
    """Rows of text showing y(x) inside `window` (low, high cm-1) in a width x height box.

    Layout from the top: one marker row per isotopologue with lines in the window, one row for
    unassigned lines (if any), the braille plot, then an x axis row with tick labels.
    """
    low, high = float(min(window)), float(max(window))
    plot_width = max(4, width - GUTTER)
    # Isotopologues by number of assigned lines, most first: the main one gets the P/R markers.
    counts: dict[str, int] = {}
    for line in lines:
        if line.isotopologue:
            counts[line.isotopologue] = counts.get(line.isotopologue, 0) + 1
    isotopologues = sorted(counts, key=lambda iso: (-counts[iso], iso))
    visible = [ln for ln in lines if low <= ln.position_cm1 <= high]
    shown_isos = [iso for iso in isotopologues if any(ln.isotopologue == iso for ln in visible)]
    has_unassigned = any(ln.isotopologue is None for ln in visible)
    has_saturated = any(ln.saturated for ln in visible)
    marker_rows = len(shown_isos) + (1 if has_unassigned else 0) + (1 if has_saturated else 0)
    plot_rows = max(1, height - marker_rows - 1)

    def to_column(position: np.ndarray | float, columns: int) -> np.ndarray:
        fraction = (np.asarray(position, dtype=float) - low) / max(high - low, 1e-12)
        if high_to_low:
            fraction = 1.0 - fraction
        return np.clip(np.floor(fraction * columns), 0, columns - 1).astype(int)

    out: list[Text] = []
    # Marker rows.
    saturated_row = marker_rows - 1 if has_saturated else None
    for row_index in range(marker_rows):
        iso = shown_isos[row_index] if row_index < len(shown_isos) else None
        cells = [" "] * plot_width
        styles: list[str | None] = [None] * plot_width
        if row_index == saturated_row:
            for line in visible:
                if line.saturated:
                    col = int(to_column(line.position_cm1, plot_width))
                    cells[col], styles[col] = SATURATED_MARKER, "bold"
            text = Text("sat".ljust(GUTTER), style="dim")
            for char, style in zip(cells, styles):
                text.append(char, style=style or "")
            out.append(text)
            continue
        for line in visible:
            if line.isotopologue != iso:
                continue
            col = int(to_column(line.position_cm1, plot_width))
            if line.excluded:
                char, style = EXCLUDED_MARKER, "dim"
            elif iso is None:
                char, style = UNASSIGNED_MARKER, "bold red"
            else:
                pair_index = isotopologues.index(iso) % len(BRANCH_MARKERS)
                pair = BRANCH_MARKERS[pair_index]
                char = pair[0] if line.branch == "P" else pair[1]
                style = MARKER_STYLES[pair_index]
            cells[col] = char
            styles[col] = style
        label = (iso or "unasg")[: GUTTER - 1].ljust(GUTTER)
        text = Text(label, style="dim")
        for char, style in zip(cells, styles):
            text.append(char, style=style or "")
        out.append(text)

    # The braille plot.
    inside = (x >= low) & (x <= high)
    dot_cols, dot_rows = plot_width * 2, plot_rows * 4
    if np.count_nonzero(inside) >= 1:
        xs, ys = x[inside], y[inside]
        y_low, y_high = float(np.min(ys)), float(np.max(ys))
        if y_high - y_low < 1e-12:
            y_low, y_high = y_low - 0.5, y_high + 0.5
        span = y_high - y_low
        cols = to_column(xs, dot_cols)
        dot_y = np.clip(((y_high - ys) / span * (dot_rows - 1)).round().astype(int), 0, dot_rows - 1)
        top = np.full(dot_cols, dot_rows, dtype=int)
        bottom = np.full(dot_cols, -1, dtype=int)
        np.minimum.at(top, cols, dot_y)
        np.maximum.at(bottom, cols, dot_y)
        filled = bottom >= 0
        # Join neighbouring columns so the trace is continuous when points are sparse.
        filled_idx = np.flatnonzero(filled)
        if filled_idx.size:
            grid = np.arange(dot_cols)
            inner = (grid >= filled_idx[0]) & (grid <= filled_idx[-1])
            top_i = np.interp(grid, filled_idx, top[filled_idx]).round().astype(int)
            bottom_i = np.interp(grid, filled_idx, bottom[filled_idx]).round().astype(int)
            top = np.where(filled, top, np.where(inner, top_i, dot_rows))
            bottom = np.where(filled, bottom, np.where(inner, bottom_i, -1))
            prev_top = np.concatenate(([dot_rows], top[:-1]))
            prev_bottom = np.concatenate(([-1], bottom[:-1]))
            has_prev = prev_bottom >= 0
            top = np.where(has_prev & (bottom >= 0), np.minimum(top, prev_bottom), top)
            bottom = np.where(has_prev & (bottom >= 0), np.maximum(bottom, prev_top), bottom)
        rows = braille_rows(top, bottom, dot_rows)
        for row_index, row in enumerate(rows):
            if row_index == 0:
                label = _tick_label(y_high)
            elif row_index == len(rows) - 1:
                label = _tick_label(y_low)
            else:
                label = ""
            text = Text(label.rjust(GUTTER - 1)[: GUTTER - 1] + "│", style="dim")
            text.append(row)
            out.append(text)
    else:
        for row_index in range(plot_rows):
            text = Text(" " * (GUTTER - 1) + "│", style="dim")
            if row_index == plot_rows // 2:
                text.append("no data points in this window".center(plot_width))
            out.append(text)

    # x axis: tick labels at the two ends and the middle.
    axis = [" "] * plot_width
    left_value, right_value = (high, low) if high_to_low else (low, high)
    labels = [(0, _tick_label(left_value), "left")]
    labels.append((plot_width // 2, _tick_label((low + high) / 2), "centre"))
    labels.append((plot_width - 1, _tick_label(right_value), "right"))
    for col, label, align in labels:
        start = col if align == "left" else col - len(label) + 1 if align == "right" else col - len(label) // 2
        start = max(0, min(plot_width - len(label), start))
        for offset, char in enumerate(label):
            axis[start + offset] = char
    out.append(Text("cm-1".rjust(GUTTER - 1) + " " + "".join(axis), style="dim"))
    return out[:height] if height > 0 else out


def band_view(low: float, high: float) -> tuple[float, float]:
    """(centre, span) in cm-1 that shows a band's lines from `low` to `high` with a margin."""
    return (low + high) / 2, (high - low) * 1.1 + 2.0


class SpectrumPlot(Widget, can_focus=True):
    """The selected run's spectrum, zoomable and pannable by keys."""

    BINDINGS = bindings.PLOT

    high_to_low: reactive[bool] = reactive(True)
    window: reactive[tuple[float, float] | None] = reactive(None)

    def __init__(self, *, name: str | None = None, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._x: np.ndarray | None = None
        self._y: np.ndarray | None = None
        self._lines: tuple[PlotLine, ...] = ()
        self._message = "no run selected"
        self._loading_run_id: int | None = None
        self.caption = ""  # which run is drawn, said on the status line
        self.view_reason = ""  # why the view is what it is when the run was shown ("zoom kept", ...)
        self.bands: list[tuple[str, float, float]] = []  # (label, low, high) of the run's bands
        self._band_index = -1

    @property
    def full_range(self) -> tuple[float, float] | None:
        if self._x is None or self._x.size == 0:
            return None
        return float(self._x[0]), float(self._x[-1])

    def show(
        self,
        x: np.ndarray,
        y: np.ndarray,
        lines: Sequence[PlotLine] = (),
        window: tuple[float, float] | None = None,
    ) -> None:
        """Plot y against ascending wavenumber x (cm-1) with markers; window None = all of it."""
        self._x = np.asarray(x, dtype=float)
        self._y = np.asarray(y, dtype=float)
        self._loading_run_id = None
        self._lines = tuple(lines)
        self._band_index = -1
        self.window = window or self.full_range
        self.refresh()

    def set_lines(self, lines: Sequence[PlotLine]) -> None:
        """Replace the markers (e.g. after a line is marked for exclusion)."""
        self._lines = tuple(lines)
        self.refresh()

    def show_message(self, message: str, loading_run_id: int | None = None) -> None:
        """Clear the plot and say why (loading, unreadable file, line list only)."""
        self._x = self._y = None
        self._lines = ()
        self._message = safe_text(message)  # may name a file
        self._loading_run_id = loading_run_id
        self.window = None
        self.refresh()

    def is_loading_for(self, run_id: int | None) -> bool:
        """True while the spectrum of `run_id` is being read."""
        return run_id is not None and self._loading_run_id == run_id

    def render(self) -> Text:
        width, height = self.content_size.width, self.content_size.height
        if self._x is None or self._y is None or self.window is None:
            return Text(self._message, style="dim")
        if width < MIN_WIDTH or height < MIN_HEIGHT:
            return Text(f"too small to draw here ({width}x{height}; needs {MIN_WIDTH}x{MIN_HEIGHT}): "
                        "enlarge the terminal", style="dim")
        rows = draw_spectrum(self._x, self._y, self._lines, self.window, width, height - 1, self.high_to_low)
        low, high = self.window
        full = self.full_range or self.window
        zoom = (full[1] - full[0]) / max(high - low, 1e-12)
        direction = "high→low" if self.high_to_low else "low→high"
        pieces = [self.caption, f"{low:.1f}–{high:.1f} cm-1", direction, f"zoom ×{zoom:.3g}",
                  "zoom kept from the run before" if self.view_reason == "zoom kept" else "", "absorbance"]
        shown = ""
        for piece in pieces:  # whole pieces only, as many as the width holds
            if piece and len(shown) + len(piece) + 2 <= width:
                shown = f"{shown}  {piece}" if shown else piece
        return Text("\n").join([*rows, Text(shown, style="dim")])

    def zoom_to(self, centre_cm1: float, span_cm1: float) -> None:
        """Show `span_cm1` about `centre_cm1` (a line, a band), within the spectrum."""
        full = self.full_range
        if full is None:
            return
        half = min(max(span_cm1 / 2, 0.05), (full[1] - full[0]) / 2)
        self.window = self._clamped(centre_cm1 - half, centre_cm1 + half)

    def action_next_band(self) -> None:
        """Zoom to the run's next band (in turn), the whole spectrum after the last."""
        if not self.bands or self.full_range is None:
            return
        self._band_index += 1
        if self._band_index >= len(self.bands):
            self._band_index = -1
            self.window = self.full_range
            self.notify("whole spectrum", timeout=1.5)
            return
        label, low, high = self.bands[self._band_index]
        self.zoom_to(*band_view(low, high))
        self.notify(escape(safe_text(label)), timeout=1.5)

    def action_zoom(self, factor: float) -> None:
        full = self.full_range
        if full is None or self.window is None:
            return
        low, high = self.window
        centre, half = (low + high) / 2, (high - low) / 2 * factor
        min_half = max((full[1] - full[0]) / 2000, 0.05)
        half = min(max(half, min_half), (full[1] - full[0]) / 2)
        self.window = self._clamped(centre - half, centre + half)

    def action_pan(self, fraction: float) -> None:
        """Move the view by a fraction of its width; positive = towards the screen's right."""
        full = self.full_range
        if full is None or self.window is None:
            return
        low, high = self.window
        shift = (high - low) * fraction * (-1.0 if self.high_to_low else 1.0)
        self.window = self._clamped(low + shift, high + shift)

    def action_reset_view(self) -> None:
        self.window = self.full_range
        self.view_reason = ""

    def action_flip_axis(self) -> None:
        self.high_to_low = not self.high_to_low

    def _clamped(self, low: float, high: float) -> tuple[float, float]:
        full = self.full_range
        assert full is not None
        width = high - low
        if low < full[0]:
            low, high = full[0], full[0] + width
        if high > full[1]:
            low, high = full[1] - width, full[1]
        return max(low, full[0]), min(high, full[1])
