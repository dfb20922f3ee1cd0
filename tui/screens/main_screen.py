"""The main screen: the live run list on top, the selected run's spectrum, lines, constants and checks below.

Ledger reads and writes, file reads and reprocessing run in thread workers that post messages
(tui/messages.py); the handlers here are the only code that changes widgets.
"""
from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from rich.markup import escape
from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.screen import Screen
from textual.worker import Worker, WorkerState
from textual.widgets import DataTable, Footer, Static, TabbedContent, TabPane

from processing.safe_text import safe_text
from processing.station.ledger_postgres import is_server_url
from processing.station.events import (
    ClaimResumed,
    FileSeen,
    LedgerOffline,
    LedgerOnline,
    FileSettled,
    FileUnchanged,
    FileVanished,
    RunFailed,
    RunProcessed,
    RunSpooled,
    StationProblem,
    StationStarted,
    StationStopped,
)
from processing.station.ledger import RunRecord
from processing.station.redo import RedoRequest
from tui import bindings
from tui.messages import (
    DecisionRecorded,
    ReportExported,
    ReprocessFinished,
    RunDetailLoaded,
    RunsLoaded,
    SpectrumLoaded,
    StationEventReceived,
)
from tui.widgets.cells import decision_text, verdict_text
from tui.widgets.run_tables import ChecksTable, ConstantsTable, LinesTable, RunList
from tui.widgets.spectrum_plot import PlotLine, SpectrumPlot

if TYPE_CHECKING:
    from tui.app import BandwatchApp

# events that put a file among those being worked on, and those that take it off
STARTS_WORK = (FileSeen, FileSettled, ClaimResumed)
ENDS_WORK = (RunProcessed, RunFailed, FileVanished, FileUnchanged, RunSpooled)
CHANGES_RUN_LIST = (*STARTS_WORK, RunProcessed, RunFailed, FileVanished, StationProblem, RunSpooled, LedgerOnline)


def short_error(run: RunRecord | None) -> str | None:
    """The run's error without the file's path in front (the path is in the run list)."""
    if run is None or not run.error:
        return None
    error = str(run.error)
    path = safe_text(run.path)
    if error.startswith(path):
        error = error[len(path):].lstrip(":0123456789 ") or error
    return safe_text(error)


def file_changed_text(run: RunRecord, now: str | None) -> str:
    """The plot's message when a run's file no longer holds the version that was analysed."""
    return safe_text(
        f"{run.name} has changed since run {run.run_id} analysed it (sha256 {str(now)[:12]}… now, "
        f"{str(run.sha256)[:12]}… then): not drawn with that run's markers; redo the run (r) or wait "
        "for the station to record the new version"
    )


