"""`BandwatchApp`: the terminal interface over a data folder's ledger, optionally with a live station.

Thin on purpose: it holds where things are (data folder, export folder, operator, the station's
configuration), starts and stops the station it is given, forwards the station's events to the
main screen as messages, and lends the screens two pieces of thread work: redo a run (through
the station, or the same redo here when none runs) and export a report. It writes nothing
itself: the ledger and the reports are written by `processing.station`.
"""
from __future__ import annotations

import getpass
import os
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Callable, Protocol

from textual.app import App
from textual.worker import Worker, WorkerState

from processing.pipeline import ProcessSettings
from processing.results import RunResult
from processing.station.config import StationConfig
from processing.station.events import StationEvent
from processing.station.redo import RedoOutcome, RedoRequest
from tui import bindings
from tui.messages import StationEventReceived

if TYPE_CHECKING:
    from tui.screens.main_screen import MainScreen


class StationHandle(Protocol):
    """What the interface needs of a station (`processing.station.station.Station`)."""

    def start(self) -> None: ...

    def stop(self) -> None: ...

    def reprocess(self, run_id: int, request: RedoRequest, timeout: float | None = None) -> int | None: ...


EventCallback = Callable[[StationEvent], None]
StationFactory = Callable[[EventCallback], StationHandle]  # on_event -> a station, not yet started
ProcessFunction = Callable[[str, ProcessSettings], RunResult]


class BandwatchApp(App[int]):
    """Runs newest first with their spectrum, lines, constants and checks; keyboard only."""

    CSS_PATH = "app.tcss"
    TITLE = "bandwatch"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = bindings.APP

    def __init__(
        self,
        data_dir: str | Path,
        export_dir: str | Path | None = None,
        *,
        station_factory: StationFactory | None = None,
        operator: str | None = None,
        process_function: ProcessFunction | None = None,
        run_limit: int = 500,
        exit_after_seconds: float | None = None,
        keymap: dict[str, str] | None = None,
        config: StationConfig | None = None,
        monochrome: bool | None = None,
        ledger_location: str | Path | None = None,
    ) -> None:
        self.monochrome = monochrome_terminal() if monochrome is None else monochrome
        # Without colour the terminal's own foreground and background are used throughout
        # (never Textual's greyscale conversion, which leaves grey text on grey); the styles
        # that still tell things apart (bold, reverse, underline) are in app.tcss (:nocolor).
        super().__init__(ansi_color=True if self.monochrome else None)
        if self.monochrome and not self.no_color:
            from textual.filter import NoColor

            self.no_color = True
            self._filters.append(NoColor())  # Textual does this itself only for NO_COLOR
        self.data_dir = Path(data_dir)
        # the ledger: a server's URL, or the data folder (its ledger.sqlite3)
        self.ledger_location: str | Path = ledger_location if ledger_location is not None else self.data_dir
        self.export_dir = str(export_dir) if export_dir is not None else None
        # the station's settings: a redo without a running station uses them too
        self.config = config or StationConfig(
            export_folder=Path(export_dir) if export_dir is not None else None, data_folder=self.data_dir
        )
        self.station_factory = station_factory
        self.station: StationHandle | None = None
        self.operator = operator if operator is not None else _login_name()
        self.process_function = process_function
        self.run_limit = run_limit
        self.exit_after_seconds = exit_after_seconds
        self.user_keymap = keymap  # None: read the user's keys file on mount

    def on_mount(self) -> None:
        from processing.errors import ConfigError
        from tui.keymap import load_keymap
        from tui.screens.main_screen import MainScreen

        try:
            keymap = self.user_keymap if self.user_keymap is not None else load_keymap()
        except ConfigError as error:
            keymap = {}
            self.notify(_literal(str(error)), title="keys file ignored", severity="error", timeout=15)
        if keymap:
            self.set_keymap(keymap)
        self.push_screen(MainScreen())
        if self.station_factory is not None:
            self.start_station()
        if self.exit_after_seconds is not None:
            self.set_timer(self.exit_after_seconds, lambda: self.exit(0))

    def start_station(self) -> None:
        """Build and start the station; its events arrive (from its threads) as messages."""
        assert self.station_factory is not None
        self.station = self.station_factory(self.station_event)
        self.run_worker(self.station.start, thread=True, group="station", name="station start", exit_on_error=False)

    def on_worker_state_changed(self, message: Worker.StateChanged) -> None:
        """A station that cannot start (folder taken by another station, ...) is said, not a crash."""
        if message.worker.group == "station" and message.state == WorkerState.ERROR:
            self.station = None
            self.notify(_literal(str(message.worker.error)), title="station not running", severity="error", timeout=30)

    def station_event(self, event: StationEvent) -> None:
        """Called by the station from any thread: forward the event to the main screen."""
        main = self.main_screen()
        if main is not None:
            main.post_message(StationEventReceived(event))

    def main_screen(self) -> MainScreen | None:
        from tui.screens.main_screen import MainScreen

        return next((screen for screen in self.screen_stack if isinstance(screen, MainScreen)), None)

    async def on_unmount(self) -> None:
        if self.station is not None:
            self.station.stop()

    def action_help(self) -> None:
        from tui.screens.help_screen import HelpScreen

        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen())

    # -- thread work lent to the screens (called from worker threads) ----------------

    def reprocess(self, run_id: int, request: RedoRequest) -> RedoOutcome:
        """Redo a run: through the station when one runs, else the same redo in this thread."""
        if self.station is not None:
            new_run_id = self.station.reprocess(run_id, request)
            if new_run_id is None:
                return RedoOutcome(None, "the station stopped before the redo was recorded")
            return RedoOutcome(int(new_run_id))
        from processing.station.redo import redo_here

        return redo_here(self.config, run_id, request, self.process_function)

    def export_report(self, run_id: int) -> tuple[str | None, str | None, str | None]:
        """Write the run's report files and its figure beside them: (folder, problem, what
        became of the figure: its path, or why it was not drawn)."""
        from processing.errors import BandwatchError
        from processing.station.reports import FIGURE_NAME, export_run_report, write_run_figure

        folder, problem = export_run_report(self.data_dir, run_id, self.ledger_location)
        if folder is None:
            return folder, problem, None
        try:
            figure = str(write_run_figure(self.data_dir, run_id, Path(folder) / FIGURE_NAME, self.export_dir,
                                          self.ledger_location))
        except BandwatchError as error:
            figure = f"figure not drawn: {error}"
        except OSError as error:
            figure = f"figure not written: {error.strerror or error}"
        return folder, problem, figure


def monochrome_terminal(environ: Mapping[str, str] | None = None) -> bool:
    """True when colour is not wanted or not there: NO_COLOR set (no-color.org), or a
    monochrome terminal type (`xterm-mono`, `vt100-m`: the terminfo names' convention)."""
    environ = os.environ if environ is None else environ
    if "NO_COLOR" in environ:
        return True
    term = environ.get("TERM", "")
    return term.endswith(("-mono", "-m"))


def _literal(text: str) -> str:
    """A message that may quote a file name, as notification markup that shows it literally."""
    from rich.markup import escape

    from processing.safe_text import safe_text

    return escape(safe_text(text))


def _login_name() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return ""
