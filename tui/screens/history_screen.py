"""A fitted quantity across runs (e.g. a band origin over the day, to see calibration drift), of
every instrument in the ledger (each run's instrument in the table) or of one (`I` cycles)."""
from __future__ import annotations

from pathlib import Path

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.screen import Screen
from textual.widgets import DataTable, Footer, OptionList, Static
from textual.widgets.option_list import Option

from processing.local_time import clock, zone_name
from processing.results import RunResult
from processing.safe_text import safe_text
from processing.station.ledger import TrendPoint
from tui import bindings
from tui.messages import HistoryLoaded
from tui.widgets.cells import decimals_for, number, plain
from tui.widgets.run_tables import BAND_ROWS, CONSTANT_ROWS
from tui.widgets.trend_plot import TrendPlot, TrendRun


def quantity_reference(result: RunResult | None, isotopologue: str, quantity_id: str) -> float | None:
    """The reference line of a trend: the library's value of the quantity (the handbook's),
    else the reference this run's value was compared with."""
    if result is None:
        return None
    quantity, _, band_tag = quantity_id.partition("@")
    comparison = None
    if band_tag:
        band = next((b for b in result.bands if b.isotopologue == isotopologue and b.band == band_tag), None)
        comparison = band.reference.get(quantity) if band is not None else None
    else:
        entry = next((c for c in result.constants if c.isotopologue == isotopologue), None)
        comparison = entry.reference.get(quantity) if entry is not None else None
    if comparison is None:
        return None
    return comparison.handbook_value if comparison.handbook_value is not None else comparison.compared_reference


def point_state(point: TrendPoint) -> Text:
    """The run's decision and verdict as words: "FLAGGED", "✘ FAIL", "accepted", ""."""
    parts = []
    if point.decision == "flag":
        parts.append("FLAGGED")
    elif point.decision == "accept":
        parts.append("accepted")
    if point.verdict == "fail":
        parts.append("✘ FAIL")
    return Text(" ".join(parts), style="bold" if point.decision == "flag" or point.verdict == "fail" else "")


def quantity_choices(result: RunResult | None) -> list[tuple[str, str, str]]:
    """(isotopologue, quantity id, label) for every quantity the run has a value of.

    A band quantity's id carries its band ("origin@1-0"), so runs of another band of the same
    isotopologue (an overtone) are not mixed into its trend.
    """
    if result is None:
        return []
    choices: list[tuple[str, str, str]] = []
    for band in result.bands:
        for key, label in BAND_ROWS:
            choice = (band.isotopologue, f"{key}@{band.band}", f"{band.isotopologue} {label} {band.band}")
            if band.quantity(key) is not None and choice[:2] not in [c[:2] for c in choices]:
                choices.append(choice)
    for constant in result.constants:
        for key, label in CONSTANT_ROWS:
            if constant.constants.get(key) is not None:
                choices.append((constant.isotopologue, key, f"{constant.isotopologue} {label}"))
    return choices


class HistoryTable(DataTable):
    BINDINGS = bindings.TABLE


