"""Every key binding of the interface, in one place: the screens and widgets take their lists
from here, the keys file (`keymap`) checks ids against them, and the help screen lists them.

Each binding has an id (`Binding(..., id=...)`) by which a user's keys file remaps it.
"""
from __future__ import annotations

from textual.binding import Binding

APP = [
    Binding("ctrl+q", "quit", "Quit", priority=True, id="app.quit"),
    Binding("question_mark,f1", "help", "Help", id="app.help", key_display="?"),
]

TABLE = [
    Binding("down,j", "cursor_down", "Down", show=False, id="table.down"),
    Binding("up,k", "cursor_up", "Up", show=False, id="table.up"),
    Binding("home,g", "scroll_top", "Top", show=False, id="table.top"),
    Binding("end,G", "scroll_bottom", "Bottom", show=False, id="table.bottom"),
]

MAIN = [
    Binding("a", "accept", "Accept", id="run.accept", tooltip="Accept the run"),
    Binding("f", "flag", "Flag", id="run.flag", tooltip="Flag the run (asks why)"),
    Binding("u", "undo", "Undo", id="run.undo", tooltip="Undo the last decision (kept on record)"),
    Binding("r", "reprocess", "Redo…", id="run.reprocess", tooltip="Redo the run with changed settings"),
    Binding("e", "export", "Export", id="run.export",
            tooltip="Write the run's report and figure (SVG) under DATA/reports"),
    Binding("t", "history", "Trend", id="run.history", tooltip="Trend of a fitted quantity over runs"),
    Binding("I", "cycle_instrument", "Instrument", show=False, id="run.instrument",
            tooltip="Show one instrument's runs, the next, ..., then all again"),
    Binding("n,ctrl+n", "next_run", "Next run", show=False, id="run.next"),
    Binding("p,ctrl+p", "previous_run", "Previous run", show=False, id="run.previous"),
    Binding("1", "show_tab('tab-plot')", "Plot", show=False, id="pane.plot", tooltip="Show the plot pane"),
    Binding("2", "show_tab('tab-lines')", "Lines", show=False, id="pane.lines", tooltip="Show the lines pane"),
    Binding("3", "show_tab('tab-constants')", "Constants", show=False, id="pane.constants", tooltip="Show the constants pane"),
    Binding("4", "show_tab('tab-checks')", "Checks", show=False, id="pane.checks", tooltip="Show the checks pane"),
    Binding("w", "focus_runs", "Runs", show=False, id="pane.runs", tooltip="Go to the run list"),
    Binding("tab", "cycle_panes(1)", "Next pane", show=False, id="pane.next",
            tooltip="Next pane: run list, plot, lines, constants, checks"),
    Binding("shift+tab", "cycle_panes(-1)", "Previous pane", show=False, id="pane.previous",
            tooltip="Previous pane"),
]

LINES = [
    *TABLE,
    Binding("x", "toggle_exclude", "Exclude line", id="lines.exclude",
            tooltip="Exclude or include the line in the next redo"),
    Binding("z", "zoom_here", "Zoom to line", id="lines.zoom", tooltip="Show this line in the plot, zoomed on it"),
]

CONSTANTS = [
    Binding("z", "zoom_here", "Zoom to band", id="constants.zoom", tooltip="Show this row's band in the plot"),
]

PLOT = [
    Binding("plus,equals_sign,i", "zoom(0.5)", "Zoom in", id="plot.zoom_in", key_display="+"),
    Binding("minus,o", "zoom(2.0)", "Zoom out", id="plot.zoom_out", key_display="-"),
    Binding("left,h", "pan(-0.25)", "Pan", id="plot.pan_left", key_display="←/→",
            tooltip="Pan left (a quarter of the view)"),
    Binding("right,l", "pan(0.25)", "Pan right", id="plot.pan_right", show=False,
            tooltip="Pan right (a quarter of the view)"),
    Binding("0", "reset_view", "Whole", id="plot.reset", tooltip="Whole spectrum"),
    Binding("b", "next_band", "Band", id="plot.band", tooltip="Zoom to the next band of the run (in turn)"),
    Binding("x", "flip_axis", "Flip axis", id="plot.flip",
            tooltip="Flip axis (high to low wavenumber, or low to high)"),
]

HELP = [
    Binding("escape,q,question_mark", "close", "Close", id="help.close"),
    Binding("j", "scroll('down')", "Scroll down", show=False, id="help.down"),
    Binding("k", "scroll('up')", "Scroll up", show=False, id="help.up"),
]

HISTORY = [
    Binding("escape,q,t", "close", "Back", id="history.close"),
    Binding("down,j", "choice(1)", "Next quantity", show=False, id="history.next"),
    Binding("up,k", "choice(-1)", "Previous quantity", show=False, id="history.previous"),
    Binding("I", "cycle_instrument", "Instrument", show=False, id="history.instrument",
            tooltip="Show one instrument's values, the next, ..., then all again"),
]

FLAG = [Binding("escape", "cancel", "Cancel", id="modal.cancel")]

CONFIRM = [
    Binding("y", "answer(True)", "Yes", id="confirm.yes"),
    Binding("n,escape", "answer(False)", "No", id="confirm.no"),
]

REDO = [
    Binding("escape", "cancel", "Cancel", id="modal.cancel"),
    Binding("ctrl+s", "send", "Redo", id="modal.send"),
]

# The help page: sections of binding ids, in the order shown.
SECTIONS: tuple[tuple[str, tuple[str, ...]], ...] = (
    ("Anywhere", ("app.help", "app.quit")),
    (
        "Runs and panes",
        ("table.down", "table.up", "table.top", "table.bottom", "run.next", "run.previous",
         "pane.runs", "pane.plot", "pane.lines", "pane.constants", "pane.checks", "pane.next", "pane.previous"),
    ),
    ("Decisions and work", ("run.accept", "run.flag", "run.undo", "run.reprocess", "run.export", "run.history")),
    ("Plot (when focused)", ("plot.zoom_in", "plot.zoom_out", "plot.pan_left", "plot.pan_right", "plot.reset",
                             "plot.band", "plot.flip")),
    ("Lines (when focused)", ("lines.exclude", "lines.zoom")),
    ("Constants (when focused)", ("constants.zoom",)),
)


def by_id() -> dict[str, Binding]:
    """Every binding by its id (the first of a shared id, e.g. modal.cancel)."""
    found: dict[str, Binding] = {}
    for group in (APP, MAIN, TABLE, LINES, CONSTANTS, PLOT, HELP, HISTORY, FLAG, CONFIRM, REDO):
        for binding in group:
            if binding.id:
                found.setdefault(binding.id, binding)
    return found


def binding_ids() -> set[str]:
    """Every remappable binding id of the interface."""
    return set(by_id())
