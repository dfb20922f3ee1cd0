"""The help screen: every key of the app, from the live bindings (so remapped keys show).

Laid out for 72 characters (an 80-column terminal with the dialog's border and scrollbar):
descriptions wrap, nothing is cut.
"""
from __future__ import annotations

import textwrap

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from tui import bindings as key_bindings

HELP_WIDTH = 72
KEYS_WIDTH, WHAT_WIDTH = 16, 36

PANES_TEXT = """\
Keys can be remapped by their id (right column) in
~/.config/bandwatch/keys.toml (or the file named by $BANDWATCH_KEYS),
e.g.  "run.accept" = "y"

Panes (top to bottom)
  title         the export folder, the station, what it is doing now
  run list      newest first: local time (zone in the header), file,
                version, molecules found, verdict (reasons on a wide
                terminal), decision; ▸ marks the selected run
  summary       the selected run: verdict and its main reasons, the
                decision with who and why, what a redo changed
  1 Plot        the spectrum; marker rows above it, one per
                isotopologue (most lines first):
                  P R  first isotopologue's P and R branch lines
                  p r  second    < >  third    { }  fourth (and on)
                  ?    unassigned line    x  marked for exclusion
                  s    (row "sat") a saturated, flat-topped line
                a new run is shown at its own bands; the zoom of
                the run before is kept when it holds this run's
                lines (0 shows everything, b steps through bands)
  2 Lines       position, ±, height, S/N, assignment, calc,
                obs-calc, confidence, flags (s saturated, b blended,
                p profile on few points), note; the line under the
                table says everything about the highlighted line
  3 Constants   band and molecular constants beside the reference
                for the model fitted, Δ/σ (! beyond 3); D'=D'' when
                the fit constrained them equal
  4 Checks      each check as pass / WARN / FAIL / n/a with its
                whole reason

Statuses: ✔ PASS, ! WARN, ✘ FAIL (the verdict), ✘ UNREADABLE,
✘ FAILED (the analysis stopped), … WORKING, … WAITING (the file is
not whole yet: the station waits for the rest of it).
"""


def help_text(keymap: dict[str, str] | None = None) -> Text:
    """The help page; `keymap` (binding id -> keys) overrides the default keys shown."""
    bindings = key_bindings.by_id()
    keymap = keymap or {}
    text = Text()
    for title, ids in key_bindings.SECTIONS:
        text.append(f"{title}\n", style="bold")
        for binding_id in ids:
            binding = bindings.get(binding_id)
            if binding is None:
                continue
            keys = keymap.get(binding_id, binding.key)
            keys = keys.replace("question_mark", "?").replace("equals_sign", "=").replace(",", " / ")
            what = textwrap.wrap(binding.tooltip or binding.description, WHAT_WIDTH) or [""]
            text.append(f"  {keys:<{KEYS_WIDTH}} {what[0]:<{WHAT_WIDTH}} ")
            text.append(f"{binding_id}\n", style="dim")
            for more in what[1:]:
                text.append(f"  {'':<{KEYS_WIDTH}} {more}\n")
    text.append("\n")
    text.append(PANES_TEXT)
    return text


class HelpScreen(ModalScreen[None]):
    """Keys and panes; any of Escape, q or ? closes it."""

    BINDINGS = key_bindings.HELP

    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="dialog help", id="help-body"):
            yield Static(Text("↑/↓ or j/k scroll · Esc, q or ? closes\n", style="dim"))
            yield Static(help_text(getattr(self.app, "_keymap", None) or {}), id="help-text")

    def on_mount(self) -> None:
        self.query_one("#help-body").focus()

    def action_scroll(self, direction: str) -> None:
        body = self.query_one("#help-body", VerticalScroll)
        body.scroll_down() if direction == "down" else body.scroll_up()

    def action_close(self) -> None:
        self.dismiss(None)