class MainScreen(Screen[None]):
    """Runs newest first; the details of the highlighted one."""

    BINDINGS = bindings.MAIN

    def __init__(self) -> None:
        super().__init__()
        self.runs: dict[int, RunRecord] = {}  # run list records, read without their results
        self.detail: RunRecord | None = None  # the selected run, with its result
        self.jump_to: int | None = None  # a run to select once the run list holds it
        self.view_window: tuple[float, float] | None = None  # the plot's zoom, kept across runs
        self.busy_paths: list[str] = []
        self.problems: dict[str, str] = {}  # path -> what the station said when it could not record it
        self.selected_run_id: int | None = None
        self.excluded: dict[int, set[float]] = {}
        self.station_state = "no station"
        self.last_event = ""
        self.ledger_state = ""  # "ledger offline (N spooled)" while the ledger server is away
        self.instrument_filter: str | None = None  # show one instrument's runs (None: all)
        self.instruments: tuple[str, ...] = ()  # every instrument with runs in the ledger

    @property
    def bw(self) -> BandwatchApp:
        return self.app  # type: ignore[return-value]

    def compose(self) -> ComposeResult:
        yield Static(id="title-bar")
        yield RunList(id="runs")
        yield Static(id="run-summary")
        with TabbedContent(id="details"):
            with TabPane("1 Plot", id="tab-plot"):
                yield SpectrumPlot(id="plot")
            with TabPane("2 Lines", id="tab-lines"):
                yield LinesTable(id="lines")
            with TabPane("3 Constants", id="tab-constants"):
                yield ConstantsTable(id="constants")
                yield Static(id="constant-detail", classes="detail-line")
            with TabPane("4 Checks", id="tab-checks"):
                yield ChecksTable(id="checks")
                yield Static(id="check-detail", classes="detail-line")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.update_title()
        self.query_one(RunList).focus()
        self.load_runs()

    # ------------------------------------------------------------ title and summary

    def update_title(self) -> None:
        folder = self.bw.export_dir or "(no folder watched)"
        parts = [f"bandwatch  {folder}", self.station_state]
        if self.ledger_state:
            parts.append(self.ledger_state)
        if self.instrument_filter is not None:
            parts.append(f"instrument {safe_text(self.instrument_filter)} only")
        if self.busy_paths:
            parts.append(f"working on {len(self.busy_paths)}")
        if self.last_event:
            parts.append(self.last_event)
        self.query_one("#title-bar", Static).update(Text("  ·  ".join(parts), no_wrap=True, overflow="ellipsis"))

    def update_summary(self) -> None:
        summary = self.query_one("#run-summary", Static)
        run = self.runs.get(self.selected_run_id) if self.selected_run_id is not None else None
        if run is None:
            summary.update(Text("no run selected", style="dim"))
            return
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(f"run {run.run_id} ", style="bold")
        text.append(f"{safe_text(run.name)} v{run.version}  ")
        text.append_text(verdict_text(run.status, run.verdict))
        text.append("  ")
        text.append_text(decision_text(run.decision))
        if run.decision:
            who = f" by {run.operator}" if run.operator else ""
            reason = f": {run.decision_reason}" if run.decision_reason else ""
            text.append(f"{who}{reason}")
        if run.settings:
            text.append("  (redone with changed settings)", style="italic")
        summary.update(text)

    # ------------------------------------------------------------ workers (no widgets touched)

    @work(thread=True, exclusive=True, group="runs", exit_on_error=False)
    def load_runs(self) -> None:
        from processing.station.ledger import instruments, list_runs, open_ledger

        conn = open_ledger(self.bw.ledger_location)
        try:
            runs = list_runs(conn, limit=self.bw.run_limit, with_result=False, instrument=self.instrument_filter)
            names = tuple(instruments(conn))
        finally:
            conn.close()
        self.post_message(RunsLoaded(runs, names))

    @work(thread=True, exclusive=True, group="detail", exit_on_error=False)
    def load_detail(self, run_id: int) -> None:
        from processing.station.ledger import get_run, open_ledger

        conn = open_ledger(self.bw.ledger_location)
        try:
            run = get_run(conn, run_id)
        finally:
            conn.close()
        if run is not None:
            self.post_message(RunDetailLoaded(run))

    @work(thread=True, exclusive=True, group="spectrum", exit_on_error=False)
    def load_spectrum(self, run: RunRecord) -> None:
        """The run's spectrum for the plot, re-read with the station's limits: only a processed
        run's file, only a regular file and never one in the data folder, through the same
        bounded readers (a few bytes cannot make this process allocate gigabytes); and only the
        version the run analysed (its sha256): a file rewritten since is said so, never drawn
        under the old version's markers."""
        from processing.errors import SpectrumFileError
        from processing.readers import read_any
        from processing.regular_files import ReadPolicy
        from processing.spectrum import Spectrum

        run_id, path = run.run_id, run.path
        if run.status != "processed":
            self.post_message(SpectrumLoaded(run_id, None, None, safe_text(run.error or f"{run.status}: nothing to draw")))
            return
        policy = ReadPolicy(forbidden=(str(Path(self.bw.data_dir).resolve()),))
        try:
            data = read_any(path, policy=policy)
        except SpectrumFileError as problem:
            self.post_message(SpectrumLoaded(run_id, None, None, str(problem)))
            return
        except MemoryError:
            self.post_message(SpectrumLoaded(run_id, None, None, f"{safe_text(Path(path).name)} is too large to draw here"))
            return
        if run.sha256 is not None and data.meta.sha256 != run.sha256:
            self.post_message(SpectrumLoaded(run_id, None, None, file_changed_text(run, data.meta.sha256)))
            return
        if not isinstance(data, Spectrum):
            self.post_message(SpectrumLoaded(run_id, None, None, f"{safe_text(Path(path).name)} is a line list: no spectrum to draw"))
            return
        self.post_message(SpectrumLoaded(run_id, data.wavenumber_cm1, data.absorbance, None))

    @work(thread=True, group="ledger-write", exit_on_error=False)
    def write_decision(self, run_id: int, action: str, reason: str) -> None:
        from processing.station.ledger import open_ledger, record_decision, undo_last_decision

        conn = open_ledger(self.bw.ledger_location)
        try:
            if action == "undo":
                event = undo_last_decision(conn, run_id, self.bw.operator)
                problem = None if event is not None else "nothing to undo for this run"
            else:
                record_decision(conn, run_id, action, reason, self.bw.operator)
                problem = None
        finally:
            conn.close()
        self.post_message(DecisionRecorded(run_id, action, problem))

    @work(thread=True, group="reprocess", exit_on_error=False)
    def reprocess_run(self, run_id: int, request: RedoRequest) -> None:
        outcome = self.bw.reprocess(run_id, request)
        self.post_message(ReprocessFinished(run_id, outcome.run_id, outcome.problem))

    @work(thread=True, group="export", exit_on_error=False)
    def export_report(self, run_id: int) -> None:
        path, problem = self.bw.export_report(run_id)
        self.post_message(ReportExported(run_id, path, problem))

    # ------------------------------------------------------------ message handlers

    @on(Worker.StateChanged)
    def worker_failed(self, message: Worker.StateChanged) -> None:
        """A worker that raised becomes a notification (and a message on the plot), never a crash."""
        if message.state != WorkerState.ERROR:
            return
        error = message.worker.error
        problem = f"{type(error).__name__}: {error}"
        if message.worker.group == "spectrum":
            self.query_one(SpectrumPlot).show_message(f"cannot draw this run: {problem}")
        else:
            self.notify(escape(safe_text(problem)), title=f"{message.worker.group} failed", severity="error")

    @on(RunsLoaded)
    def show_runs(self, message: RunsLoaded) -> None:
        table = self.query_one(RunList)
        # On the newest run (or none yet): follow new runs as they arrive; else stay put.
        following = self.selected_run_id is None or self.selected_run_id == max(self.runs, default=None)
        self.runs = {run.run_id: run for run in message.runs}
        keep = self.selected_run_id
        if following and message.runs:
            keep = message.runs[0].run_id
        if self.jump_to is not None and self.jump_to in self.runs:
            keep, self.jump_to = self.jump_to, None
        recorded = {run.path for run in message.runs}
        self.busy_paths = [path for path in self.busy_paths if path not in recorded]
        self.instruments = message.instruments
        # the instrument column when runs of several instruments (or a shared server) are listed
        table.show_instruments(len(message.instruments) > 1 or is_server_url(self.bw.ledger_location))
        table.fill(message.runs, self.busy_paths, keep_run_id=keep, problems=self.problems)
        if keep is None or keep not in self.runs:
            self.select_run(table.selected_run_id())
        elif keep != self.selected_run_id:
            self.select_run(keep)
        else:
            self.update_summary()
        self.update_title()

    @on(DataTable.RowHighlighted, "#runs")
    def run_highlighted(self, message: DataTable.RowHighlighted) -> None:
        table = self.query_one(RunList)
        run_id = table.selected_run_id()
        if run_id != self.selected_run_id:
            self.select_run(run_id)
        key = table.selected_key() or ""
        if run_id is None and key.startswith("problem:"):
            self.query_one("#run-summary", Static).update(Text(self.problems.get(key[8:], ""), no_wrap=True))

    def select_run(self, run_id: int | None) -> None:
        """Show the run's summary at once; its result and its file are read by workers."""
        self.selected_run_id = run_id
        self.detail = None
        run = self.runs.get(run_id) if run_id is not None else None
        self.update_summary()
        self.fill_details(None)
        plot = self.query_one(SpectrumPlot)
        if run is None:
            plot.show_message("no run selected")
            return
        if plot.window is not None:
            self.view_window = plot.window  # kept for the next run: compare one region across runs
        plot.show_message(f"reading {run.name} …", loading_run_id=run.run_id)
        self.load_detail(run.run_id)
        self.load_spectrum(run)

    def fill_details(self, run: RunRecord | None) -> None:
        """Lines, constants and checks of `run` (None: empty panes)."""
        result = run.result if run is not None else None
        excluded = self.excluded.get(run.run_id, set()) if run is not None else set()
        self.query_one(LinesTable).fill(result.lines if result else (), excluded)
        self.query_one(ConstantsTable).fill(result.bands if result else (), result.constants if result else ())
        checks = self.query_one(ChecksTable)
        checks.fill(result.checks if result else (), short_error(run))
        self.query_one("#check-detail", Static).update(Text(checks.details[0] if checks.details else ""))
        constants = self.query_one(ConstantsTable)
        self.query_one("#constant-detail", Static).update(Text(constants.details[0] if constants.details else ""))

    @on(RunDetailLoaded)
    def show_detail(self, message: RunDetailLoaded) -> None:
        if message.run.run_id != self.selected_run_id:
            return
        self.detail = message.run
        self.fill_details(message.run)
        self.query_one(SpectrumPlot).set_lines(self.plot_lines(message.run.run_id))

    def plot_lines(self, run_id: int) -> list[PlotLine]:
        run = self.detail if self.detail is not None and self.detail.run_id == run_id else None
        lines = run.result.lines if run is not None and run.result is not None else ()
        excluded = self.excluded.get(run_id, set())
        return [PlotLine.from_result_line(line, line.key in excluded) for line in lines]

    @on(SpectrumLoaded)
    def show_spectrum(self, message: SpectrumLoaded) -> None:
        if message.run_id != self.selected_run_id:
            return
        plot = self.query_one(SpectrumPlot)
        if message.x is None or message.y is None:
            plot.show_message(message.problem or "no spectrum")
            return
        previous = self.view_window
        full = (float(message.x[0]), float(message.x[-1]))
        keep = previous if previous and full[0] <= previous[0] < previous[1] <= full[1] else None
        plot.show(message.x, message.y, self.plot_lines(message.run_id), keep)

    @on(DataTable.RowHighlighted, "#checks")
    def check_highlighted(self, message: DataTable.RowHighlighted) -> None:
        """The highlighted check's whole reason, wrapped (the table cell may be cut off)."""
        table = self.query_one(ChecksTable)
        detail = table.details[message.cursor_row] if message.cursor_row < len(table.details) else ""
        self.query_one("#check-detail", Static).update(Text(detail))

    @on(DataTable.RowHighlighted, "#constants")
    def constant_highlighted(self, message: DataTable.RowHighlighted) -> None:
        """The highlighted quantity against its reference, in words (source, rule, sigma)."""
        table = self.query_one(ConstantsTable)
        detail = table.details[message.cursor_row] if message.cursor_row < len(table.details) else ""
        self.query_one("#constant-detail", Static).update(Text(detail))

    @on(LinesTable.ExclusionsChanged)
    def exclusions_changed(self, message: LinesTable.ExclusionsChanged) -> None:
        if self.selected_run_id is None:
            return
        self.excluded[self.selected_run_id] = set(message.table.excluded)
        self.query_one(SpectrumPlot).set_lines(self.plot_lines(self.selected_run_id))

    @on(StationEventReceived)
    def station_event(self, message: StationEventReceived) -> None:
        event = message.event
        self.last_event = safe_text(event.plain())
        if isinstance(event, StationStarted):
            self.station_state = "station running"
        elif isinstance(event, StationStopped):
            self.station_state = "station stopped"
        elif isinstance(event, LedgerOffline):
            self.ledger_state = "ledger offline"
        elif isinstance(event, RunSpooled):
            self.ledger_state = f"ledger offline ({event.waiting} spooled)"
        elif isinstance(event, LedgerOnline):
            self.ledger_state = ""
        if isinstance(event, STARTS_WORK):
            if event.path not in self.busy_paths:
                self.busy_paths.append(event.path)
            self.problems.pop(event.path, None)
        if isinstance(event, ENDS_WORK) and event.path in self.busy_paths:
            self.busy_paths.remove(event.path)
        if isinstance(event, StationProblem):
            for path in event.paths:
                if path in self.busy_paths:
                    self.busy_paths.remove(path)
                    self.problems[path] = event.message
        if isinstance(event, RunFailed):
            self.notify(escape(self.last_event), title="run failed", severity="error")
        elif isinstance(event, LedgerOffline):
            self.notify(escape(self.last_event), title="ledger offline", severity="warning", timeout=10)
        elif isinstance(event, StationProblem):
            self.notify(escape(self.last_event), title="station", severity="warning")
        if isinstance(event, CHANGES_RUN_LIST):
            self.load_runs()
        else:
            self.update_title()

    @on(DecisionRecorded)
    def decision_recorded(self, message: DecisionRecorded) -> None:
        if message.problem:
            self.notify(escape(safe_text(message.problem)), severity="warning")
        else:
            self.notify(f"run {message.run_id}: {message.action} recorded", timeout=2)
        self.load_runs()

    @on(ReprocessFinished)
    def reprocess_finished(self, message: ReprocessFinished) -> None:
        if message.problem:
            self.notify(escape(safe_text(message.problem)), title=f"redo of run {message.run_id}", severity="error")
            return
        self.notify(f"run {message.run_id} redone as run {message.new_run_id}", timeout=3)
        self.jump_to = message.new_run_id
        self.load_runs()

    @on(ReportExported)
    def report_exported(self, message: ReportExported) -> None:
        if message.problem:
            self.notify(escape(safe_text(message.problem)), title="export", severity="error")
        else:
            self.notify(escape(safe_text(f"report written: {message.path}")), title="export", timeout=4)

    # ------------------------------------------------------------ actions

    def _current_run(self) -> RunRecord | None:
        if self.selected_run_id is None:
            self.notify("no run selected", severity="warning", timeout=2)
            return None
        return self.runs.get(self.selected_run_id)

    def action_accept(self) -> None:
        run = self._current_run()
        if run is not None:
            self.write_decision(run.run_id, "accept", "")

    def action_flag(self) -> None:
        from tui.screens.modals import FlagReasonScreen

        run = self._current_run()
        if run is None:
            return

        def flagged(reason: str | None) -> None:
            if reason:
                self.write_decision(run.run_id, "flag", reason)

        self.app.push_screen(FlagReasonScreen(run.name), flagged)

    def action_undo(self) -> None:
        run = self._current_run()
        if run is not None:
            self.write_decision(run.run_id, "undo", "")

    def action_reprocess(self) -> None:
        from tui.screens.modals import ReprocessScreen

        run = self._current_run()
        if run is None:
            return
        if self.detail is not None and self.detail.run_id == run.run_id:
            run = self.detail  # with its result: the redo dialog offers the run's bands
        excluded = sorted(self.excluded.get(run.run_id, set()), reverse=True)

        def chosen(request: RedoRequest | None) -> None:
            if request is not None:
                self.notify(escape(f"redoing {safe_text(run.name)} …"), timeout=2)
                self.reprocess_run(run.run_id, request)

        self.app.push_screen(ReprocessScreen(run, excluded), chosen)

    def action_export(self) -> None:
        run = self._current_run()
        if run is not None:
            self.export_report(run.run_id)

    def action_history(self) -> None:
        from tui.screens.history_screen import HistoryScreen

        run = self.detail if self.detail is not None and self.detail.run_id == self.selected_run_id else None
        preferred = None
        if self.query_one(TabbedContent).active == "tab-constants":
            preferred = self.query_one(ConstantsTable).selected_quantity()
        self.app.push_screen(HistoryScreen(run.result if run else None, self.bw.ledger_location, preferred))

    def action_cycle_instrument(self) -> None:
        """Show one instrument's runs, then the next, ..., then all again."""
        choices: list[str | None] = [None, *self.instruments]
        position = choices.index(self.instrument_filter) if self.instrument_filter in choices else 0
        self.instrument_filter = choices[(position + 1) % len(choices)]
        shown = "all instruments" if self.instrument_filter is None else f"instrument {self.instrument_filter} only"
        self.notify(escape(safe_text(f"showing {shown}")), timeout=2)
        self.update_title()
        self.load_runs()

    def action_next_run(self) -> None:
        self.query_one(RunList).action_cursor_down()

    def action_previous_run(self) -> None:
        self.query_one(RunList).action_cursor_up()

    def action_show_tab(self, tab: str) -> None:
        self.query_one(TabbedContent).active = tab
        pane = self.query_one(f"#{tab}", TabPane)
        target = pane.query("SpectrumPlot, DataTable").first()
        target.focus()

    def action_focus_runs(self) -> None:
        self.query_one(RunList).focus()
