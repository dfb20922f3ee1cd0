"""Plain-text tables: columns padded to their widest cell, fitted to a terminal's width when
one is given (text columns wrapped between words, then blocks of columns), and the one-line
join of a run's main reasons. No colour, no markup; cells are text the caller made safe."""
from __future__ import annotations

import textwrap
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from contextvars import ContextVar

# The width tables are fitted to (None: as wide as they are); set by `tables_fitted_to`.
_TABLE_WIDTH: ContextVar[int | None] = ContextVar("table_width", default=None)
GAP = "  "
WRAP_AT_LEAST = 12  # a text column is wrapped no narrower than this
REASON_SEPARATOR = " · "


def reasons_line(reasons: Sequence[str]) -> str:
    """`calibration +0.24 cm-1 · fringes 0.004 A`."""
    return REASON_SEPARATOR.join(reasons)


@contextmanager
def tables_fitted_to(width: int | None) -> Iterator[None]:
    """Every `table` made inside is fitted to `width` (a terminal's; None: as wide as it is)."""
    token = _TABLE_WIDTH.set(width)
    try:
        yield
    finally:
        _TABLE_WIDTH.reset(token)


def fitted_table(headers: Sequence[str], rows: Sequence[Sequence[str]], right: set[int] | None = None,
                 width: int | None = None) -> str:
    """`table` fitted to `width` (a terminal's; None: as wide as it is)."""
    with tables_fitted_to(width):
        return table(headers, rows, right)


def column_table(headers: Sequence[str], columns: Sequence[Sequence[str]], width: int | None = None) -> str:
    """`fitted_table` of a table given column by column (left-justified): a long listing is
    padded and joined without turning its columns into rows and back."""
    widths = widths_of(headers, columns)
    if width is not None and total_width(widths) > width:
        return fitted_table(headers, list(zip(*columns)), width=width)
    # every cell fits its column (the widths are the widest cells): one format per row, no
    # check for rows to wrap (`_block` makes it, 25 % of the time at 100,000 rows)
    body = map(str.rstrip, map(row_template(widths, set()).__mod__, zip(*columns)))
    return "\n".join([*header_lines(headers, widths, set()), *body])


def table(headers: Sequence[str], rows: Sequence[Sequence[str]], right: set[int] | None = None) -> str:
    """Columns padded to their widest cell; indices in `right` right-justified.

    Fitted to the width of `tables_fitted_to`: text columns (left-justified, wider than
    WRAP_AT_LEAST) are wrapped between words; a table still too wide is split into blocks of
    columns, each repeating the first column, so no cell is ever cut or broken mid-word."""
    right = right or set()
    widths = widths_of(headers, list(zip(*rows)) or [()] * len(headers))
    limit = _TABLE_WIDTH.get()
    if limit is None or total_width(widths) <= limit:
        return _block(headers, rows, right, widths)
    last = len(headers) - 1
    natural_last = widths[last]
    if last > 0 and last not in right and widths[last] > WRAP_AT_LEAST:  # prose: a cause, a reason, a model
        widths[last] = max(WRAP_AT_LEAST, len(headers[last]), widths[last] - (total_width(widths) - limit))
    if total_width(widths) <= limit:
        return _block(headers, rows, right, widths)
    # each block repeats the leading column(s) that name a row: one, or two when one is not unique
    keys = [0] if len({row[0] for row in rows}) == len(rows) or len(headers) < 3 else [0, 1]
    blocks, current = [], list(keys)
    for i in range(len(keys), len(headers)):
        if total_width([widths[j] for j in current + [i]]) > limit and len(current) > len(keys):
            blocks.append(current)
            current = list(keys)
        current.append(i)
    blocks.append(current)
    if last in blocks[-1]:  # the prose column gets what its block leaves over
        others = total_width([widths[j] for j in blocks[-1] if j != last]) + len(GAP)
        widths[last] = max(widths[last], min(natural_last, limit - others))
    out = []
    for number, block in enumerate(blocks):
        # a block of the columns that did not fit lists only the rows with something in them
        kept = [row for row in rows if number == 0 or any(row[j] for j in block[len(keys):])]
        if kept or number == 0:
            out.append(_block([headers[j] for j in block], [[row[j] for j in block] for row in kept],
                              {k for k, j in enumerate(block) if j in right}, [widths[j] for j in block]))
    return "\n\n".join(out)


def widths_of(headers: Sequence[str], columns: Sequence[Sequence[str]]) -> list[int]:
    """Each column's widest cell, its header included (column by column: 100,000 rows in a few ms)."""
    return [max(len(header), max(map(len, column), default=0)) for header, column in zip(headers, columns)]


def total_width(widths: Sequence[int]) -> int:
    return sum(widths) + len(GAP) * (len(widths) - 1)


def _block(headers: Sequence[str], rows: Sequence[Sequence[str]], right: set[int], widths: Sequence[int]) -> str:
    """One table at these column widths; a cell longer than its column wraps onto more lines.

    A row whose cells all fit is one line, `template % row` (100,000 rows in a C loop); a
    longer cell makes the line longer than the widths add up to, and that row is wrapped."""
    one_line = total_width(widths)
    formatted = list(map(row_template(widths, right).__mod__, map(tuple, rows)))
    if max(map(len, formatted), default=one_line) == one_line:
        body = list(map(str.rstrip, formatted))
    else:
        body = []
        for row, line in zip(rows, formatted):
            if len(line) == one_line:
                body.append(line.rstrip())
            else:
                body += _block_lines(row, widths, right)
    return "\n".join(header_lines(headers, widths, right) + body)


def row_template(widths: Sequence[int], right: set[int]) -> str:
    """A %-format for one row at these widths (columns in `right` right-justified)."""
    return GAP.join(("%%%ds" if i in right else "%%-%ds") % w for i, w in enumerate(widths))


def header_lines(headers: Sequence[str], widths: Sequence[int], right: set[int]) -> list[str]:
    """The header line(s) and the rule under them."""
    return _block_lines(headers, widths, right) + _block_lines(["-" * w for w in widths], widths, right)


def _block_lines(cells: Sequence[str], widths: Sequence[int], right: set[int]) -> list[str]:
    """One row at these column widths; a cell longer than its column wraps onto more lines."""
    pieces = [textwrap.wrap(cell, w, break_on_hyphens=False) or [""] if len(cell) > w else [cell]
              for cell, w in zip(cells, widths)]
    lines = []
    for depth in range(max(len(p) for p in pieces)):
        parts = [p[depth] if depth < len(p) else "" for p in pieces]
        lines.append(GAP.join(
            part.rjust(w) if i in right else part.ljust(w) for i, (part, w) in enumerate(zip(parts, widths))
        ).rstrip())
    return lines
