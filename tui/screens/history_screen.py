"""A fitted quantity across runs (e.g. a band origin over the day, to see calibration drift)."""
from __future__ import annotations

from typing import Any

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import Screen
from textual.widgets import DataTable, Footer, OptionList, Static
from textual.widgets.option_list import Option

from tui.messages import HistoryLoaded
from tui.widgets.cells import decimals_for, number, plain
from tui.widgets.run_tables import BAND_ROWS, CONSTANT_ROWS, VERTICAL_KEYS, clock_time
from tui.widgets.trend_plot import TrendPlot


def quantity_choices(result: dict[str, Any]) -> list[tuple[str, str, str]]:
    """(isotopologue, quantity id, label) for every quantity the run has a value of.

    A band quantity's id carries its band ("origin@1-0"), so runs of another band of the same
    isotopologue (an overtone) are not mixed into its trend.
    """
    choices: list[tuple[str, str, str]] = []
    for band in result.get("bands") or []:
        iso = str(band.get("isotopologue", "?"))
        tag = f"{band.get('v_upper', '?')}-{band.get('v_lower', '?')}"
        for key, label in BAND_ROWS:
            if isinstance(band.get(key), dict) and (iso, f"{key}@{tag}") not in [(c[0], c[1]) for c in choices]:
                choices.append((iso, f"{key}@{tag}", f"{iso} {label} {tag}"))
    for constant in result.get("constants") or []:
        iso = str(constant.get("isotopologue", "?"))
        for key, label in CONSTANT_ROWS:
            if isinstance(constant.get(key), dict):
                choices.append((iso, key, f"{iso} {label}"))
    return choices


def in_band(result: dict[str, Any] | None, isotopologue: str, quantity: str, tag: str, value: float) -> bool:
    """True when the run's value of `quantity` for `isotopologue` belongs to band `tag` ("1-0")."""
    for band in (result or {}).get("bands") or []:
        if band.get("isotopologue") != isotopologue:
            continue
        if f"{band.get('v_upper', '?')}-{band.get('v_lower', '?')}" != tag:
            continue
        estimate = band.get(quantity)
        if isinstance(estimate, dict) and estimate.get("value") == value:
            return True
    return False


class HistoryTable(DataTable):
    BINDINGS = VERTICAL_KEYS


class HistoryScreen(Screen[None]):
    """Pick a quantity on the left; its values over the ledger's runs show as a plot and a table."""

    BINDINGS = [
        Binding("escape,q,t", "close", "Back", id="history.close"),
        Binding("down,j", "choice(1)", "Next quantity", show=False, id="history.next"),
        Binding("up,k", "choice(-1)", "Previous quantity", show=False, id="history.previous"),
    ]

    def __init__(self, result: dict[str, Any], preferred: tuple[str, str] | None = None) -> None:
        super().__init__()
        self.choices = quantity_choices(result)
        self.preferred = preferred

    def compose(self) -> ComposeResult:
        yield Static("Trend of one fitted quantity across runs (newest file versions)", id="history-title")
        with Horizontal(id="history-body"):
            yield OptionList(*[Option(label, id=f"{iso}|{key}") for iso, key, label in self.choices], id="quantities")
            with Vertical(id="history-right"):
                yield TrendPlot(id="trend")
                yield HistoryTable(id="history-table", cursor_type="row")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        table = self.query_one(HistoryTable)
        table.add_column("time UTC", key="time", width=8)
        table.add_column("run", key="run", width=4)
        table.add_column("value", key="value", width=12)
        table.add_column("±", key="sigma", width=9)
        table.add_column("Δ first", key="delta", width=10)
        options = self.query_one(OptionList)
        options.focus()
        if not self.choices:
            self.query_one("#history-title", Static).update(
                Text("This run has no fitted quantities; pick a processed run first (Esc goes back).")
            )
            return
        index = 0
        if self.preferred is not None:
            for position, (iso, key, _label) in enumerate(self.choices):
                if (iso, key) == self.preferred:
                    index = position
        options.highlighted = index

    def action_choice(self, step: int) -> None:
        options = self.query_one(OptionList)
        if options.option_count:
            options.highlighted = ((options.highlighted or 0) + step) % options.option_count

    @on(OptionList.OptionHighlighted, "#quantities")
    def quantity_highlighted(self, message: OptionList.OptionHighlighted) -> None:
        option_id = message.option.id or ""
        iso, _, key = option_id.partition("|")
        self.load_history(iso, key)

    @work(thread=True, exclusive=True, exit_on_error=False)
    def load_history(self, isotopologue: str, quantity_id: str) -> None:
        from processing.station.ledger import constant_history, get_run, open_ledger

        quantity, _, band_tag = quantity_id.partition("@")
        conn = open_ledger(self.app.data_dir)  # type: ignore[attr-defined]
        try:
            points = constant_history(conn, isotopologue, quantity)
            if band_tag:
                points = [
                    point for point in points
                    if in_band(getattr(get_run(conn, point[1]), "result", None), isotopologue, quantity, band_tag, point[2])
                ]
        finally:
            conn.close()
        self.post_message(HistoryLoaded(isotopologue, quantity_id, points))

    @on(HistoryLoaded)
    def show_history(self, message: HistoryLoaded) -> None:
        label = next((c[2] for c in self.choices if (c[0], c[1]) == (message.isotopologue, message.quantity)), "")
        self.query_one("#history-title", Static).update(
            Text(f"{label}: {len(message.points)} run(s), oldest left/top", no_wrap=True)
        )
        self.query_one(TrendPlot).show([p[2] for p in message.points], [p[3] for p in message.points])
        table = self.query_one(HistoryTable)
        table.clear()
        if not message.points:
            return
        first = message.points[0][2]
        sigmas = [p[3] for p in message.points if p[3]]
        places = decimals_for(min(sigmas) if sigmas else None, default=5)
        for stamp, run_id, value, sigma in message.points:
            table.add_row(
                plain(clock_time(stamp)),
                Text(str(run_id), justify="right"),
                number(value, places),
                number(sigma, places) if sigma is not None else Text("n/d", justify="right", style="dim"),
                number(value - first, places),
            )

    def action_close(self) -> None:
        self.dismiss(None)
