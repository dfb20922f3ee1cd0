"""One fitted quantity over runs, drawn in braille: a dot per run with its ±1 sigma bar."""
from __future__ import annotations

from typing import Sequence

import numpy as np
from rich.text import Text
from textual.widget import Widget

from tui.widgets.spectrum_plot import braille_rows


def draw_trend(values: Sequence[float], sigmas: Sequence[float | None], width: int, height: int) -> list[Text]:
    """Rows of text: runs left (oldest) to right (newest), value upwards, error bars as spans."""
    if not values:
        return [Text("no values of this quantity in the ledger yet", style="dim")]
    value_array = np.asarray(values, dtype=float)
    sigma_array = np.asarray([s if s is not None else 0.0 for s in sigmas], dtype=float)
    low = float(np.min(value_array - sigma_array))
    high = float(np.max(value_array + sigma_array))
    if high - low < 1e-15:
        low, high = low - 0.5 * max(abs(low), 1e-6) * 1e-6 - 1e-9, high + 1e-9
    places = max(0, min(8, 2 - int(np.floor(np.log10(max(high - low, 1e-12))))))
    high_label, low_label = f"{high:.{places}f}", f"{low:.{places}f}"
    gutter = max(len(high_label), len(low_label)) + 1
    plot_width = max(4, width - gutter)
    dot_cols, dot_rows = plot_width * 2, max(1, height) * 4
    count = value_array.size
    columns = np.zeros(count, dtype=int) if count == 1 else np.round(np.linspace(0, dot_cols - 1, count)).astype(int)

    def to_row(v: np.ndarray) -> np.ndarray:
        return np.clip(np.round((high - v) / (high - low) * (dot_rows - 1)), 0, dot_rows - 1).astype(int)

    top = np.full(dot_cols, dot_rows, dtype=int)
    bottom = np.full(dot_cols, -1, dtype=int)
    centre = to_row(value_array)
    # each run: its ±sigma bar, at least three dots tall, two dots wide, so a point is visible
    bar_top = np.minimum(to_row(value_array + sigma_array), np.maximum(centre - 1, 0))
    bar_bottom = np.maximum(to_row(value_array - sigma_array), np.minimum(centre + 1, dot_rows - 1))
    for offset in (0, 1):
        cols = np.clip(columns + offset if count > 1 else columns + offset, 0, dot_cols - 1)
        np.minimum.at(top, cols, bar_top)
        np.maximum.at(bottom, cols, bar_bottom)
    rows = braille_rows(top, bottom, dot_rows)
    out: list[Text] = []
    for index, row in enumerate(rows):
        label = high_label if index == 0 else low_label if index == len(rows) - 1 else ""
        text = Text(label.rjust(gutter - 1) + "│", style="dim")
        text.append(row)
        out.append(text)
    return out


class TrendPlot(Widget):
    """Shows `draw_trend` of the values set with `show`."""

    def __init__(self, **kwargs: object) -> None:
        super().__init__(**kwargs)  # type: ignore[arg-type]
        self._values: list[float] = []
        self._sigmas: list[float | None] = []

    def show(self, values: Sequence[float], sigmas: Sequence[float | None]) -> None:
        self._values = list(values)
        self._sigmas = list(sigmas)
        self.refresh()

    def render(self) -> Text:
        rows = draw_trend(self._values, self._sigmas, self.content_size.width, max(1, self.content_size.height))
        return Text("\n").join(rows)
