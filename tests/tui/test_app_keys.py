"""Drive the interface by keys (Textual Pilot, 80x24) and check widgets and the ledger."""
from __future__ import annotations

import threading
from pathlib import Path
from typing import Any

from processing.pipeline import ProcessSettings, RunResult
from processing.station.events import FileSeen, RunProcessed
from processing.station.ledger import decision_history, get_run, list_runs, open_ledger
from tui.app import BandwatchApp
from tui.messages import StationEventReceived
from tui.screens.help_screen import HelpScreen
from tui.screens.history_screen import HistoryScreen, HistoryTable
from tui.screens.main_screen import MainScreen
from tui.screens.modals import FlagReasonScreen, ReprocessScreen
from tui.widgets.run_tables import LinesTable, RunList

from tui_support import quiet

SIZE = (80, 24)


async def settle(app: BandwatchApp, pilot: Any) -> None:
    """Let workers finish and their messages be handled (see conftest.quiet)."""
    await quiet(pilot)


def runs_by_name(data: Path) -> dict[str, Any]:
    conn = open_ledger(data)
    try:
        return {run.name: run for run in list_runs(conn)}
    finally:
        conn.close()


def cell(table: RunList, row: int, column: str) -> str:
    return str(table.get_cell_at((row, table.get_column_index(column))))


