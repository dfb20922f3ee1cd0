"""`bandwatch ledger list` of a long ledger on two cores.

Listing 100,000 runs is mostly Python's work on each run's cells (reading the rows, local
times, padding), one core's worth. Where the system can fork, a listing of many runs is made
in two processes: this one reads and formats the newer half of the runs, a child the older
half, each through its own connection. They swap their column widths so both halves are padded
to the widths of the whole table; this process writes the header and its lines, then lets the
child write its own lines after them. The text is the same as `listing_table` of all the runs.

This process takes the smaller share of the runs (NEWER_SHARE): it also finds the decisions in
effect and the replaced runs of the whole listing, which both halves need, and sends them to the
child while the child reads its runs. If the child fails before it writes (it cannot reach the
ledger, say), this process makes the older half itself; nothing is left out.
"""
from __future__ import annotations

import contextlib
import os
import pickle
import struct
import sys
import threading
from dataclasses import replace
from typing import IO, TYPE_CHECKING, Union

from processing.listing_table import ListingCells, column_widths, listing_cells, listing_header, listing_lines

if TYPE_CHECKING:
    from processing.station.ledger import Connection, WholeListing

# The parent's share of the runs: it also finds the decisions in effect and the replaced runs
# (a query over the whole table) while the child reads its share.
NEWER_SHARE = 0.4
SPLIT_FROM_RUNS = 20_000  # run ids spanned; fewer: one process is as quick (a fork and a second connection cost ~20 ms)
ONE_PROCESS_VARIABLE = "BANDWATCH_LIST_ONE_PROCESS"  # set (non-empty): every listing by one process
_FRAME = struct.Struct("!I")  # the length of each pickled message between the two processes


def can_split(conn: Connection, instrument: str | None, out: IO[str]) -> tuple[int, int] | None:
    """The first and last run id of the listing when it spans enough runs to be made in two
    processes, on a system that can fork, written to a file both can write to (`out` has a
    file descriptor: not a capture in memory); None otherwise."""
    if not hasattr(os, "fork") or sys.platform != "linux" or os.environ.get(ONE_PROCESS_VARIABLE):
        return None
    try:
        out.fileno()
    except (OSError, ValueError):  # io.UnsupportedOperation is an OSError
        return None
    mine = " WHERE instrument = ?" if instrument is not None else ""
    first, last = conn.execute(f"SELECT MIN(run_id), MAX(run_id) FROM runs{mine}",
                               (instrument,) if instrument is not None else ()).fetchone()
    if first is None or int(last) - int(first) + 1 < SPLIT_FROM_RUNS:
        return None
    return int(first), int(last)


def write_in_halves(where: str, conn: Connection, span: tuple[int, int], out: IO[str], *,
                    latest_only: bool = False, instrument: str | None = None) -> bool:
    """Write the listing of the runs in `span` (`can_split`) to `out`: the newer half made
    here (through `conn`), the older half by a child process reading the ledger at `where`.
    True when the child made its half; False when it failed and this process made it."""
    from processing.station.ledger import LedgerError, is_server_url, list_run_columns, shown_url, whole_listing

    first, last = span
    middle = last - int((last - first + 1) * NEWER_SHARE)
    older_range, newer_range = (first, middle), (middle + 1, last)
    out.flush()  # nothing buffered is written twice
    to_parent, from_child = _pipe()
    to_child, from_parent = _pipe()
    child = os.fork()
    if child == 0:
        to_child.close()
        from_child.close()
        _child(where, older_range, latest_only, instrument, to_parent, from_parent, out)
    to_parent.close()
    from_parent.close()
    try:
        # the decisions in effect and the replaced runs, once for both halves, while the child reads its runs
        whole = whole_listing(conn, latest_only=latest_only, instrument=instrument)
        # sent by a thread: more than a pipe holds waits for the child, which reads it once it
        # has read its runs, while this process reads its own
        sender = threading.Thread(target=_send_quietly, args=(to_child, whole), name="listing-send", daemon=True)
        sender.start()
        older, newer = (older_range, whole), (newer_range, whole)
        cells = listing_cells(list_run_columns(conn, latest_only=latest_only, instrument=instrument, part=newer))
        sender.join()
        theirs = _receive(from_child)
        if not isinstance(theirs, tuple):  # the child could not make its half: made here
            older_cells = listing_cells(list_run_columns(conn, latest_only=latest_only, instrument=instrument, part=older))
            widths, with_instrument = _merged((column_widths(cells), cells.with_instrument),
                                              (column_widths(older_cells), older_cells.with_instrument))
            _write_lines(out, [*listing_header(widths, with_instrument), *listing_lines(cells, widths, with_instrument),
                               *listing_lines(older_cells, widths, with_instrument)])
            return False
        widths, with_instrument = _merged((column_widths(cells), cells.with_instrument), theirs)
        _send(to_child, (widths, with_instrument))
        _write_lines(out, [*listing_header(widths, with_instrument), *listing_lines(cells, widths, with_instrument)])
        out.flush()
        _send(to_child, "write")  # the child's lines come after these
        if _receive(from_child) not in ("written", "reader gone"):
            shown = shown_url(where) if is_server_url(where) else where
            raise LedgerError(f"{shown}: the older half of the listing could not be written")
        return True
    finally:
        for end in (to_child, from_child):
            with contextlib.suppress(OSError):  # what a child that is gone did not read
                end.close()
        os.waitpid(child, 0)


