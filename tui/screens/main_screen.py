"""The main screen: the live run list on top, the selected run's spectrum, lines, constants and checks below.

Ledger reads and writes, file reads and reprocessing run in thread workers that post messages
(tui/messages.py); the handlers here are the only code that changes widgets.
"""
from __future__ import annotations

import time
from typing import TYPE_CHECKING

from rich.markup import escape
from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.screen import Screen
from textual.worker import Worker, WorkerState, get_current_worker
from textual.widgets import DataTable, Footer, Static, TabbedContent, TabPane

from processing.result_text import reasons_line, redo_description
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
    FileWaiting,
    RunFailed,
    RunProcessed,
    RunSpooled,
    StationProblem,
    StationStarted,
    StationStopped,
)
from processing.station.ledger import DecisionEvent, RunRecord
from processing.station.redo import RedoRequest
from tui import bindings
from tui.messages import (
    DecisionConflict,
    DecisionRecorded,
    LedgerChanged,
    ReportExported,
    ReprocessFinished,
    RunDetailLoaded,
    RunsLoaded,
    SpectrumLoaded,
    StationEventReceived,
)
from tui.widgets.cells import decision_text, verdict_text
from tui.widgets.run_tables import ChecksTable, ConstantsTable, LinesTable, RunList, ZoomRequested, short_reason
from tui.widgets.spectrum_plot import PlotLine, SpectrumPlot, choose_window

if TYPE_CHECKING:
    from tui.app import BandwatchApp

# events that put a file among those being worked on, and those that take it off
STARTS_WORK = (FileSeen, FileSettled, ClaimResumed, FileWaiting)
ENDS_WORK = (RunProcessed, RunFailed, FileVanished, FileUnchanged, RunSpooled)
CHANGES_RUN_LIST = (
    *STARTS_WORK, RunProcessed, RunFailed, FileVanished, FileUnchanged, StationProblem, RunSpooled, LedgerOnline,
)
LEDGER_POLL_SECONDS = 0.5  # decisions made elsewhere (another operator, the command line) show within a second
LEDGER_FEED_GROUP = "ledger-feed"  # the worker that follows the ledger for as long as the screen is there
PANES = ("runs", "tab-plot", "tab-lines", "tab-constants", "tab-checks")  # the order `tab` goes through


def decision_words(event: DecisionEvent) -> str:
    """"flagged by alice at 10:42:07: cell leak"."""
    from processing.local_time import clock

    done = {"accept": "accepted", "flag": "flagged", "undo": "undone"}.get(event.action, event.action)
    reason = f": {event.reason}" if event.reason else ""
    return safe_text(f"{done} by {event.operator or 'someone'} at {clock(event.at)}{reason}")


def band_regions(run: RunRecord | None) -> dict[str, tuple[float, float]]:
    """(lowest, highest) assigned line of each band of the run, by "ISO v'-v''"."""
    regions: dict[str, tuple[float, float]] = {}
    result = run.result if run is not None else None
    for line in result.lines if result is not None else ():
        assigned = line.assigned
        if assigned is None:
            continue
        key = f"{assigned.isotopologue} {assigned.v_upper}-{assigned.v_lower}"
        x = float(line.position.value)
        low, high = regions.get(key, (x, x))
        regions[key] = (min(low, x), max(high, x))
    return regions


