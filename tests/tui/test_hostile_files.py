"""The interface against hostile files: a few-byte JCAMP-DX bomb as the newest run (the plot
re-reads it: bounded, refused in a moment, not gigabytes), file names carrying escape sequences
and Rich/Textual markup (shown literally, never interpreted)."""
from __future__ import annotations

import resource
import sys
import time
from pathlib import Path
from typing import Any

from rich.text import Text

from processing.station.events import FileSeen, StationProblem
from processing.station.ledger import open_ledger, record_run
from tui.app import BandwatchApp
from tui.messages import StationEventReceived
from tui.widgets.run_tables import RunList
from tui.widgets.spectrum_plot import SpectrumPlot

from tui_support import hcl_result, quiet

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: shared hostile inputs
from hostile_inputs import BOMB  # noqa: E402

SIZE = (80, 24)
ESC = "\x1b"


def _peak_kb() -> int:
    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)


async def test_selecting_a_run_whose_file_became_a_bomb_is_bounded(lab: dict[str, Path]) -> None:
    """The ledger says processed; the file on the share was then replaced by the bomb. Auto-
    selecting the newest run once made the interface allocate 5.45 GB re-reading it."""
    bomb = lab["export"] / "zz_newest.jdx"
    bomb.write_bytes(BOMB)
    conn = open_ledger(lab["data"])
    record_run(conn, str(bomb), "0" * 64, "processed", result=hcl_result(str(bomb), 2885.98),
               received_at="2026-03-05T13:00:00.000Z", processed_at="2026-03-05T13:00:00.000Z")
    conn.close()
    before = _peak_kb()
    started = time.monotonic()
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await quiet(pilot)
        plot = app.screen.query_one(SpectrumPlot)
        assert "NPOINTS=99999999 is more than" in str(plot.render())
    assert time.monotonic() - started < 10
    assert _peak_kb() - before < 1024 * 1024  # KB: well under 1 GB more than before


async def test_file_names_with_escape_sequences_and_markup_are_shown_literally(lab: dict[str, Path]) -> None:
    hostile = lab["export"] / f"[bold red]run[@click=app.quit]x{ESC}[2J.csv"  # markup, an action, an escape
    conn = open_ledger(lab["data"])
    record_run(conn, str(hostile), None, "unreadable", error=f"{hostile}: file is empty",
               received_at="2026-03-05T13:00:00.000Z", processed_at="2026-03-05T13:00:00.000Z")
    conn.close()
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    notes: list[Any] = []
    async with app.run_test(size=SIZE) as pilot:
        await quiet(pilot)
        table = app.screen.query_one(RunList)
        shown = str(table.get_cell_at((0, table.get_column_index("file"))))
        literal = "[bold red]run[@click=app.quit]x\\x1b[2J.csv"
        assert table.row_cells[0][1]["file"].plain == literal
        # too long for the column at 80x24: cut with an ellipsis, still literal
        assert shown == literal or (shown.endswith("…") and literal.startswith(shown[:-1]) and len(shown) > 12)
        # a station problem quoting the name: a notification, literally, not a markup error
        app.screen.post_message(StationEventReceived(StationProblem(f"could not record {hostile}: disk full")))
        app.screen.post_message(StationEventReceived(FileSeen(str(lab["export"] / f"b{ESC}]0;t\x07.csv"))))
        await quiet(pilot)
        notes = [Text.from_markup(note.message).plain for note in app._notifications]
        assert any("[bold red]run[@click=app.quit]x\\x1b[2J.csv: disk full" in note for note in notes), notes
        title = str(app.screen.query_one("#title-bar").render())
        assert ESC not in title and "\x07" not in title