async def test_run_list_is_newest_first_with_verdict_words(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        table = app.screen.query_one(RunList)
        names = [cell(table, row, "file") for row in range(table.row_count)]
        assert names == ["empty_scan.csv", "hcl_cell_03.csv", "hcl_cell_02.csv", "hcl_cell_01.csv"]
        # status in words and symbols, not colour alone
        assert [cell(table, row, "verdict") for row in range(4)] == ["✘ UNREADABLE", "✔ PASS", "! WARN", "✔ PASS"]
        assert cell(table, 1, "decision") == "pending"


async def test_accept_then_undo_are_two_ledger_events(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j")  # from the unreadable run to hcl_cell_03
        await settle(app, pilot)
        assert isinstance(app.screen, MainScreen)
        target = app.screen.selected_run_id
        await pilot.press("a")
        await settle(app, pilot)
        table = app.screen.query_one(RunList)
        assert cell(table, 1, "decision") == "accepted"
        conn = open_ledger(lab["data"])
        run = get_run(conn, target)
        assert run is not None and run.name == "hcl_cell_03.csv"
        assert (run.decision, run.operator) == ("accept", "tester")
        await pilot.press("u")
        await settle(app, pilot)
        assert get_run(conn, target).decision is None  # type: ignore[union-attr]
        assert [event.action for event in decision_history(conn, target)] == ["accept", "undo"]
        conn.close()
        assert cell(table, 1, "decision") == "pending"


async def test_flag_asks_for_a_reason_and_records_it(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j", "j")  # hcl_cell_02 (the WARN run)
        await pilot.press("f")
        await pilot.pause()
        assert isinstance(app.screen, FlagReasonScreen)
        await pilot.press("enter")  # an empty reason is refused: the dialog stays
        await pilot.pause()
        assert isinstance(app.screen, FlagReasonScreen)
        await pilot.press(*"cell leak [slow]")
        await pilot.press("enter")
        await settle(app, pilot)
        assert isinstance(app.screen, MainScreen)
    run = runs_by_name(lab["data"])["hcl_cell_02.csv"]
    assert (run.decision, run.decision_reason, run.operator) == ("flag", "cell leak [slow]", "tester")


async def test_escape_cancels_a_flag(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j", "f", *"oops", "escape")
        await settle(app, pilot)
        assert isinstance(app.screen, MainScreen)
    assert runs_by_name(lab["data"])["hcl_cell_03.csv"].decision is None


class RecordingProcess:
    """Stands in for the pipeline: records what it was asked, returns a processed result."""

    def __init__(self, release: threading.Event | None = None) -> None:
        self.calls: list[tuple[str, ProcessSettings]] = []
        self.release = release

    def __call__(self, path: str, settings: ProcessSettings) -> RunResult:
        self.calls.append((path, settings))
        if self.release is not None:
            assert self.release.wait(20), "test never released the slow processing"
        return RunResult(file=path, status="processed", sha256="1" * 64, verdict="warn")


async def test_reprocess_with_changed_settings_records_a_new_version(lab: dict[str, Path]) -> None:
    process = RecordingProcess()
    app = BandwatchApp(lab["data"], lab["export"], operator="tester", process_function=process)
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j")  # hcl_cell_03
        original = app.screen.selected_run_id
        await pilot.press("2")  # lines pane
        lines = app.screen.query_one(LinesTable)
        assert lines.has_focus
        await pilot.press("x")  # exclude the top line (highest wavenumber: R(3))
        excluded = set(lines.excluded)
        assert len(excluded) == 1
        await pilot.press("r")
        await pilot.pause()
        assert isinstance(app.screen, ReprocessScreen)
        await pilot.press("ctrl+u", *"H35Cl, H37Cl")  # replace the species field
        await pilot.press("tab")  # to the branch renumbering choice
        await pilot.press("space", "down", "enter")  # first option after "no J renumbering"
        await pilot.pause()
        assert isinstance(app.screen, ReprocessScreen)  # picking an option does not send
        await pilot.press("enter")  # Enter on the closed drop-down redoes, as the dialog says
        await settle(app, pilot)
        assert isinstance(app.screen, MainScreen)
        new_id = app.screen.selected_run_id
    assert len(process.calls) == 1
    path, settings = process.calls[0]
    assert Path(path).name == "hcl_cell_03.csv"
    assert settings.species == ("H35Cl", "H37Cl")
    assert [tuple(offset) for offset in settings.j_offsets] == [("H35Cl", 1, 0, "P", 1)]
    assert settings.excluded_positions_cm1 == tuple(sorted(excluded))
    conn = open_ledger(lab["data"])
    new = get_run(conn, new_id)
    conn.close()
    assert new is not None and new.reprocessed_from == original and new.version == 2
    assert new.settings is not None
    assert new.settings["species"] == ["H35Cl", "H37Cl"]
    assert new.settings["excluded_positions_cm1"] == sorted(excluded)
    assert new.settings["j_offsets"] == [["H35Cl", 1, 0, "P", 1]]


async def test_keys_still_move_the_cursor_while_a_slow_file_is_processed(lab: dict[str, Path]) -> None:
    release = threading.Event()
    process = RecordingProcess(release)
    app = BandwatchApp(lab["data"], lab["export"], operator="tester", process_function=process)
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j", "r")
        await pilot.pause()
        await pilot.press("ctrl+s")  # redo with the settings as they are: the slow call starts
        await pilot.pause()
        busy = [w for w in app.workers if w.group == "reprocess" and w.is_running]
        assert busy, "the redo should still be running"
        table = app.screen.query_one(RunList)
        table.focus()
        before = table.cursor_row
        await pilot.press("j")
        await pilot.pause()
        assert table.cursor_row == before + 1
        await pilot.press("k")
        await pilot.pause()
        assert table.cursor_row == before
        assert busy[0].is_running  # the keys were answered while the work was still going on
        release.set()
        await settle(app, pilot)
    assert len(process.calls) == 1


async def test_station_events_show_a_busy_row_then_the_new_run(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        screen = app.screen
        new_file = str(lab["export"] / "hcl_cell_04.csv")
        screen.post_message(StationEventReceived(FileSeen(new_file)))
        await settle(app, pilot)
        table = screen.query_one(RunList)
        assert cell(table, 0, "file") == "hcl_cell_04.csv"
        assert cell(table, 0, "verdict") == "… WORKING"
        screen.post_message(
            StationEventReceived(RunProcessed(9, 1, new_file, "unreadable", None, (), error="empty"))
        )
        await settle(app, pilot)
        assert table.row_count == 4  # busy row gone; nothing new was recorded in the ledger
        assert "working on" not in str(screen.query_one("#title-bar").render())


async def test_help_lists_the_keys_and_closes(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        text = str(app.screen.query_one("#help-text").render())
        for expected in ("Accept", "Flag", "Undo", "ctrl+q", "Exclude or include", "Flip axis", "{ }  fourth"):
            assert expected in text
        await pilot.press("escape")
        await pilot.pause()
        assert isinstance(app.screen, MainScreen)


async def test_trend_screen_shows_the_band_origin_over_the_day(lab: dict[str, Path]) -> None:
    from processing.station.ledger import record_run

    from tui_support import hcl_result_json

    # An overtone run of the same isotopologue: its 2-0 origin must not join the 1-0 trend.
    overtone_path = str(lab["export"] / "hcl_overtone.csv")
    overtone_json = hcl_result_json(overtone_path, 5667.98)  # H35Cl 2-0 origin, same source as conftest
    overtone_json["bands"][0]["v_upper"] = 2
    overtone = RunResult.from_dict(overtone_json)
    conn = open_ledger(lab["data"])
    record_run(conn, overtone_path, "3" * 64, "processed", result=overtone,
               received_at="2026-03-05T11:00:00.000Z", processed_at="2026-03-05T11:00:00.000Z")
    conn.close()
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j", "j", "t")  # hcl_cell_03 (below the unreadable run and the overtone)
        await settle(app, pilot)
        assert isinstance(app.screen, HistoryScreen)
        table = app.screen.query_one(HistoryTable)
        assert table.row_count == 3
        # the fixture's origins drift by +0.004 and +0.011 cm-1 over the day
        deltas = [str(table.get_cell_at((row, 4))) for row in range(3)]
        assert deltas == ["0.0000", "0.0040", "0.0110"]
        await pilot.press("escape")
        await pilot.pause()
        assert isinstance(app.screen, MainScreen)


async def test_export_writes_the_report_outside_the_export_folder(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j", "a")
        await settle(app, pilot)
        await pilot.press("e")
        await settle(app, pilot)
    reports = list((lab["data"] / "reports").rglob("report.txt"))
    assert len(reports) == 1
    text = reports[0].read_text(encoding="utf-8")
    assert "hcl_cell_03.csv" in text and "accept" in text and "H35Cl 1-0 R(3)" in text
    figure = reports[0].with_name("figure.svg").read_text(encoding="utf-8")  # the figure beside it
    assert "hcl_cell_03.csv" in figure and ">R(3)<" in figure
    assert sorted(p.name for p in lab["export"].iterdir()) == [
        "empty_scan.csv", "hcl_cell_01.csv", "hcl_cell_02.csv", "hcl_cell_03.csv"
    ]


async def test_selection_follows_new_runs_only_from_the_newest(lab: dict[str, Path]) -> None:
    from processing.station.ledger import record_run

    from tui_support import hcl_result

    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        screen = app.screen
        assert isinstance(screen, MainScreen)
        newest = screen.selected_run_id

        async def new_run(name: str) -> int:
            path = str(lab["export"] / name)
            conn = open_ledger(lab["data"])
            run = record_run(conn, path, "2" * 64, "processed", result=hcl_result(path, 2885.99))
            conn.close()
            screen.post_message(StationEventReceived(RunProcessed(run.run_id, 1, path, "processed", "pass", ("H35Cl",))))
            await settle(app, pilot)
            return run.run_id

        first = await new_run("hcl_cell_05.csv")
        assert first != newest and screen.selected_run_id == first  # was on the newest: follows
        await pilot.press("j", "j")  # move down to an older run
        older = screen.selected_run_id
        await new_run("hcl_cell_06.csv")
        assert screen.selected_run_id == older  # reading an older run: stays put


async def test_keys_can_be_remapped_by_binding_id(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        app.set_keymap({"run.accept": "y", "table.down": "s"})
        await settle(app, pilot)
        await pilot.press("s", "y")  # down to hcl_cell_03, then accept with the new keys
        await settle(app, pilot)
    assert runs_by_name(lab["data"])["hcl_cell_03.csv"].decision == "accept"


async def test_plot_zooms_pans_and_flips_by_keys(lab: dict[str, Path]) -> None:
    from tui.widgets.spectrum_plot import SpectrumPlot

    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j")  # hcl_cell_03
        await settle(app, pilot)
        await pilot.press("1")
        plot = app.screen.query_one(SpectrumPlot)
        assert plot.has_focus
        # a run is first shown at its own band: its assigned lines with a margin, not the
        # whole 2700-3100 cm-1 file (the fixture's lines: 2885.98 - 6B'' ... 2885.98 + 8B'')
        lowest, highest = 2885.98 - 6 * 10.44 - 0.002, 2885.98 + 8 * 10.44 + 0.003
        low, high = plot.window
        assert low < lowest and highest < high and high - low < 1.3 * (highest - lowest), plot.window
        await pilot.press("0")
        assert plot.window == (2700.0, 3100.0), plot._message  # the fixture's whole range
        await pilot.press("plus")
        assert plot.window == (2800.0, 3000.0)  # half the width about the centre
        await pilot.press("left")  # falling axis: the screen's left is higher wavenumber
        assert plot.window == (2850.0, 3050.0)
        await pilot.press("l", "l", "l", "l", "l")  # pan right stops at the low end
        assert plot.window == (2700.0, 2900.0)
        await pilot.press("x")
        assert plot.high_to_low is False
        await pilot.press("0")
        assert plot.window == (2700.0, 3100.0)
        rendered = plot.render().plain
        assert "low→high" in rendered and "H35Cl" in rendered
        await pilot.press("plus")
        await pilot.press("w", "j")  # the next run keeps the zoomed window, to compare one region
        await settle(app, pilot)
        assert app.screen.selected_run_id == 2 and plot.window == (2800.0, 3000.0)


async def test_keys_file_remaps_and_a_bad_file_is_one_clear_message(lab: dict[str, Path], tmp_path: Path,
                                                                     monkeypatch: Any) -> None:
    import pytest

    from processing.errors import ConfigError
    from tui.keymap import load_keymap

    keys = tmp_path / "keys.toml"
    keys.write_text('"run.accept" = "y"\n"table.down" = "s,down"\n', encoding="utf-8")
    monkeypatch.setenv("BANDWATCH_KEYS", str(keys))
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("s", "y")
        await settle(app, pilot)
    assert runs_by_name(lab["data"])["hcl_cell_03.csv"].decision == "accept"
    keys.write_text('"run.acept" = "y"\n', encoding="utf-8")
    with pytest.raises(ConfigError) as caught:
        load_keymap(keys)
    assert str(keys) in str(caught.value) and "run.acept" in str(caught.value)


async def test_constants_pane_shows_reference_and_deviation(lab: dict[str, Path]) -> None:
    from tui.widgets.run_tables import ConstantsTable

    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await settle(app, pilot)
        await pilot.press("j", "3")
        await settle(app, pilot)
        table = app.screen.query_one(ConstantsTable)
        rows = {str(table.get_cell_at((r, 1))): r for r in range(table.row_count)}
        b_e = rows["B_e cm-1"]
        # an older result: its Δ/σ was against the effective reference, so that is the value
        # shown beside it (never a number the Δ/σ was not computed against)
        assert [str(table.get_cell_at((b_e, c))).strip() for c in (2, 3, 4, 5)] == [
            "10.59340", "±0.00060", "10.59360", "-0.3"
        ]
        assert str(table.get_cell_at((rows["alpha_e cm-1"], 4))).strip() == "0.30720"
        # a band origin beside the reference for its band model, Δ/σ against it, `!` beyond 3
        origin = rows["origin cm-1 1-0"]
        assert [str(table.get_cell_at((origin, c))).strip() for c in (4, 5)] == ["2885.9862", "!+4.0"]
        for _ in range(b_e):
            await pilot.press("j")
        await settle(app, pilot)
        detail = str(app.screen.query_one("#constant-detail").render())
        assert "reference 10.5936: -0.3 σ" in detail and "handbook 10.593416 (library)" in detail