class MainScreen(Screen[None]):
    """Runs newest first; the details of the highlighted one."""

    BINDINGS = bindings.MAIN
    # a short terminal (under 20 rows) gives the panes below the run list what room it has
    VERTICAL_BREAKPOINTS = [(0, "-short"), (20, "-tall")]

    def __init__(self) -> None:
        super().__init__()
        self.runs: dict[int, RunRecord] = {}  # run list records, read without their results
        self.detail: RunRecord | None = None  # the selected run, with its result
        self.jump_to: int | None = None  # a run to select once the run list holds it
        self.view_window: tuple[float, float] | None = None  # the plot's zoom, kept across runs
        self.busy_paths: list[str] = []
        self.waiting: dict[str, str] = {}  # path -> why the station waits for the rest of it
        self.spectrum_waiting: SpectrumLoaded | None = None  # read before the run's lines arrived
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
                yield Static(id="line-detail", classes="detail-line")
            with TabPane("3 Constants", id="tab-constants"):
                yield ConstantsTable(id="constants")
                yield Static(id="constant-detail", classes="detail-line")
            with TabPane("4 Checks", id="tab-checks"):
                yield ChecksTable(id="checks")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.update_title()
        self.query_one(RunList).focus()
        self.load_runs()
        self.follow_ledger()

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
        self.query_one("#title-bar", Static).update(Text("  ·  ".join(safe_text(p) for p in parts)))

    def update_summary(self) -> None:
        """The selected run in full, wrapped (never cut): verdict with its main reasons, the
        decision with who and why, what a redo changed, a newer version that replaced it."""
        summary = self.query_one("#run-summary", Static)
        run = self.runs.get(self.selected_run_id) if self.selected_run_id is not None else None
        if run is None:
            summary.update(Text("no run selected", style="dim"))
            return
        text = Text()
        text.append(f"run {run.run_id} ", style="bold")
        text.append(f"{safe_text(run.name)} v{run.version}")
        if run.species:
            text.append(f" ({safe_text(', '.join(run.species))})")
        text.append("  ")
        text.append_text(verdict_text(run.status, run.verdict))
        why = reasons_line(run.reasons) if run.status == "processed" else short_reason(run)
        if why:
            text.append(f" {safe_text(why)}")
        text.append("  ·  ")
        text.append_text(decision_text(run.decision, run.superseded_by is not None))
        if run.decision:
            who = f" by {run.operator}" if run.operator else ""
            reason = f": {run.decision_reason}" if run.decision_reason else ""
            text.append(safe_text(f"{who}{reason}"))
        if run.reprocessed_from is not None:
            text.append(safe_text(f"  ·  redo of run {run.reprocessed_from}: {redo_description(run.settings)}"), style="italic")
        if run.superseded_by is not None:
            newer = self.runs.get(run.superseded_by)
            version = f" (v{newer.version})" if newer is not None else ""
            text.append(f"  ·  replaced by run {run.superseded_by}{version}", style="italic")
        summary.update(text)

    def summary_for_file(self, key: str) -> Text:
        """The summary of a row the ledger does not hold yet (a file in progress or in trouble)."""
        state, _, path = key.partition(":")
        name = safe_text(path.rsplit("/", 1)[-1])
        if state == "problem":
            return Text(f"{name}: not recorded: {safe_text(self.problems.get(path, ''))}")
        if state == "waiting":
            return Text(f"{name}: waiting for the file to finish: {safe_text(self.waiting.get(path, ''))}")
        return Text(f"{name}: being analysed")

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

    @work(thread=True, exclusive=True, group=LEDGER_FEED_GROUP, exit_on_error=False)
    def follow_ledger(self) -> None:
        """Follow the ledger's change journal (`change_feed.ChangeFeed`) for as long as the
        screen is there: decisions and new versions from any source (the station, another
        operator's interface, `bandwatch ledger` in a shell). The file is polled every
        LEDGER_POLL_SECONDS; a server's announcement wakes the feed at once. A ledger not
        there yet (the run list's first read makes the file) or a server away is tried again;
        a feed started again says so (`first` False, no run ids), so the list is read again."""
        from processing.station.change_feed import ChangeFeed
        from processing.station.ledger import LedgerError

        worker = get_current_worker()
        feed: ChangeFeed | None = None
        started_before = False
        try:
            while not worker.is_cancelled:
                if feed is None:
                    try:
                        feed = ChangeFeed(self.bw.ledger_location, poll_seconds=LEDGER_POLL_SECONDS)
                    except LedgerError:
                        time.sleep(LEDGER_POLL_SECONDS)
                        continue
                    self.post_message(LedgerChanged([], first=not started_before))
                    started_before = True
                    continue
                try:
                    changed = feed.wait(LEDGER_POLL_SECONDS)
                except LedgerError:
                    feed.close()
                    feed = None
                    continue
                if changed:
                    self.post_message(LedgerChanged(changed))
        finally:
            if feed is not None:
                feed.close()

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
        """The run's spectrum for the plot: only the version the run analysed
        (`processing.station.run_spectrum`)."""
        from processing.station.run_spectrum import read_run_spectrum

        found = read_run_spectrum(run, self.bw.data_dir)
        self.post_message(SpectrumLoaded(run.run_id, found.x, found.y, found.problem))

    @work(thread=True, group="ledger-write", exit_on_error=False)
    def write_decision(self, run_id: int, action: str, reason: str, confirmed_over: int | None = None) -> None:
        """Accept, flag or undo; over another person's decision only once confirmed (the
        ledger checks the decision in effect now, not the one this screen last read)."""
        from processing.station.ledger import decide, open_ledger

        conn = open_ledger(self.bw.ledger_location)
        try:
            decided = decide(conn, run_id, action, reason, self.bw.operator, confirmed_over=confirmed_over)
        finally:
            conn.close()
        if decided.event is None and decided.over is not None:
            self.post_message(DecisionConflict(run_id, action, reason, decided.over))
            return
        problem = None if decided.event is not None else "nothing to undo for this run"
        self.post_message(DecisionRecorded(run_id, action, problem, decided.over))

    @work(thread=True, group="reprocess", exit_on_error=False)
    def reprocess_run(self, run_id: int, request: RedoRequest) -> None:
        outcome = self.bw.reprocess(run_id, request)
        self.post_message(ReprocessFinished(run_id, outcome.run_id, outcome.problem))

    @work(thread=True, group="export", exit_on_error=False)
    def export_report(self, run_id: int) -> None:
        path, problem, figure = self.bw.export_report(run_id)
        self.post_message(ReportExported(run_id, path, problem, figure))

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
        elif message.worker.group == "detail" and self.spectrum_waiting is not None:
            self.draw_spectrum(self.spectrum_waiting)  # without its lines, rather than not at all
            self.notify(escape(safe_text(problem)), title="detail failed", severity="error")
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
        self.busy_paths = [path for path in self.busy_paths if path not in recorded or path in self.waiting]
        self.instruments = message.instruments
        # the instrument column when runs of several instruments (or a shared server) are listed
        table.show_instruments(len(message.instruments) > 1 or is_server_url(self.bw.ledger_location))
        table.fill(message.runs, self.busy_paths, keep_run_id=keep, problems=self.problems, waiting=self.waiting)
        if keep is None or keep not in self.runs:
            self.select_run(table.selected_run_id())
        elif keep != self.selected_run_id:
            self.select_run(keep)
        else:
            self.update_summary()
        self.update_title()

    @on(LedgerChanged)
    def ledger_changed(self, message: LedgerChanged) -> None:
        """Runs changed elsewhere: the list again, and the selected run's detail if it changed."""
        if message.first:
            return
        self.load_runs()
        if self.selected_run_id in message.run_ids:
            self.load_detail(self.selected_run_id)

    @on(DataTable.RowHighlighted, "#runs")
    def run_highlighted(self, message: DataTable.RowHighlighted) -> None:
        table = self.query_one(RunList)
        run_id = table.selected_run_id()
        if run_id != self.selected_run_id:
            self.select_run(run_id)
        key = table.selected_key() or ""
        if run_id is None and ":" in key:
            self.query_one("#run-summary", Static).update(self.summary_for_file(key))

    def select_run(self, run_id: int | None) -> None:
        """Show the run's summary at once; its result and its file are read by workers."""
        self.selected_run_id = run_id
        self.detail = None
        self.spectrum_waiting = None
        run = self.runs.get(run_id) if run_id is not None else None
        self.update_summary()
        self.fill_details(None)
        plot = self.query_one(SpectrumPlot)
        if run is None:
            plot.show_message("no run selected")
            return
        if plot.window is not None:
            self.view_window = plot.window  # kept for the next run: compare one region across runs
        plot.caption = f"run {run.run_id} {safe_text(run.name)}"
        plot.show_message(f"reading {run.name} …", loading_run_id=run.run_id)
        self.load_detail(run.run_id)
        self.load_spectrum(run)

    def fill_details(self, run: RunRecord | None, regions: dict[str, tuple[float, float]] | None = None) -> None:
        """Lines, constants and checks of `run` (None: empty panes); `regions`: its
        `band_regions`, when the caller has them."""
        result = run.result if run is not None else None
        excluded = self.excluded.get(run.run_id, set()) if run is not None else set()
        by_operator = (run.settings or {}).get("excluded_positions_cm1") or () if run is not None else ()
        lines = self.query_one(LinesTable)
        lines.fill(result.lines if result else (), excluded, by_operator)
        self.query_one("#line-detail", Static).update(Text(lines.detail(lines.cursor_row)))
        constants = self.query_one(ConstantsTable)
        constants.fill(result.bands if result else (), result.constants if result else (),
                       band_regions(run) if regions is None else regions)
        self.query_one("#constant-detail", Static).update(Text(constants.details[0] if constants.details else ""))
        self.query_one(ChecksTable).fill(result.checks if result else (), short_reason(run) if run is not None else None)

    @on(RunDetailLoaded)
    def show_detail(self, message: RunDetailLoaded) -> None:
        if message.run.run_id != self.selected_run_id:
            return
        self.detail = message.run
        if message.run.run_id in self.runs:  # the freshest record (a decision made meanwhile)
            self.runs[message.run.run_id] = message.run
            self.update_summary()
        regions = band_regions(message.run)
        self.fill_details(message.run, regions)
        plot = self.query_one(SpectrumPlot)
        plot.set_lines(self.plot_lines(message.run.run_id))
        plot.bands = [(label, low, high) for label, (low, high) in regions.items()]
        waiting = self.spectrum_waiting
        if waiting is not None and waiting.run_id == message.run.run_id:
            self.draw_spectrum(waiting)

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
        if self.detail is None or self.detail.run_id != message.run_id:
            self.spectrum_waiting = message  # drawn when the run's lines are here (its view follows them)
            return
        self.draw_spectrum(message)

    def draw_spectrum(self, message: SpectrumLoaded) -> None:
        """Draw a run's spectrum with its lines, at the view `choose_window` picks."""
        self.spectrum_waiting = None
        assert message.x is not None and message.y is not None
        plot = self.query_one(SpectrumPlot)
        full = (float(message.x[0]), float(message.x[-1]))
        lines = self.plot_lines(message.run_id)
        window, why = choose_window(full, self.view_window, lines)
        plot.show(message.x, message.y, lines, window)
        plot.view_reason = why

    @on(DataTable.RowHighlighted, "#lines")
    def line_highlighted(self, message: DataTable.RowHighlighted) -> None:
        """The highlighted line in full (the columns left out at 80 columns too)."""
        self.query_one("#line-detail", Static).update(Text(self.query_one(LinesTable).detail(message.cursor_row)))

    @on(ZoomRequested)
    def zoom_requested(self, message: ZoomRequested) -> None:
        """`z` on a line or a band: the plot, zoomed there."""
        self.action_show_tab("tab-plot")
        self.query_one(SpectrumPlot).zoom_to(message.centre_cm1, message.span_cm1)

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
        if isinstance(event, FileWaiting):
            then = "taken as it is" if event.taken_then else "recorded unreadable"
            self.waiting[event.path] = f"{event.reason}; {then} after {event.give_up_after_seconds:g} s"
        elif isinstance(event, (FileSettled, *ENDS_WORK)):
            self.waiting.pop(event.path, None)
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
        elif message.over is not None:
            self.notify(escape(f"run {message.run_id}: {message.action} recorded; {decision_words(message.over)} "
                               "stays on record too"), timeout=4)
        else:
            self.notify(f"run {message.run_id}: {message.action} recorded", timeout=2)
        self.load_runs()
        if message.run_id == self.selected_run_id:
            self.load_detail(message.run_id)

    @on(DecisionConflict)
    def decision_conflict(self, message: DecisionConflict) -> None:
        """Someone else decided this run: say who, what and when, and ask before deciding over it."""
        from tui.screens.modals import ConfirmScreen

        run = self.runs.get(message.run_id)
        name = safe_text(run.name) if run is not None else f"run {message.run_id}"
        verb = {"accept": "Accept", "flag": "Flag", "undo": "Undo"}.get(message.action, message.action)
        question = (f"Run {message.run_id} ({name}) was {decision_words(message.over)}.\n"
                    f"{verb} it anyway? Both decisions stay on record.")

        def answered(yes: bool | None) -> None:
            if yes:
                self.write_decision(message.run_id, message.action, message.reason, confirmed_over=message.over.event_id)
            else:
                self.notify(f"run {message.run_id}: nothing recorded", timeout=2)

        self.load_runs()  # the list shows the other decision at once
        self.app.push_screen(ConfirmScreen(question), answered)

    @on(ReprocessFinished)
    def reprocess_finished(self, message: ReprocessFinished) -> None:
        if message.problem:
            self.notify(escape(safe_text(message.problem)), title=f"redo of run {message.run_id}", severity="error")
            return
        old = self.runs.get(message.run_id)
        name = safe_text(old.name) if old is not None else "the file"
        self.notify(escape(f"run {message.run_id} redone: a new version of {name} is run {message.new_run_id} "
                           f"(run {message.run_id} is kept, marked replaced)"), timeout=4)
        self.jump_to = message.new_run_id
        self.load_runs()

    @on(ReportExported)
    def report_exported(self, message: ReportExported) -> None:
        if message.problem:
            self.notify(escape(safe_text(message.problem)), title="export", severity="error")
        else:
            self.notify(escape(safe_text(f"report written: {message.path}")), title="export", timeout=4)
            if message.figure is not None and message.figure.startswith("figure not"):
                self.notify(escape(safe_text(message.figure)), title="export", severity="warning", timeout=8)

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

    def action_cycle_panes(self, step: int) -> None:
        """`tab`: run list, plot, lines, constants, checks, and round again (shift+tab back)."""
        if self.query_one(RunList).has_focus:
            current = 0
        else:
            active = self.query_one(TabbedContent).active
            current = PANES.index(active) if active in PANES else 0
        following = PANES[(current + step) % len(PANES)]
        if following == "runs":
            self.action_focus_runs()
        else:
            self.action_show_tab(following)

    def action_focus_runs(self) -> None:
        self.query_one(RunList).focus()
