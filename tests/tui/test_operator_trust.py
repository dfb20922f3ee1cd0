"""The operator can trust what the screen says (Pilot, 80x24 and 120x40): the newest run's
own spectrum region, reasons beside the verdict, decisions made elsewhere shown within 2 s,
deciding over another person's decision only when confirmed, waiting files said, the redo
describing itself, and the small things an operator sees.

Runs here are real analyses of the bundled sample runs (sample_runs/, their truth in the
*.truth.json beside each): an HCl cell after a service (calibration shift, fringes), a DCl
cell partly exchanged back to HCl, a saturated HCl cell.
"""
from __future__ import annotations

import shutil
import time
from pathlib import Path
from typing import Any

import pytest

from processing.pipeline import ProcessSettings, process_file
from processing.results import RunResult
from processing.station.events import FileSeen, FileWaiting, RunProcessed
from processing.station.ledger import decision_history, list_runs, open_ledger, record_run
from tui.app import BandwatchApp
from tui.cli import main as cli_main
from tui.messages import StationEventReceived
from tui.screens.main_screen import MainScreen
from tui.screens.modals import ConfirmScreen, ReprocessScreen
from tui.widgets.run_tables import ChecksTable, ConstantsTable, LinesTable, RunList
from tui.widgets.spectrum_plot import SpectrumPlot

from tui_support import hcl_result_json, quiet

SAMPLES = Path(__file__).resolve().parents[2] / "sample_runs"
SMALL, LARGE = (80, 24), (120, 40)
STAMPS = ("2026-03-05T14:00:00.000Z", "2026-03-05T14:30:00.000Z", "2026-03-05T15:00:00.000Z")
D35CL_ORIGIN = 2090.78  # cm-1, D35Cl 1-0 band origin, Huber & Herzberg 1979 via NIST WebBook, recalled from memory


@pytest.fixture(scope="module")
def analysed() -> dict[str, RunResult]:
    """The sample runs analysed once, by the real pipeline with default settings."""
    names = ("1500_hcl_after_service.jdx", "0930_dcl_exchanged.jdx", "1040_hcl_saturated.jdx")
    return {name: process_file(str(SAMPLES / name), ProcessSettings()) for name in names}


def make_sample_lab(root: Path, analysed: dict[str, RunResult], names: tuple[str, ...]) -> dict[str, Path]:
    """export/ with copies of the sample files, data/ with their runs (oldest first)."""
    export, data = root / "export", root / "data"
    export.mkdir(parents=True)
    conn = open_ledger(data)
    for name, stamp in zip(names, STAMPS):
        record(conn, export, analysed, name, stamp)
    conn.close()
    return {"export": export, "data": data}


def record(conn: Any, export: Path, analysed: dict[str, RunResult], name: str, stamp: str | None = None) -> int:
    shutil.copy(SAMPLES / name, export / name)
    result = analysed[name]
    from dataclasses import replace

    run = record_run(conn, str(export / name), result.sha256, "processed", result=replace(result, file=str(export / name)),
                     received_at=stamp, processed_at=stamp)
    return run.run_id


def main_screen(app: BandwatchApp) -> MainScreen:
    return next(s for s in app.screen_stack if isinstance(s, MainScreen))


def summary_text(app: BandwatchApp) -> str:
    return str(main_screen(app).query_one("#run-summary").render())


async def wait_for(pilot: Any, condition: Any, seconds: float) -> float:
    """Pause until `condition()` holds; how long it took (fails after `seconds`)."""
    started = time.monotonic()
    while not condition():
        assert time.monotonic() - started < seconds, "condition not met in time"
        await pilot.pause(0.05)
    return time.monotonic() - started


# ---------------------------------------------------------------- 1 the right spectrum