def _child(where: str, span: tuple[int, int], latest_only: bool, instrument: str | None,
           to_parent: IO[bytes], from_parent: IO[bytes], out: IO[str]) -> None:
    """The child's part: the lines of the older half, written when the parent says so. It
    never touches the parent's connection, and leaves by os._exit (no clean-up of the parent's
    objects, no second flush of anything)."""
    status = 1
    try:
        from processing.station.ledger import WholeListing, list_run_columns, open_ledger

        conn = open_ledger(where, read_only=True)
        runs = list_run_columns(conn, latest_only=latest_only, instrument=instrument, part=(span, WholeListing({}, {})))
        conn.close()
        whole = _receive(from_parent)  # the decisions in effect and replaced runs, from the parent
        if not isinstance(whole, WholeListing):
            return  # the parent is gone or failed: nothing to write
        cells: ListingCells = listing_cells(replace(runs, decided=whole.decided, replaced=whole.replaced))
        _send(to_parent, (column_widths(cells), cells.with_instrument))
        table = _receive(from_parent)  # the widths of the whole table, and its instrument column
        if not isinstance(table, tuple):
            return  # the parent is gone or failed: nothing to write
        lines = listing_lines(cells, *table)
        if _receive(from_parent) == "write":
            try:
                _write_lines(out, lines)
                out.flush()
            except BrokenPipeError:  # the reader went away (`| head`): nothing more to write
                _send(to_parent, "reader gone")
            else:
                _send(to_parent, "written")
            status = 0
    except BaseException:  # noqa: BLE001 - whatever it was, the parent makes the half or says it failed
        with contextlib.suppress(OSError):  # the parent may be gone already
            _send(to_parent, None)
    finally:
        os._exit(status)


def _merged(mine: tuple[list[int], bool], theirs: tuple[list[int], bool]) -> tuple[list[int], bool]:
    """The widths and instrument column of the whole table from those of its halves."""
    return [max(a, b) for a, b in zip(mine[0], theirs[0])], mine[1] or theirs[1]


def _write_lines(out: IO[str], lines: list[str]) -> None:
    if lines:
        out.write("\n".join(lines) + "\n")


def _pipe() -> tuple[IO[bytes], IO[bytes]]:
    """A pipe's (write end, read end), as binary files."""
    read_fd, write_fd = os.pipe()
    return os.fdopen(write_fd, "wb"), os.fdopen(read_fd, "rb")


# between the two processes: the whole listing's decisions and replaced runs; a half's (column
# widths, with an instrument column); "write", "written"; None when a process failed
Message = Union["WholeListing", tuple[list[int], bool], str, None]


def _send_quietly(end: IO[bytes], message: Message) -> None:
    """`_send`, to a child that may be gone already (its half is then made by the parent)."""
    with contextlib.suppress(OSError):
        _send(end, message)


def _send(end: IO[bytes], message: Message) -> None:
    data = pickle.dumps(message)
    end.write(_FRAME.pack(len(data)) + data)
    end.flush()


def _receive(end: IO[bytes]) -> Message:
    """The next message; None when the other process is gone."""
    head = end.read(_FRAME.size)
    if len(head) < _FRAME.size:
        return None
    message: Message = pickle.loads(end.read(_FRAME.unpack(head)[0]))
    return message
