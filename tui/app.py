"""`BandwatchApp`: the terminal interface over a data folder's ledger, optionally with a live station.

Thin on purpose: it holds where things are (data folder, export folder, operator), starts and
stops the station it is given, forwards the station's events to the main screen as messages,
and lends the screens two pieces of thread work (redo a run, export a report).
"""
from __future__ import annotations

import getpass
from pathlib import Path
from typing import Any, Callable

from textual.app import App
from textual.binding import Binding
from textual.worker import Worker, WorkerState

from tui.messages import StationEventReceived

EventCallback = Callable[[Any], None]
StationFactory = Callable[[EventCallback], Any]  # on_event -> an object with start() and stop()


class BandwatchApp(App[int]):
    """Runs newest first with their spectrum, lines, constants and checks; keyboard only."""

    CSS_PATH = "app.tcss"
    TITLE = "bandwatch"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = [
        Binding("ctrl+q", "quit", "Quit", priority=True, id="app.quit"),
        Binding("question_mark,f1", "help", "Help", id="app.help", key_display="?"),
    ]

    def __init__(
        self,
        data_dir: str | Path,
        export_dir: str | Path | None = None,
        *,
        station_factory: StationFactory | None = None,
        operator: str | None = None,
        process_function: Callable[[str, Any], Any] | None = None,
        run_limit: int = 500,
        exit_after_seconds: float | None = None,
        keymap: dict[str, str] | None = None,
    ) -> None:
        super().__init__()
        self.data_dir = Path(data_dir)
        self.export_dir = str(export_dir) if export_dir is not None else None
        self.station_factory = station_factory
        self.station: Any | None = None
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

    def station_event(self, event: Any) -> None:
        """Called by the station from any thread: forward the event to the main screen."""
        from tui.screens.main_screen import MainScreen

        for screen in self.screen_stack:
            if isinstance(screen, MainScreen):
                screen.post_message(StationEventReceived(event))

    async def on_unmount(self) -> None:
        if self.station is not None:
            self.station.stop()

    def action_help(self) -> None:
        from tui.screens.help_screen import HelpScreen

        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen())

    # -- thread work lent to the screens (called from worker threads) ----------------

    def reprocess(self, run_id: int, requested: dict[str, Any]) -> tuple[int | None, str | None]:
        """Redo a run: through the station when it offers it, else here with the pipeline."""
        redo = getattr(self.station, "reprocess", None)
        if callable(redo):
            new_run_id = redo(run_id, requested)
            return (int(new_run_id) if new_run_id is not None else None), None
        from tui.screens.run_work import reprocess_in_thread

        function = self.process_function
        if function is None:
            from processing.pipeline import process_file as function
        new_run_id, problem, not_applied = reprocess_in_thread(self.data_dir, run_id, requested, function)
        if not_applied and problem is None:
            self.call_from_thread(
                self.notify,
                f"recorded but not yet applied by the analysis: {', '.join(not_applied)}",
                severity="warning",
            )
        return new_run_id, problem

    def export_report(self, run_id: int) -> tuple[str | None, str | None]:
        from tui.screens.run_work import export_in_thread

        return export_in_thread(self.data_dir, run_id)


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