async def test_a_dcl_run_after_a_zoomed_hcl_run_is_shown_at_its_own_band(tmp_path: Path, analysed: dict[str, RunResult]) -> None:
    lab = make_sample_lab(tmp_path, analysed, ("1500_hcl_after_service.jdx",))
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        await pilot.press("1", "plus", "plus")  # the HCl band, zoomed in
        plot = app.screen.query_one(SpectrumPlot)
        hcl_window = plot.window
        assert hcl_window is not None and hcl_window[0] > 2600
        conn = open_ledger(lab["data"])
        new = record(conn, lab["export"], analysed, "0930_dcl_exchanged.jdx")
        conn.close()
        path = str(lab["export"] / "0930_dcl_exchanged.jdx")
        app.screen.post_message(StationEventReceived(RunProcessed(new, 1, path, "processed", "warn", ("D35Cl",))))
        await quiet(pilot)
        assert main_screen(app).selected_run_id == new  # on the newest run: it follows
        low, high = plot.window
        assert low < D35CL_ORIGIN < high, (plot.window, hcl_window)  # the DCl band is on screen
        assert f"run {new} 0930_dcl_exchanged.jdx" in plot.render().plain  # and the plot says whose it is


# ---------------------------------------------------------------- 2 reasons at a glance


@pytest.mark.parametrize("size", [SMALL, LARGE])
async def test_the_run_line_carries_the_verdict_and_its_main_reasons_uncut(
    tmp_path: Path, analysed: dict[str, RunResult], size: tuple[int, int]
) -> None:
    lab = make_sample_lab(tmp_path, analysed, ("1500_hcl_after_service.jdx",))
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=size) as pilot:
        await quiet(pilot)
        summary = main_screen(app).query_one("#run-summary")
        text = " ".join(str(summary.render()).split())
        # sample_runs/1500_hcl_after_service.truth.json: lines 0.24 cm-1 high, fringes of
        # 0.01 in transmittance = 0.004 A; the temperature cannot be measured (thick lines)
        assert "! WARN calibration +0.24 cm-1 · fringes 0.004 A · n/a: temperature" in text
        # wrapped, never cut: the lines the text needs at this width are all shown
        needed = len(summary.render().wrap(summary.size.width))
        assert needed <= summary.size.height, (needed, summary.size)
        table = app.screen.query_one(RunList)
        if size == LARGE:  # a wide terminal also has them in the run list
            assert "calibration +0.24 cm-1" in str(table.get_row_at(0)[table.get_column_index("reasons")])
        await pilot.press("4")
        checks = app.screen.query_one(ChecksTable)
        calibration = next(c for c in analysed["1500_hcl_after_service.jdx"].checks if c.name == "calibration")
        row = next(r for r in range(checks.row_count) if str(checks.get_row_at(r)[1]) == "calibration")
        # the whole reason is in its cell, wrapped over as many lines as it needs
        assert str(checks.get_row_at(row)[2]) == calibration.detail
        assert checks.ordered_rows[row].height > 1


# ---------------------------------------------------------------- 3 the interface follows the ledger


async def test_a_flag_from_the_command_line_shows_within_2_s_and_accepting_over_it_asks(
    tmp_path: Path, analysed: dict[str, RunResult]
) -> None:
    lab = make_sample_lab(tmp_path, analysed, ("1500_hcl_after_service.jdx",))
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        run_id = main_screen(app).selected_run_id
        assert run_id is not None
        await pilot.pause(0.7)  # the first poll has learnt where the ledger stands
        table = app.screen.query_one(RunList)
        assert str(table.get_row_at(0)[table.get_column_index("decision")]) == "pending"
        code = cli_main(["ledger", "flag", str(run_id), "--reason", "cell leak", "--operator", "alice",
                         "--data", str(lab["data"])])
        assert code == 0
        took = await wait_for(
            pilot, lambda: str(table.get_row_at(0)[table.get_column_index("decision")]) == "FLAGGED", 2.0)
        assert took < 2.0
        await wait_for(pilot, lambda: "by alice: cell leak" in summary_text(app), 2.0)
        await pilot.press("a")
        await wait_for(pilot, lambda: isinstance(app.screen, ConfirmScreen), 2.0)
        question = str(app.screen.query_one("#question").render())
        assert "flagged by alice" in question and "cell leak" in question and "Both decisions stay on record" in question
        await pilot.press("n")  # no: nothing recorded
        await quiet(pilot)
        await pilot.press("a")
        await wait_for(pilot, lambda: isinstance(app.screen, ConfirmScreen), 2.0)
        await pilot.press("y")
        await quiet(pilot)
        await wait_for(pilot, lambda: str(table.get_row_at(0)[table.get_column_index("decision")]) == "accepted", 2.0)
    conn = open_ledger(lab["data"])
    trail = decision_history(conn, run_id)
    conn.close()
    assert [(e.action, e.operator) for e in trail] == [("flag", "alice"), ("accept", "tester")]
    assert "over flag by alice" in trail[1].reason