class HistoryScreen(Screen[None]):
    """Pick a quantity on the left; its values over the ledger's runs show as a plot and a table."""

    BINDINGS = bindings.HISTORY

    def __init__(self, result: RunResult | None, ledger_location: str | Path, preferred: tuple[str, str] | None = None) -> None:
        super().__init__()
        self.choices = quantity_choices(result)
        self.result = result
        self.ledger_location = ledger_location  # a server's URL or the data folder
        self.preferred = preferred
        self.loaded: HistoryLoaded | None = None  # the quantity's values on every instrument
        self.instrument_filter: str | None = None  # one instrument's values only (None: all)
        self.with_instrument = False

    def compose(self) -> ComposeResult:
        yield Static("Trend of one fitted quantity across runs (newest file versions)", id="history-title")
        with Horizontal(id="history-body"):
            yield OptionList(*[Option(label, id=f"{iso}|{key}") for iso, key, label in self.choices], id="quantities")
            with Vertical(id="history-right"):
                yield TrendPlot(id="trend")
                yield HistoryTable(id="history-table", cursor_type="row")
        yield Footer(compact=True)

    def _add_columns(self, table: DataTable) -> None:
        table.add_column(f"time {zone_name()}", key="time", width=8)
        if self.with_instrument:
            table.add_column("instrument", key="instrument", width=10)
        table.add_column("run", key="run", width=4)
        table.add_column("value", key="value", width=12)
        table.add_column("±", key="sigma", width=9)
        table.add_column("Δ first", key="delta", width=10)
        table.add_column("state", key="state", width=16)

    def on_mount(self) -> None:
        table = self.query_one(HistoryTable)
        self._add_columns(table)
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
        """One query: the quantity of this band (or the molecular constant) over the runs."""
        from processing.station.ledger import open_ledger, trend

        quantity, _, band = quantity_id.partition("@")
        conn = open_ledger(self.ledger_location)
        try:
            points = trend(conn, isotopologue, quantity, band)
        finally:
            conn.close()
        self.post_message(HistoryLoaded(isotopologue, quantity_id, points))

    @on(HistoryLoaded)
    def show_history(self, message: HistoryLoaded) -> None:
        self.loaded = message
        self.show_points()

    def instruments(self) -> list[str]:
        """The instruments with values of the loaded quantity, by name."""
        return sorted({p.instrument for p in self.loaded.points}) if self.loaded is not None else []

    def show_points(self) -> None:
        """The loaded values of the chosen instrument (or of all), as the plot and the table;
        the instrument column when values of several instruments are there."""
        message = self.loaded
        if message is None:
            return
        names = self.instruments()
        points = [p for p in message.points if self.instrument_filter in (None, p.instrument)]
        label = next((c[2] for c in self.choices if (c[0], c[1]) == (message.isotopologue, message.quantity)), "")
        which = ""
        if self.instrument_filter is not None:
            which = f" on {self.instrument_filter}"
        elif len(names) > 1:
            which = f" on {len(names)} instruments (I: one at a time)"
        reference = quantity_reference(self.result, message.isotopologue, message.quantity)
        said = f"; reference {reference:.8g} (dotted)" if reference is not None else ""
        self.query_one("#history-title", Static).update(
            Text(safe_text(f"{label}: {len(points)} run(s){which}, oldest left/top{said}; F flagged, ✘ failed"))
        )
        self.query_one(TrendPlot).show(
            [TrendRun(p.value, p.sigma, p.processed_at, p.decision == "flag", p.verdict == "fail") for p in points],
            reference,
        )
        table = self.query_one(HistoryTable)
        with_instrument = len(names) > 1 and self.instrument_filter is None
        if with_instrument != self.with_instrument:
            self.with_instrument = with_instrument
            table.clear(columns=True)
            self._add_columns(table)
        table.clear()
        if not points:
            return
        first = points[0].value
        sigmas = [p.sigma for p in points if p.sigma]
        places = decimals_for(min(sigmas) if sigmas else None, default=5)
        for point in points:
            cells = [
                plain(clock(point.processed_at)),
                Text(str(point.run_id), justify="right"),
                number(point.value, places),
                number(point.sigma, places) if point.sigma is not None else Text("n/d", justify="right", style="dim"),
                number(point.value - first, places),
                point_state(point),
            ]
            if self.with_instrument:
                cells.insert(1, plain(point.instrument or "-"))
            table.add_row(*cells)

    def action_cycle_instrument(self) -> None:
        """Show one instrument's values, then the next, ..., then all again."""
        choices: list[str | None] = [None, *self.instruments()]
        position = choices.index(self.instrument_filter) if self.instrument_filter in choices else 0
        self.instrument_filter = choices[(position + 1) % len(choices)]
        self.show_points()

    def action_close(self) -> None:
        self.dismiss(None)
