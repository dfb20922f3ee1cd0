"""The text table of `bandwatch ledger list`: one line per run, newest first.

A facility's ledger holds 100,000 runs and more, so the table is made without a Python step per
run and cell where a C loop can do it. The columns that repeat from run to run (instrument,
version, status, verdict, decision, species) are one key per run: each distinct key is padded
once, and a run's line is one `%`-format of its id, that block, its local time, file name and
reasons. The text is the same as `column_table` of the columns cell by cell; a terminal too
narrow for the table gets that table, wrapped.

The table is made in three steps (`listing_cells`, `column_widths`, `listing_lines`) so that
two processes can each make the lines of half the runs at the widths of the whole table
(`processing.listing_halves`).
"""
from __future__ import annotations

from collections.abc import Hashable, Sequence
from dataclasses import dataclass
from itertools import compress, repeat
from operator import itemgetter
from typing import TYPE_CHECKING, TypeVar

from processing.local_time import local_iso_all
from processing.safe_text import safe_column, safe_text
from processing.text_table import GAP, column_table, header_lines, reasons_line, row_template, total_width, widths_of

if TYPE_CHECKING:
    from processing.station.ledger import RunColumns

HEADERS = ("run", "instrument", "ver", "status", "verdict", "decision", "species", "processed", "file", "reasons")
INSTRUMENT = HEADERS.index("instrument")
_REPEATING = slice(1, 7)  # the columns that repeat from run to run
_NAME = itemgetter(2)  # of str.rpartition("/"): a path's file name
REPLACED = "replaced"  # the decision word of an undecided run a newer version of its file replaced
UNDECIDED = "-"
_Item = TypeVar("_Item")


@dataclass(frozen=True)
class ListingCells:
    """The cells of a listing, column by column, before padding. The repeating columns are
    one key per run and the cells of each distinct key."""

    run: list[str]
    keys: list[tuple[Hashable, ...]]
    blocks: dict[tuple[Hashable, ...], tuple[str, ...]]  # instrument, ver, status, verdict, decision, species
    processed: list[str]
    files: list[str]
    reasons: list[str]
    with_instrument: bool  # some run has an instrument (a ledger from before instruments has none)


def listing_table(runs: RunColumns, width: int | None = None) -> str:
    """The listing's table: a column per header, the instrument column left out when no run
    has an instrument; fitted to `width` (a terminal's; None: as wide as it is)."""
    cells = listing_cells(runs)
    widths = column_widths(cells)
    with_instrument = cells.with_instrument
    if width is not None and total_width(_shown(widths, with_instrument)) > width:  # wrapped and split as any table
        return column_table(_shown(HEADERS, with_instrument), _columns(cells, with_instrument), width=width)
    return "\n".join([*listing_header(widths, with_instrument), *listing_lines(cells, widths, with_instrument)])


def listing_header(widths: Sequence[int], with_instrument: bool) -> list[str]:
    """The header line and the rule under it, at the widths of every column (`column_widths`)."""
    return header_lines(_shown(HEADERS, with_instrument), _shown(widths, with_instrument), set())


def listing_cells(runs: RunColumns) -> ListingCells:
    """Each run's cells as the table shows them (local times, file names, outside text made
    terminal-safe); the repeating columns as keys."""
    keys = _repeating_keys(runs)
    return ListingCells(
        run=list(map(str, runs.run_id)),
        keys=keys,
        blocks={key: _repeating_cells(key) for key in dict.fromkeys(keys)},  # the distinct keys
        processed=local_iso_all(runs.processed_at),
        files=safe_column(map(_NAME, map(str.rpartition, runs.path, repeat("/")))),
        reasons=_reason_texts(runs),
        with_instrument=any(runs.instrument),
    )


def column_widths(cells: ListingCells) -> list[int]:
    """The width of every column (all of HEADERS): its widest cell or its header."""
    repeating = HEADERS[_REPEATING]
    return [
        *widths_of(HEADERS[:1], [cells.run]),
        *widths_of(repeating, list(zip(*cells.blocks.values())) or [()] * len(repeating)),
        *widths_of(HEADERS[7:], [cells.processed, cells.files, cells.reasons]),
    ]


def listing_lines(cells: ListingCells, widths: Sequence[int], with_instrument: bool) -> list[str]:
    """One line per run at these widths (of every column; at least each cell's): the
    repeating block of each distinct key padded once, then one format per run."""
    block_widths = list(widths[_REPEATING])
    blocks = cells.blocks
    if not with_instrument:
        block_widths = block_widths[1:]
        blocks = {key: block[1:] for key, block in blocks.items()}
    block_template = row_template(block_widths, set())
    block_text = {key: block_template % block for key, block in blocks.items()}
    line = GAP.join(["%%-%ds" % widths[0], "%s", *("%%-%ds" % w for w in widths[7:])])
    runs = zip(cells.run, map(block_text.__getitem__, cells.keys), cells.processed, cells.files, cells.reasons)
    return list(map(str.rstrip, map(line.__mod__, runs)))


def decision_word(decision: str | None, superseded_by: int | None) -> str:
    """The decision in effect; else "replaced" when a newer version of the file replaced the
    run; else "-"."""
    if decision:
        return decision
    return REPLACED if superseded_by is not None else UNDECIDED


def _repeating_keys(runs: RunColumns) -> list[tuple[Hashable, ...]]:
    """Each run's instrument, version, status, verdict, decision word (`decision_word`, for
    every run at once) and species: few distinct among many runs."""
    words = dict.fromkeys(runs.replaced, REPLACED)
    words.update(runs.decided)
    decision = map(words.get, runs.run_id, repeat(UNDECIDED))
    return list(zip(runs.instrument, runs.version, runs.status, runs.verdict, decision, runs.species))


def _repeating_cells(key: tuple[Hashable, ...]) -> tuple[str, ...]:
    """The cells of one key, as the table shows them (outside text made terminal-safe)."""
    instrument, version, status, verdict, decision, species = key
    return (safe_text(instrument or "-"), f"v{version}", str(status), str(verdict or "-"), str(decision),
            safe_text(species or "-"))


def _reason_texts(runs: RunColumns) -> list[str]:
    """A processed run's main reasons on one line; another run's error (terminal-safe)."""
    line_of = {reasons: reasons_line(reasons) for reasons in set(runs.reasons)}
    texts = list(map(line_of.__getitem__, runs.reasons))
    for at in compress(range(len(texts)), map("processed".__ne__, runs.status)):
        texts[at] = runs.error[at] or ""
    return safe_column(texts)


def _columns(cells: ListingCells, with_instrument: bool) -> list[Sequence[str]]:
    """The table's columns cell by cell (for `column_table`)."""
    blocks = list(map(cells.blocks.__getitem__, cells.keys))
    repeating: list[Sequence[str]] = [list(map(itemgetter(i), blocks)) for i in range(len(HEADERS[_REPEATING]))]
    return _shown([cells.run, *repeating, cells.processed, cells.files, cells.reasons], with_instrument)


def _shown(items: Sequence[_Item], with_instrument: bool) -> list[_Item]:
    """The items of the columns shown, one per column of HEADERS: the instrument's only when
    some run has one."""
    return [item for at, item in enumerate(items) if with_instrument or at != INSTRUMENT]
