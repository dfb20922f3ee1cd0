"""The help screen: every key of the app, from the live bindings (so remapped keys show)."""
from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from tui import bindings as key_bindings

PANES_TEXT = """\
Keys can be remapped by their id (right column) in ~/.config/bandwatch/keys.toml
(or the file named by $BANDWATCH_KEYS), e.g.  "run.accept" = "y"

Panes (top to bottom)
  run list      newest first: time (UTC), file, version, species found, verdict, decision
  summary       the highlighted run: verdict, decision, who decided and why
  1 Plot        the spectrum; markers above it: P R = first isotopologue's P and R lines,
                p r = second, < > = third, ? = unassigned, x = marked for exclusion;
                the zoom is kept when moving to another run (0 shows everything)
  2 Lines       observed position, assignment, calculated position, obs-calc; x marks a line
                to leave out of the next redo
  3 Constants   band and molecular constants with uncertainties beside reference values
  4 Checks      each check as PASS / WARN / FAIL with its reason
"""

EXTRA_KEYS = (("tab / shift+tab", "move between panes"),)


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
            what = binding.tooltip or binding.description
            text.append(f"  {keys:<18} {what[:38]:<39}")
            text.append(f"{binding_id}\n", style="dim")
        if title == "Runs and panes":
            for keys, what in EXTRA_KEYS:
                text.append(f"  {keys:<18} {what}\n")
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
