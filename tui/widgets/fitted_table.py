"""A DataTable whose columns fit the width it is given: columns shrink to their least width,
then the least needed are left out, and one column takes what is left (reasons, notes).

At 80 columns every table keeps what the operator decides by (verdict, decision, assignment,
obs-calc); at 120 the same tables show more columns and wider text. Rows are kept as cells by
column key, so a change of width lays the table out again without asking its owner.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from rich.text import Text
from textual import events
from textual.widgets import DataTable

CELL_PADDING = 2  # a DataTable pads each cell by one character either side
SCROLLBAR = 2  # room kept for the vertical scrollbar


@dataclass(frozen=True)
class Column:
    """One column: its width, the least width it shrinks to (None: fixed), when it is left
    out on a narrow table (`drop`: the highest goes first; 0 never), and whether it takes the
    width left over (`grow`, at least `width`)."""

    key: str
    label: str
    width: int
    min_width: int | None = None
    drop: int = 0
    grow: bool = False
    fit_content: bool = False  # no wider than its widest cell (file names): room for the others


def fit_columns(columns: Sequence[Column], available: int) -> list[tuple[Column, int]]:
    """The columns shown in `available` characters and their widths (see `Column`)."""
    chosen = list(columns)
    widths = {column.key: column.width for column in chosen}

    def total() -> int:
        return sum(widths[column.key] + CELL_PADDING for column in chosen)

    def shrink() -> None:
        for column in sorted(chosen, key=lambda c: -(c.width - (c.min_width or c.width))):
            if column.min_width is not None and total() > available:
                widths[column.key] = max(column.min_width, widths[column.key] - (total() - available))

    for column in chosen:
        if column.grow:
            widths[column.key] = column.min_width or column.width
    shrink()
    while total() > available and any(column.drop for column in chosen):
        chosen.remove(max(chosen, key=lambda c: c.drop))
        for column in chosen:  # a left-out column's room goes back to those that shrank
            if column.min_width is not None and not column.grow:
                widths[column.key] = column.width
        shrink()
    growing = [column for column in chosen if column.grow]
    spare = available - total()
    if growing and spare > 0:
        for index, column in enumerate(growing):
            widths[column.key] += spare // len(growing) + (1 if index < spare % len(growing) else 0)
    return [(column, widths[column.key]) for column in chosen]


class FittedTable(DataTable):
    """A row-cursor DataTable laid out by `fit_columns`; fill it with `set_rows`."""

    COLUMNS: tuple[Column, ...] = ()
    ROW_HEIGHT: int | None = 1  # None: as tall as the row's wrapped text

    def __init__(self, **kwargs: Any) -> None:
        kwargs.setdefault("cursor_type", "row")
        super().__init__(**kwargs)
        self.row_cells: list[tuple[str, dict[str, Text]]] = []
        self.layout_widths: list[tuple[Column, int]] = []

    def columns_for(self, width: int) -> list[tuple[Column, int]]:
        columns = [self._fitted(column) if column.fit_content else column for column in self.COLUMNS]
        return fit_columns(columns, max(10, width - SCROLLBAR))

    def _fitted(self, column: Column) -> Column:
        """`column` no wider than its widest cell (or label), never under its least width."""
        widest = max([len(column.label)] + [cells[column.key].cell_len for _, cells in self.row_cells if column.key in cells])
        width = max(min(column.width, widest), column.min_width or 0)
        return Column(column.key, column.label, width, min(column.min_width or width, width), column.drop, column.grow)

    def shown(self, key: str) -> bool:
        return any(column.key == key for column, _ in self.layout_widths)

    def on_mount(self) -> None:
        self._lay_out(self.size.width or 80)

    def on_resize(self, event: events.Resize) -> None:
        self._lay_out(event.size.width)
        if self.row_count:  # a shorter table (the line under it grew): keep the cursor in view
            self.call_after_refresh(self.move_cursor, row=self.cursor_row, animate=False)

    def _lay_out(self, width: int) -> None:
        wanted = self.columns_for(width)
        if [(c.key, w) for c, w in wanted] == [(c.key, w) for c, w in self.layout_widths]:
            return
        cursor = self.cursor_row
        self.layout_widths = wanted
        self.clear(columns=True)
        for column, column_width in wanted:
            self.add_column(column.label, key=column.key, width=column_width)
        self._add_rows()
        if self.row_count:
            self.move_cursor(row=min(cursor, self.row_count - 1), animate=False)

    def set_rows(self, rows: list[tuple[str, dict[str, Text]]]) -> None:
        """Replace the rows: (row key, cells by column key); cells of hidden columns are kept
        for when the table is wider."""
        self.row_cells = rows
        before = self.layout_widths
        self._lay_out(self.size.width or 80)
        if self.layout_widths is before:  # the same layout: only the rows are new
            self.clear()
            self._add_rows()

    def _add_rows(self) -> None:
        for key, cells in self.row_cells:
            self.add_row(*[self._shown_text(cells.get(column.key, Text("")), width) for column, width in self.layout_widths],
                         key=key, height=self.ROW_HEIGHT)

    def _shown_text(self, text: Text, width: int) -> Text:
        """A one-line cell too long for its column ends in "…" (a name cut silently could be
        taken for another file's)."""
        if self.ROW_HEIGHT != 1 or text.cell_len <= width:
            return text
        shortened = text.copy()
        shortened.truncate(width, overflow="ellipsis")
        return shortened

    def set_cell(self, row_key: str, column_key: str, value: Text) -> None:
        """Change one cell (kept for a later layout too)."""
        for key, cells in self.row_cells:
            if key == row_key:
                cells[column_key] = value
        if self.shown(column_key) and row_key in self.rows:
            width = next(width for column, width in self.layout_widths if column.key == column_key)
            self.update_cell(row_key, column_key, self._shown_text(value, width))
