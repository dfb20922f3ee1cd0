"""One fitted quantity over runs, drawn in braille: a bar per run (value ± 1 sigma), a dotted
reference line, the runs' times under it, and flagged or failed runs told apart by shape.

Good runs are two dots wide; a run that was flagged or whose verdict was FAIL is one dot
wide and marked on the row under the plot (`F` flagged, `✘` failed), never by colour alone.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from rich.text import Text
from textual.widget import Widget

from processing.local_time import local
from tui.widgets.spectrum_plot import braille_rows

FLAGGED_MARK, FAILED_MARK = "F", "✘"


@dataclass(frozen=True)
class TrendRun:
    """One run's value of the quantity, with what the operator and the checks said of it."""

    value: float
    sigma: float | None
    at: str | None = None  # the run's time stamp (UTC, as stored)
    flagged: bool = False
    failed: bool = False  # verdict FAIL

    @property
    def apart(self) -> bool:
        return self.flagged or self.failed


def time_labels(stamps: Sequence[str | None]) -> list[str]:
    """Local HH:MM of each run; with the month and day when the runs span more than one day."""
    moments = [local(stamp) for stamp in stamps]
    days = {moment.date() for moment in moments if moment is not None}
    form = "%m-%d %H:%M" if len(days) > 1 else "%H:%M"
    return [moment.strftime(form) if moment is not None else "?" for moment in moments]


def draw_trend(runs: Sequence[TrendRun], width: int, height: int, reference: float | None = None) -> list[Text]:
    """Rows of text: runs left (oldest) to right (newest), value upwards, error bars as spans,
    the reference as a dotted line, a marker row and a row of times."""
    if not runs:
        return [Text("no values of this quantity in the ledger yet", style="dim")]
    values = np.asarray([run.value for run in runs], dtype=float)
    sigmas = np.asarray([run.sigma if run.sigma is not None else 0.0 for run in runs], dtype=float)
    low = float(np.min(values - sigmas))
    high = float(np.max(values + sigmas))
    if reference is not None and np.isfinite(reference):
        low, high = min(low, reference), max(high, reference)
    if high - low < 1e-15:
        low, high = low - 0.5 * max(abs(low), 1e-6) * 1e-6 - 1e-9, high + 1e-9
    places = max(0, min(8, 2 - int(np.floor(np.log10(max(high - low, 1e-12))))))
    high_label, low_label = f"{high:.{places}f}", f"{low:.{places}f}"
    gutter = max(len(high_label), len(low_label), 4) + 1
    plot_width = max(4, width - gutter)
    plot_rows = max(1, height - 2)  # a marker row and a time row under the plot
    dot_cols, dot_rows = plot_width * 2, plot_rows * 4
    count = values.size
    columns = np.zeros(count, dtype=int) if count == 1 else np.round(np.linspace(0, dot_cols - 2, count)).astype(int)

    def to_row(v: np.ndarray | float) -> np.ndarray:
        return np.clip(np.round((high - np.asarray(v)) / (high - low) * (dot_rows - 1)), 0, dot_rows - 1).astype(int)

    top = np.full(dot_cols, dot_rows, dtype=int)
    bottom = np.full(dot_cols, -1, dtype=int)
    centre = to_row(values)
    # each run: its ±sigma bar, at least three dots tall so a point is visible; two dots wide
    # for a good run, one for a flagged or failed one
    bar_top = np.minimum(to_row(values + sigmas), np.maximum(centre - 1, 0))
    bar_bottom = np.maximum(to_row(values - sigmas), np.minimum(centre + 1, dot_rows - 1))
    apart = np.asarray([run.apart for run in runs])
    for offset in (0, 1):
        chosen = np.ones(count, dtype=bool) if offset == 0 else ~apart
        cols = np.clip(columns[chosen] + offset, 0, dot_cols - 1)
        np.minimum.at(top, cols, bar_top[chosen])
        np.maximum.at(bottom, cols, bar_bottom[chosen])
    rows = braille_rows(top, bottom, dot_rows)
    reference_row = None
    if reference is not None and np.isfinite(reference):
        reference_dot = int(to_row(reference))
        reference_row = reference_dot // 4
        rows = _with_reference(rows, reference_dot, top, bottom)
    out: list[Text] = []
    for index, row in enumerate(rows):
        label = high_label if index == 0 else low_label if index == len(rows) - 1 else ""
        if index == reference_row and not label:
            label = "ref"
        text = Text(label.rjust(gutter - 1) + "│", style="dim")
        text.append(row)
        out.append(text)
    marks = [" "] * plot_width
    for run, column in zip(runs, columns):
        if run.apart:
            marks[min(plot_width - 1, column // 2)] = FAILED_MARK if run.failed else FLAGGED_MARK
    out.append(Text(" " * (gutter - 1) + " ", style="dim").append("".join(marks), style="bold"))
    out.append(Text(" " * gutter, style="dim").append(_time_axis(runs, columns, plot_width), style="dim"))
    return out


def _with_reference(rows: list[str], dot: int, top: np.ndarray, bottom: np.ndarray) -> list[str]:
    """The braille rows with every other dot of row `dot` lit where no run is drawn."""
    cells = [list(row) for row in rows]
    bit = (0x01, 0x02, 0x04, 0x40)[dot % 4]
    for column in range(0, top.size, 4):
        if top[column] <= dot <= bottom[column]:
            continue
        cell = cells[dot // 4][column // 2]
        cells[dot // 4][column // 2] = chr(ord(cell) | bit)
    return ["".join(row) for row in cells]


def _time_axis(runs: Sequence[TrendRun], columns: np.ndarray, plot_width: int) -> str:
    """The first, middle and last runs' times under their bars (as many as fit)."""
    labels = time_labels([run.at for run in runs])
    axis = [" "] * plot_width
    picks = sorted({0, len(runs) // 2, len(runs) - 1})
    for index in picks:
        label = labels[index]
        centre = int(columns[index]) // 2
        start = max(0, min(plot_width - len(label), centre - len(label) // 2))
        if all(char == " " for char in axis[max(0, start - 1):start + len(label) + 1]):
            axis[start:start + len(label)] = list(label)
    return "".join(axis)


class TrendPlot(Widget):
    """Shows `draw_trend` of the runs set with `show`."""

    def __init__(self, **kwargs: object) -> None:
        super().__init__(**kwargs)  # type: ignore[arg-type]
        self._runs: list[TrendRun] = []
        self._reference: float | None = None

    def show(self, runs: Sequence[TrendRun], reference: float | None = None) -> None:
        self._runs = list(runs)
        self._reference = reference
        self.refresh()

    def render(self) -> Text:
        rows = draw_trend(self._runs, self.content_size.width, max(3, self.content_size.height), self._reference)
        return Text("\n").join(rows)
