"""The interface with several instruments and with a ledger server: the instrument column and
its filter, the trend across instruments, "ledger offline" in the title, and deciding on a
server (Textual Pilot, 80x24)."""
from __future__ import annotations

from pathlib import Path
from typing import Any

from processing.station.events import LedgerOffline, LedgerOnline, RunSpooled
from processing.station.ledger import adopt_unnamed_runs, decision_history, list_runs, open_ledger, record_run
from tui.app import BandwatchApp
from tui.messages import StationEventReceived
from tui.screens.history_screen import HistoryScreen, HistoryTable
from tui.screens.main_screen import MainScreen
from tui.widgets.run_tables import RunList

from tui_support import hcl_result, quiet

SIZE = (80, 24)


def cell(table: Any, row: int, column: str) -> str:
    return str(table.get_cell_at((row, table.get_column_index(column))))


def _second_instrument(data: Path, export: Path) -> None:
    """The lab's runs become ftir-1's; one more run of the same HCl cell from ftir-2."""
    conn = open_ledger(data)
    adopt_unnamed_runs(conn, "ftir-1")
    path = str(export / "hcl_cell_01.csv")  # the same name on another instrument: another file
    # H35Cl 1-0 origin 2885.98 cm-1 (Huber & Herzberg 1979 via NIST WebBook, recalled), as the lab's runs
    record_run(conn, path, "9" * 64, "processed", result=hcl_result(path, 2885.990), instrument="ftir-2",
               received_at="2026-03-05T12:00:00.000Z", processed_at="2026-03-05T12:00:00.000Z")
    conn.close()


async def test_run_list_shows_and_filters_instruments(lab: dict[str, Path]) -> None:
    _second_instrument(lab["data"], lab["export"])
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await quiet(pilot)
        table = app.screen.query_one(RunList)
        assert table.with_instrument
        assert [cell(table, row, "instrument") for row in range(table.row_count)] == ["ftir-2"] + ["ftir-1"] * 4
        assert sum(column.width for column in table.columns.values()) + 2 * len(table.columns) <= 80
        await pilot.press("I")
        await quiet(pilot)
        assert [cell(table, row, "instrument") for row in range(table.row_count)] == ["ftir-1"] * 4
        assert "instrument ftir-1 only" in str(app.screen.query_one("#title-bar").render())
        await pilot.press("I")
        await quiet(pilot)
        assert [cell(table, row, "file") for row in range(table.row_count)] == ["hcl_cell_01.csv"]
        await pilot.press("I")
        await quiet(pilot)
        assert table.row_count == 5


async def test_one_instrument_keeps_the_run_list_as_it_was(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await quiet(pilot)
        table = app.screen.query_one(RunList)
        assert not table.with_instrument and "instrument" not in [str(c.label) for c in table.columns.values()]


async def test_trend_shows_one_quantity_for_several_instruments(lab: dict[str, Path]) -> None:
    _second_instrument(lab["data"], lab["export"])
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await quiet(pilot)
        await pilot.press("j", "j", "t")  # a processed HCl run, then its trend
        await quiet(pilot)
        assert isinstance(app.screen, HistoryScreen)
        table = app.screen.query_one(HistoryTable)
        names = [str(table.get_cell_at((row, 1))) for row in range(table.row_count)]
        assert sorted(names) == ["ftir-1", "ftir-1", "ftir-1", "ftir-2"]
        assert "on 2 instruments" in str(app.screen.query_one("#history-title").render())
        await pilot.press("I")
        await quiet(pilot)
        assert table.row_count == 3 and "on ftir-1" in str(app.screen.query_one("#history-title").render())
        await pilot.press("I")
        await quiet(pilot)
        assert table.row_count == 1


async def test_ledger_offline_shows_in_the_title_until_the_server_is_back(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await quiet(pilot)
        screen = app.screen
        assert isinstance(screen, MainScreen)
        screen.post_message(StationEventReceived(LedgerOffline("postgresql://station@db/bw", "unreachable")))
        screen.post_message(StationEventReceived(RunSpooled(str(lab["export"] / "x.csv"), "processed", 3)))
        await quiet(pilot)
        title = str(screen.query_one("#title-bar").render())
        assert "ledger offline (3 spooled)" in title
        screen.post_message(StationEventReceived(LedgerOnline("postgresql://station@db/bw", 3)))
        await quiet(pilot)
        assert "ledger offline" not in str(screen.query_one("#title-bar").render())


async def test_the_interface_on_a_ledger_server_lists_and_decides(lab: dict[str, Path], pg_url: str) -> None:
    from processing.station.ledger_copy import copy_ledger

    copy_ledger(lab["data"], pg_url, "ftir-1")
    app = BandwatchApp(lab["data"], lab["export"], operator="tester", ledger_location=pg_url)
    async with app.run_test(size=SIZE) as pilot:
        await quiet(pilot)
        table = app.screen.query_one(RunList)
        assert table.row_count == 4 and table.with_instrument  # a shared server: whose runs, always
        await pilot.press("j", "a")
        await quiet(pilot)
    conn = open_ledger(pg_url)
    accepted = [r for r in list_runs(conn) if r.decision == "accept"]
    assert len(accepted) == 1 and accepted[0].operator == "tester"
    assert [e.action for e in decision_history(conn, accepted[0].run_id)] == ["accept"]
