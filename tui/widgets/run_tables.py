"""The tables of the main screen: the run list and, for the selected run, lines, constants, checks.

Each table fills itself from ledger records or the typed result and only formats: no physics
is computed here.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Any

from rich.text import Text
from textual.message import Message
from textual.widgets import DataTable

from processing.estimate import Estimate
from processing.result_text import assignment_label, comparison_sentence
from processing.results import Band, Check, IsotopologueConstants, Line
from processing.station.ledger import RunRecord
from tui import bindings
from tui.widgets.cells import (
    check_text,
    decision_text,
    number,
    plain,
    quantity_cells,
    verdict_text,
)


def clock_time(stamp: str | None) -> str:
    """HH:MM:SS from an ISO 8601 stamp as stored (UTC in the ledger)."""
    if not stamp:
        return "--:--:--"
    time_part = stamp.split("T", 1)[-1]
    return time_part[:8]


class RunList(DataTable):
    """Runs newest first: time, (instrument,) file, species found, verdict, decision."""

    BINDINGS = bindings.TABLE

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(cursor_type="row", zebra_stripes=False, **kwargs)
        self.run_ids: list[int] = []
        self.with_instrument = False

    def on_mount(self) -> None:
        self._add_columns()

    def _add_columns(self) -> None:
        """The columns; with instruments the file column gives up the room (80 columns fit)."""
        self.add_column("time UTC", key="time", width=8)
        if self.with_instrument:
            self.add_column("instrument", key="instrument", width=10)
        self.add_column("file", key="file", width=16 if self.with_instrument else 26)
        self.add_column("v", key="version", width=2)
        self.add_column("species", key="species", width=12)
        self.add_column("verdict", key="verdict", width=8)
        self.add_column("decision", key="decision", width=8)

    def show_instruments(self, shown: bool) -> None:
        """Add or take away the instrument column (before `fill`)."""
        if shown != self.with_instrument:
            self.with_instrument = shown
            self.clear(columns=True)
            self._add_columns()

    def _row(self, *cells: Text, instrument: str = "") -> list[Text]:
        """A row's cells, with the instrument's cell when the column is shown."""
        row = list(cells)
        if self.with_instrument:
            row.insert(1, plain(instrument) if instrument else Text(""))
        return row

    def fill(
        self,
        runs: Iterable[RunRecord],
        busy: Iterable[str] = (),
        keep_run_id: int | None = None,
        problems: dict[str, str] | None = None,
    ) -> None:
        """Replace the rows: files the station could not record, files in progress, then runs."""
        self.clear()
        self.run_ids = []
        for path in problems or {}:
            self.add_row(
                *self._row(Text("now", style="dim"), plain(path.rsplit("/", 1)[-1]), Text(""), Text(""),
                           verdict_text("problem", None), Text("")), key=f"problem:{path}",
            )
        for path in busy:
            name = path.rsplit("/", 1)[-1]
            self.add_row(
                *self._row(Text("now", style="dim"), plain(name), Text(""), Text(""),
                           verdict_text("busy", None), Text("")), key=f"busy:{path}",
            )
        for run in runs:
            self.run_ids.append(run.run_id)
            self.add_row(
                *self._row(
                    plain(clock_time(run.received_at)),
                    plain(run.name),
                    Text(str(run.version), justify="right"),
                    plain(",".join(run.species) or "—"),
                    verdict_text(run.status, run.verdict),
                    decision_text(run.decision),
                    instrument=run.instrument,
                ),
                key=str(run.run_id),
            )
        if keep_run_id is not None and str(keep_run_id) in self.rows:
            self.move_cursor(row=self.get_row_index(str(keep_run_id)), animate=False)

    def selected_run_id(self) -> int | None:
        if self.row_count == 0:
            return None
        key = self.coordinate_to_cell_key((self.cursor_row, 0)).row_key.value
        if key is None or not key.isdigit():
            return None
        return int(key)

    def selected_key(self) -> str | None:
        """The row key: a run id, "busy:PATH" or "problem:PATH"."""
        if self.row_count == 0:
            return None
        return self.coordinate_to_cell_key((self.cursor_row, 0)).row_key.value


class LinesTable(DataTable):
    """Observed lines: position, assignment, calculated position, obs-calc; `x` marks exclusion."""

    BINDINGS = bindings.LINES

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(cursor_type="row", **kwargs)
        self.lines: list[Line] = []
        self.excluded: set[float] = set()

    def on_mount(self) -> None:
        self.add_column("obs cm-1", key="obs", width=10)
        self.add_column("±", key="sigma", width=6)
        self.add_column("assignment", key="assignment", width=15)
        self.add_column("calc cm-1", key="calc", width=10)
        self.add_column("obs-calc", key="residual", width=8)
        self.add_column("note", key="note", width=18)

    def fill(self, lines: Sequence[Line], excluded: set[float] | None = None) -> None:
        self.clear()
        self.lines = sorted(lines, key=lambda line: line.key, reverse=True)
        self.excluded = set(excluded or ())
        for index, line in enumerate(self.lines):
            assigned = line.assigned
            sigma = line.position.sigma
            self.add_row(
                number(line.position.value, 4),
                number(sigma, 4) if sigma is not None else Text("", justify="right"),
                plain(assignment_label(assigned)) if assigned else Text("? unassigned", style="bold"),
                number(assigned.calc, 4) if assigned else Text("—", justify="right", style="dim"),
                number(assigned.residual, 4) if assigned else Text("—", justify="right", style="dim"),
                self._note(line),
                key=str(index),
            )

    def _note(self, line: Line) -> Text:
        if line.key in self.excluded:
            return Text("x EXCLUDE on redo", style="bold")
        notes = [line.likely_cause] if line.likely_cause else []
        assigned = line.assigned
        if line.saturated:
            notes.append("saturated")
        if line.blended or (assigned is not None and assigned.blended):
            notes.append("blended")
        if assigned is not None and not assigned.used_in_fit:
            notes.append("not in fit")
        return plain(", ".join(notes))

    def action_toggle_exclude(self) -> None:
        if not self.lines:
            return
        line = self.lines[self.cursor_row]
        key = line.key
        self.excluded ^= {key}
        self.update_cell(str(self.cursor_row), "note", self._note(line))
        self.post_message(self.ExclusionsChanged(self))

    class ExclusionsChanged(Message):
        """The set of lines marked for exclusion changed."""

        def __init__(self, table: LinesTable) -> None:
            super().__init__()
            self.table = table


CONSTANT_ROWS: tuple[tuple[str, str], ...] = (
    ("omega_e", "omega_e cm-1"),
    ("omega_e_x_e", "omega_e x_e cm-1"),
    ("omega_e_y_e", "omega_e y_e cm-1"),
    ("B_e", "B_e cm-1"),
    ("alpha_e", "alpha_e cm-1"),
    ("gamma_e", "gamma_e cm-1"),
    ("D_e", "D_e cm-1"),
    ("beta_e", "beta_e cm-1"),
    ("H_e", "H_e cm-1"),
    ("r_e", "r_e Å"),
)
BAND_ROWS: tuple[tuple[str, str], ...] = (
    ("origin", "origin cm-1"),
    ("B_upper", "B' cm-1"),
    ("B_lower", "B'' cm-1"),
    ("D_upper", "D' cm-1"),
    ("D_lower", "D'' cm-1"),
    ("H_upper", "H' cm-1"),
    ("H_lower", "H'' cm-1"),
)


def reference_cell(reference: float | None, estimate: Estimate) -> Text:
    """The reference value at the fitted value's precision (so the two line up)."""
    if reference is None:
        return Text("—", justify="right", style="dim")
    return quantity_cells(Estimate(reference, estimate.sigma))[0]


