"""Small dialogs: the reason for a flag, and the changed settings for a redo."""
from __future__ import annotations

from rich.text import Text
from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Label, Select, Static

from processing.safe_text import safe_text
from processing.station.ledger import RunRecord
from processing.station.redo import JOffset, RedoRequest
from tui import bindings

NO_SHIFT = "none"


class ConfirmScreen(ModalScreen[bool]):
    """A yes/no question: `y` answers yes; `n` or Escape no."""

    BINDINGS = bindings.CONFIRM

    def __init__(self, question: str) -> None:
        super().__init__()
        self.question = question

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(Text(self.question), id="question")
            yield Static("y records it · n or Esc leaves things as they are", classes="hint")

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)


class RenumberSelect(Select[str]):
    """The renumber drop-down: Enter redoes, as everywhere in the dialog; space or the arrow
    keys open the list (and Enter picks from it)."""

    BINDINGS = [
        Binding("enter", "screen.send", "Redo", show=False),
        Binding("down,space,up", "show_overlay", "Show list", show=False),
    ]


class FlagReasonScreen(ModalScreen[str | None]):
    """Ask why a run is flagged; Enter records, Escape cancels. An empty reason is refused."""

    BINDINGS = bindings.FLAG

    def __init__(self, run_name: str) -> None:
        super().__init__()
        self.run_name = run_name

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(f"Flag {safe_text(self.run_name)}: why?", markup=False)
            yield Input(placeholder="reason (e.g. cell leak, baseline drift)", id="reason")
            yield Static("Enter records the flag · Esc cancels", classes="hint")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    @on(Input.Submitted, "#reason")
    def submit(self, message: Input.Submitted) -> None:
        reason = message.value.strip()
        if not reason:
            self.notify("a flag needs a reason", severity="warning", timeout=2)
            return
        self.dismiss(reason)

    def action_cancel(self) -> None:
        self.dismiss(None)


def band_keys(run: RunRecord) -> list[tuple[str, int, int]]:
    """(isotopologue, v_upper, v_lower) of the run's fitted bands; 1-0 of each species otherwise."""
    bands = [(b.isotopologue, b.v_upper, b.v_lower) for b in (run.result.bands if run.result is not None else ())]
    return bands or [(iso, 1, 0) for iso in run.species]


def shift_options(bands: list[tuple[str, int, int]]) -> list[tuple[str, str]]:
    """Select options such as "H35Cl 1-0 P branch J+1": renumber one branch of one band by one."""
    options = [("no J renumbering", NO_SHIFT)]
    for iso, v_upper, v_lower in bands:
        for branch in ("P", "R"):
            for shift in (+1, -1):
                options.append(
                    (f"{iso} {v_upper}-{v_lower} {branch} branch J{shift:+d}",
                     f"{iso}|{v_upper}|{v_lower}|{branch}|{shift}")
                )
    return options


def parse_positions(text: str) -> list[float]:
    """Comma or space separated wavenumbers in cm-1; raises ValueError naming a bad entry."""
    values: list[float] = []
    for part in text.replace(",", " ").split():
        try:
            values.append(float(part))
        except ValueError:
            raise ValueError(f"{part!r} is not a wavenumber") from None
    return values


class ReprocessScreen(ModalScreen[RedoRequest | None]):
    """Changed settings for a redo of one run: species, one branch renumbered, lines excluded.

    Tab moves between fields, Enter in a text field (or ctrl+s) sends, Escape cancels. The
    result is the operator's RedoRequest; the station applies it to its own settings.
    """

    BINDINGS = bindings.REDO

    def __init__(self, run: RunRecord, excluded: list[float]) -> None:
        super().__init__()
        self.run = run
        self.excluded = excluded
        previous = run.settings or {}
        self.species_text = ", ".join(previous.get("species") or run.species)

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(f"Redo {safe_text(self.run.name)} with changed settings", markup=False)
            yield Label("species (comma separated; empty = detect)", classes="field-label")
            yield Input(value=self.species_text, id="species")
            yield Label("renumber a branch (space opens the list)", classes="field-label")
            yield RenumberSelect(shift_options(band_keys(self.run)), value=NO_SHIFT, allow_blank=False, id="shift")
            yield Label("exclude lines at cm-1 (marked with x in Lines)", classes="field-label")
            yield Input(value=", ".join(f"{p:.4f}" for p in self.excluded), id="exclude")
            yield Static(Text("The redo is a new version of the run, with what you changed on record; this run "
                              "is kept, marked replaced."), classes="hint")
            yield Static("Enter or ctrl+s redoes · Tab next field · Esc cancels", classes="hint")

    def on_mount(self) -> None:
        self.query_one("#species", Input).focus()

    @on(Input.Submitted)
    def submitted(self) -> None:
        self.action_send()

    def action_send(self) -> None:
        species = [s.strip() for s in self.query_one("#species", Input).value.split(",") if s.strip()]
        try:
            exclude = parse_positions(self.query_one("#exclude", Input).value)
        except ValueError as error:
            self.notify(str(error), severity="error", timeout=3)
            return
        shift_value = self.query_one("#shift", Select).value
        offsets: list[JOffset] = []
        if isinstance(shift_value, str) and shift_value != NO_SHIFT:
            iso, v_upper, v_lower, branch, amount = shift_value.split("|")
            offsets.append((iso, int(v_upper), int(v_lower), branch, int(amount)))
        self.dismiss(RedoRequest(species=tuple(species), j_offsets=tuple(offsets), excluded_positions_cm1=tuple(exclude)))

    def action_cancel(self) -> None:
        self.dismiss(None)