async def test_an_accept_raced_by_someone_elses_flag_is_not_recorded_silently(
    tmp_path: Path, analysed: dict[str, RunResult]
) -> None:
    """The screen still says pending (the poll has not run): the ledger's own check asks."""
    lab = make_sample_lab(tmp_path, analysed, ("1500_hcl_after_service.jdx",))
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        run_id = main_screen(app).selected_run_id
        conn = open_ledger(lab["data"])
        from processing.station.ledger import record_decision

        record_decision(conn, run_id, "flag", "baseline drift", "alice")
        conn.close()
        await pilot.press("a")
        await wait_for(pilot, lambda: isinstance(app.screen, ConfirmScreen), 2.0)
        await pilot.press("escape")
        await quiet(pilot)
    conn = open_ledger(lab["data"])
    assert [e.action for e in decision_history(conn, run_id)] == ["flag"]
    conn.close()


# ---------------------------------------------------------------- 5 a file not yet whole


async def test_a_file_the_station_waits_for_says_so_not_busy(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        path = str(lab["export"] / "still_writing.jdx")
        screen = app.screen
        screen.post_message(StationEventReceived(FileSeen(path)))
        screen.post_message(StationEventReceived(FileWaiting(path, "JCAMP-DX file has no ##END= (still being written?)", 30.0)))
        await quiet(pilot)
        table = screen.query_one(RunList)
        assert str(table.get_row_at(0)[table.get_column_index("verdict")]) == "… WAITING"
        table.move_cursor(row=0)
        await pilot.pause()
        text = " ".join(summary_text(app).split())
        assert "still_writing.jdx: waiting for the file to finish: JCAMP-DX file has no ##END=" in text
        assert "recorded unreadable after 30 s" in text


# ---------------------------------------------------------------- 6 colour


async def test_without_colour_the_cursor_is_reversed_and_the_selected_run_marked(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester", monochrome=True)
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        assert app.no_color
        table = app.screen.query_one(RunList)
        assert table.get_component_rich_style("datatable--cursor").reverse
        await pilot.press("j")
        await quiet(pilot)
        times = [str(table.get_row_at(r)[table.get_column_index("time")]) for r in range(table.row_count)]
        assert [t[0] for t in times] == [" ", "▸", " ", " "]  # a sign, not a colour


def test_no_color_and_monochrome_terminals_are_recognised() -> None:
    from tui.app import monochrome_terminal

    assert monochrome_terminal({"NO_COLOR": "1", "TERM": "xterm-256color"})
    assert monochrome_terminal({"TERM": "xterm-mono"})
    assert not monochrome_terminal({"TERM": "xterm-256color"})


# ---------------------------------------------------------------- 7 redo describes itself


async def test_a_redo_says_what_changed_and_the_old_version_says_it_was_replaced(
    tmp_path: Path, analysed: dict[str, RunResult]
) -> None:
    lab = make_sample_lab(tmp_path, analysed, ("1500_hcl_after_service.jdx",))
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")  # no station: the same redo here
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        original = main_screen(app).selected_run_id
        await pilot.press("2", "x")  # exclude the highest line
        lines = app.screen.query_one(LinesTable)
        [excluded] = lines.excluded
        await pilot.press("r")
        await wait_for(pilot, lambda: isinstance(app.screen, ReprocessScreen), 2.0)
        await pilot.press("ctrl+s")
        await wait_for(pilot, lambda: isinstance(app.screen, MainScreen) and main_screen(app).selected_run_id != original, 30)
        await quiet(pilot)
        screen = main_screen(app)
        new = screen.selected_run_id
        text = " ".join(summary_text(app).split())
        assert f"redo of run {original}: species H35Cl, H37Cl; 1 line excluded by the operator ({excluded:.4f} cm-1)" in text
        lines = app.screen.query_one(LinesTable)
        row = next(i for i, line in enumerate(lines.lines) if line.key == excluded)
        assert str(lines.get_row_at(row)[lines.get_column_index("assignment")]) == "x excluded"
        assert "excluded by the operator" in lines.detail(row) and "noise" not in lines.detail(row)
        table = screen.query_one(RunList)
        old_row = table.get_row_index(str(original))
        assert str(table.get_row_at(old_row)[table.get_column_index("decision")]) == "replaced"
        table.move_cursor(row=old_row)
        await quiet(pilot)
        assert f"replaced by run {new} (v2)" in summary_text(app)


# ---------------------------------------------------------------- 8 small but visible


async def test_constants_cursor_stays_visible_at_80x24(tmp_path: Path, analysed: dict[str, RunResult]) -> None:
    lab = make_sample_lab(tmp_path, analysed, ("0930_dcl_exchanged.jdx",))
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        await pilot.press("3")
        table = app.screen.query_one(ConstantsTable)
        assert table.row_count > 20  # more rows than the pane holds
        assert list(table.columns.values())[0].label.plain == "isotopologue"  # not "isotope"
        for _ in range(table.row_count - 1):
            await pilot.press("j")
            await pilot.pause()
            cursor_y = table.region.y + 1 + table.cursor_row - int(table.scroll_y)  # + the header row
            assert table.region.y + 1 <= cursor_y < table.region.bottom, (table.cursor_row, table.scroll_y)
            assert table.region.bottom <= app.screen.query_one("#constant-detail").region.y
        detail = str(app.screen.query_one("#constant-detail").render())
        assert detail and len(max(detail.split(), key=len)) < 30  # no 20-digit floats


async def test_tab_cycles_the_panes_and_shift_tab_goes_back(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        seen = []
        for _ in range(5):
            await pilot.press("tab")
            seen.append(type(app.focused).__name__)
        assert seen == ["SpectrumPlot", "LinesTable", "ConstantsTable", "ChecksTable", "RunList"]
        await pilot.press("shift+tab")
        assert type(app.focused).__name__ == "ChecksTable"


@pytest.mark.parametrize("size", [SMALL, LARGE])
async def test_lines_pane_columns_fit_the_width(lab: dict[str, Path], size: tuple[int, int]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=size) as pilot:
        await quiet(pilot)
        await pilot.press("j", "2")
        table = app.screen.query_one(LinesTable)
        widths = {str(c.key.value): c.width for c in table.columns.values()}
        assert sum(w + 2 for w in widths.values()) <= size[0]
        assert {"obs", "assignment", "residual", "note"} <= set(widths)
        if size == LARGE:
            assert {"height", "snr", "confidence", "flags", "calc", "sigma"} <= set(widths)
            assert widths["note"] >= 25  # "water vapour line" and more, not cut at 18
        detail = str(app.screen.query_one("#line-detail").render())
        assert "height 0.5 A" in detail and "H35Cl 1-0 R(3)" in detail  # everything, also at 80
        await pilot.press("z")  # zoom to this line: the plot, centred on it
        plot = app.screen.query_one(SpectrumPlot)
        assert plot.has_focus
        top_line = table.lines[0].position.value
        low, high = plot.window
        assert low < top_line < high and high - low < 20


async def test_run_list_keeps_the_verdict_at_60x20_and_the_plot_draws_at_40x12(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=(60, 20)) as pilot:
        await quiet(pilot)
        table = app.screen.query_one(RunList)
        keys = [str(c.key.value) for c in table.columns.values()]
        assert "verdict" in keys and "decision" in keys
        assert sum(c.width + 2 for c in table.columns.values()) <= 60
        assert str(table.get_row_at(1)[table.get_column_index("verdict")]) == "✔ PASS"
        assert str(table.get_row_at(1)[table.get_column_index("species")]) == "HCl"  # molecules, whole
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=(40, 12)) as pilot:
        await quiet(pilot)
        await pilot.press("j")
        await quiet(pilot)
        plot = app.screen.query_one(SpectrumPlot)
        assert not plot.is_loading_for(main_screen(app).selected_run_id)
        assert "reading" not in plot.render().plain


async def test_constrained_equal_centrifugal_terms_are_said(tmp_path: Path) -> None:
    from tui_support import make_lab

    lab = make_lab(tmp_path)
    path = str(lab["export"] / "hcl_common_d.csv")
    data = hcl_result_json(path, 2885.98)
    # one common D fitted for both levels (H35Cl D ~5.3e-4 cm-1, Huber & Herzberg 1979 via
    # NIST WebBook, recalled from memory)
    data["bands"][0].update({"d_model": "common D", "D_upper": {"value": 5.3e-4, "sigma": 2e-5},
                             "D_lower": {"value": 5.3e-4, "sigma": 2e-5}})
    conn = open_ledger(lab["data"])
    record_run(conn, path, "4" * 64, "processed", result=RunResult.from_dict(data))
    conn.close()
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        await pilot.press("3")
        table = app.screen.query_one(ConstantsTable)
        labels = [str(table.get_row_at(r)[1]) for r in range(table.row_count)]
        assert "D'=D'' cm-1 1-0" in labels and "D'' cm-1 1-0" not in labels
        row = labels.index("D'=D'' cm-1 1-0")
        assert "constrained equal" in table.details[row]


async def test_saturated_lines_are_marked_in_the_plot(tmp_path: Path, analysed: dict[str, RunResult]) -> None:
    lab = make_sample_lab(tmp_path, analysed, ("1040_hcl_saturated.jdx",))
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=LARGE) as pilot:
        await quiet(pilot)
        rows = app.screen.query_one(SpectrumPlot).render().plain.splitlines()
        sat = next(row for row in rows if row.startswith("sat"))
        saturated = sum(1 for line in analysed["1040_hcl_saturated.jdx"].lines if line.saturated)
        assert 0 < sat.count("s") - 1 <= saturated  # one mark per saturated line (neighbours may share a cell)


async def test_the_trend_marks_flagged_runs(lab: dict[str, Path]) -> None:
    from processing.station.ledger import record_decision
    from tui.screens.history_screen import HistoryScreen, HistoryTable

    conn = open_ledger(lab["data"])
    flagged = next(r for r in list_runs(conn) if r.name == "hcl_cell_02.csv")
    record_decision(conn, flagged.run_id, "flag", "leak", "alice")
    conn.close()
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SMALL) as pilot:
        await quiet(pilot)
        await pilot.press("j", "t")
        await quiet(pilot)
        assert isinstance(app.screen, HistoryScreen)
        table = app.screen.query_one(HistoryTable)
        states = [str(table.get_row_at(r)[5]) for r in range(table.row_count)]
        assert states == ["", "FLAGGED", ""]
        plot = app.screen.query_one("#trend").render().plain.splitlines()
        assert plot[-2].split() == ["F"]
        assert "reference" in str(app.screen.query_one("#history-title").render())