def z_cell(z: float | None) -> Text:
    """Δ/σ, marked `!` beyond 3 (never by colour alone)."""
    if z is None:
        return Text("")
    mark = "!" if abs(z) >= 3 else ""
    return Text(f"{mark}{z:+.1f}", justify="right", style="bold" if mark else "")


class ConstantsTable(DataTable):
    """Band constants per band and molecular constants per isotopologue, each beside the
    reference its Δ/σ is computed against (the same model on the library's own lines)."""

    BINDINGS = bindings.TABLE

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(cursor_type="row", **kwargs)
        self.quantities: list[tuple[str, str]] = []  # (isotopologue, quantity) per row
        self.details: list[str] = []  # a sentence per row, shown under the table

    def on_mount(self) -> None:
        self.add_column("isotope", key="iso", width=7)
        self.add_column("quantity", key="quantity", width=17)
        self.add_column("fitted", key="value", width=12)
        self.add_column("±", key="sigma", width=9)
        self.add_column("reference", key="reference", width=11)
        self.add_column("Δ/σ", key="z", width=6)

    def fill(self, bands: Sequence[Band], constants: Sequence[IsotopologueConstants]) -> None:
        self.clear()
        self.quantities = []
        self.details = []
        for band in bands:
            iso, tag = band.isotopologue, band.band
            for key, label in BAND_ROWS:
                estimate = band.quantity(key)
                if estimate is None:
                    continue
                comparison = band.reference.get(key)
                value, sigma = quantity_cells(estimate)
                ref_cell = reference_cell(comparison.compared_reference if comparison else None, estimate)
                self._add(iso, f"{key}@{tag}", f"{label} {tag}", value, sigma, ref_cell,
                          z_cell(comparison.compared_z if comparison else None),
                          comparison_sentence(iso, f"{key} ({tag})", estimate, comparison))
            self._add(
                iso, "", f"rms {tag} n={band.n_lines}", number(band.rms, 4), Text(""), Text(""),
                Text(""), f"{iso} {tag}: {band.n_lines} lines in the fit, rms {band.rms} cm-1",
            )
        for constant in constants:
            iso = constant.isotopologue
            references = constant.reference
            for key, label in CONSTANT_ROWS:
                estimate = constant.constants.get(key)
                if estimate is None:
                    continue
                comparison = references.get(key)
                value, sigma = quantity_cells(estimate)
                ref_cell = reference_cell(comparison.compared_reference if comparison else None, estimate)
                self._add(iso, key, label, value, sigma, ref_cell, z_cell(comparison.compared_z if comparison else None),
                          comparison_sentence(iso, key, estimate, comparison))
        if self.row_count == 0:
            self.add_row(Text("no fitted constants for this run", style="dim"), "", "", "", "", "")

    def _add(
        self, iso: str, key: str, label: str, value: Text, sigma: Text, reference: Text, z: Text, detail: str
    ) -> None:
        self.quantities.append((iso, key))
        self.details.append(detail)
        self.add_row(plain(iso), plain(label), value, sigma, reference, z)

    def selected_quantity(self) -> tuple[str, str] | None:
        if not self.quantities or self.cursor_row >= len(self.quantities):
            return None
        iso, key = self.quantities[self.cursor_row]
        return (iso, key) if key else None


class ChecksTable(DataTable):
    """Each check with its status as a word and the reason."""

    BINDINGS = bindings.TABLE

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(cursor_type="row", **kwargs)
        self.details: list[str] = []

    def on_mount(self) -> None:
        self.add_column("status", key="status", width=7)
        self.add_column("check", key="name", width=18)
        self.add_column("reason", key="detail")

    def fill(self, checks: Sequence[Check], error: str | None = None) -> None:
        self.clear()
        self.details = []
        if error:
            self.details.append(f"file: {error}")
            self.add_row(check_text("fail"), plain("file"), plain(error))
        for check in checks:
            self.details.append(f"{check.name}: {check.detail}")
            self.add_row(check_text(check.status), plain(check.name), plain(check.detail))
        if self.row_count == 0:
            self.add_row(Text("", style="dim"), Text("no checks ran", style="dim"), Text(""))
