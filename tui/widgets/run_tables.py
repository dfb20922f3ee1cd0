"""The tables of the main screen: the run list and, for the selected run, lines, constants, checks.

Each table fills itself from ledger records or the typed result and only formats: no physics
is computed here. Columns fit the terminal (`FittedTable`): what is left out at 80 columns is
said in full on the line under the table.
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from rich.text import Text
from textual.coordinate import Coordinate
from textual.message import Message

from processing.estimate import Estimate
from processing.local_time import clock, zone_name
from processing.result_text import (
    assignment_label,
    comparison_sentence,
    d_model_note,
    line_flags,
    molecules_text,
    reasons_line,
)
from processing.results import Band, Check, IsotopologueConstants, Line
from processing.safe_text import safe_text
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
from tui.widgets.fitted_table import Column, FittedTable
from tui.widgets.spectrum_plot import band_view

SELECTED_MARK = "▸"  # the selected run, marked by a sign as well as by the cursor's colour


# whose run, when several instruments share the list (never left out before the decision)
INSTRUMENT_COLUMN = Column("instrument", "instrument", 10, min_width=6, drop=1, fit_content=True)


class RunList(FittedTable):
    """Runs newest first: time, (instrument,) file, version, molecules found, verdict,
    decision, reasons."""

    BINDINGS = bindings.TABLE
    COLUMNS = (
        Column("time", "time", 9, drop=3),
        Column("file", "file", 26, min_width=12, fit_content=True),
        Column("version", "v", 2, drop=5),
        Column("species", "species", 9, min_width=7, drop=4),
        Column("verdict", "verdict", 12),
        Column("decision", "decision", 8, drop=2),
        Column("reasons", "reasons", 24, min_width=16, drop=6, grow=True),
    )

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(zebra_stripes=False, **kwargs)
        self.run_ids: list[int] = []
        self.marked: str | None = None
        self.with_instrument = False
        self.COLUMNS = self._columns()

    def _columns(self) -> tuple[Column, ...]:
        """The columns: the time's heading names the local zone; the instrument column only
        when runs of several instruments (or a shared server) are listed."""
        columns = []
        for column in type(self).COLUMNS:
            if column.key == "time":
                column = Column(column.key, f"time {zone_name()}", column.width, column.min_width, column.drop, column.grow)
            columns.append(column)
            if column.key == "time" and self.with_instrument:
                columns.append(INSTRUMENT_COLUMN)
        return tuple(columns)

    def show_instruments(self, shown: bool) -> None:
        """Add or take away the instrument column (it appears with the next `fill`)."""
        if shown != self.with_instrument:
            self.with_instrument = shown
            self.COLUMNS = self._columns()

    def fill(
        self,
        runs: Iterable[RunRecord],
        busy: Iterable[str] = (),
        keep_run_id: int | None = None,
        problems: dict[str, str] | None = None,
        waiting: Mapping[str, str] | None = None,
    ) -> None:
        """Replace the rows: files the station could not record, files in progress (being
        analysed, or waiting for the rest of the file), then runs."""
        rows: list[tuple[str, dict[str, Text]]] = []
        self.run_ids = []
        waiting = waiting or {}
        for path, problem in (problems or {}).items():
            rows.append((f"problem:{path}", self._file_row(path, "problem", problem)))
        for path in busy:
            state = "waiting" if path in waiting else "busy"
            rows.append((f"{state}:{path}", self._file_row(path, state, waiting.get(path, "being analysed"))))
        for run in runs:
            self.run_ids.append(run.run_id)
            rows.append((str(run.run_id), {
                "time": Text(" " + clock(run.received_at)),
                "instrument": plain(run.instrument) if run.instrument else Text(""),
                "file": plain(run.name),
                "version": Text(str(run.version), justify="right"),
                "species": plain(molecules_text(run.species) or "—"),
                "verdict": verdict_text(run.status, run.verdict),
                "decision": decision_text(run.decision, run.superseded_by is not None),
                "reasons": plain(reasons_line(run.reasons) if run.status == "processed" else short_reason(run)),
            }))
        self.marked = None
        self.set_rows(rows)
        if keep_run_id is not None and str(keep_run_id) in self.rows:
            self.move_cursor(row=self.get_row_index(str(keep_run_id)), animate=False)
        self.mark_selected()

    @staticmethod
    def _file_row(path: str, state: str, reason: str) -> dict[str, Text]:
        return {
            "time": Text(" now", style="dim"), "file": plain(path.rsplit("/", 1)[-1]),
            "verdict": verdict_text(state, None), "reasons": plain(reason),
        }

    def mark_selected(self) -> None:
        """Put the selection sign on the cursor's row (and take it off the row it was on)."""
        key = self.selected_key()
        if key == self.marked:
            return
        for row_key, sign in ((self.marked, " "), (key, SELECTED_MARK)):
            if row_key is None:
                continue
            cells = dict(self.row_cells).get(row_key)
            if cells is not None:
                self.set_cell(row_key, "time", Text(sign + cells["time"].plain[1:], style=cells["time"].style))
        self.marked = key

    def watch_cursor_coordinate(self, old: Coordinate, new: Coordinate) -> None:
        super().watch_cursor_coordinate(old, new)
        self.mark_selected()

    def selected_run_id(self) -> int | None:
        key = self.selected_key()
        if key is None or not key.isdigit():
            return None
        return int(key)

    def selected_key(self) -> str | None:
        """The row key: a run id, "busy:PATH", "waiting:PATH" or "problem:PATH"."""
        if self.row_count == 0 or not self.columns:
            return None
        return self.coordinate_to_cell_key((self.cursor_row, 0)).row_key.value


def short_reason(run: RunRecord) -> str:
    """An unreadable or failed run's reason without the file's path in front."""
    if not run.error:
        return ""
    error = safe_text(run.error)
    path = safe_text(run.path)
    if error.startswith(path):
        error = error[len(path):].lstrip(":0123456789 ") or error
    return error


class LinesTable(FittedTable):
    """Observed lines: position, uncertainty, height, signal-to-noise, assignment, calculated
    position, obs-calc, confidence, flags and a note; `x` marks a line for exclusion."""

    BINDINGS = bindings.LINES
    COLUMNS = (
        Column("obs", "obs cm-1", 10),
        Column("sigma", "±", 6, drop=4),
        Column("height", "height", 6, drop=6),
        Column("snr", "S/N", 5, drop=5),
        Column("assignment", "assignment", 17, min_width=16),
        Column("calc", "calc cm-1", 10, drop=7),
        Column("residual", "obs-calc", 8),
        Column("confidence", "conf", 4, drop=3),
        Column("flags", "flags", 5, drop=2),
        Column("note", "note", 18, min_width=16, drop=1, grow=True),
    )

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.lines: list[Line] = []
        self.excluded: set[float] = set()
        self.operator_excluded: set[float] = set()

    def fill(self, lines: Sequence[Line], excluded: set[float] | None = None,
             operator_excluded: Iterable[float] = ()) -> None:
        """`excluded`: lines marked for the next redo; `operator_excluded`: positions this
        run's own redo request left out."""
        self.lines = sorted(lines, key=lambda line: line.key, reverse=True)
        self.excluded = set(excluded or ())
        self.operator_excluded = {round(float(p), 4) for p in operator_excluded}
        rows = []
        for index, line in enumerate(self.lines):
            assigned = line.assigned
            sigma = line.position.sigma
            rows.append((str(index), {
                "obs": number(line.position.value, 4),
                "sigma": number(sigma, 4) if sigma is not None else Text("", justify="right"),
                "height": number(line.height, 3),
                "snr": number(line.snr, 0) if line.snr is not None else Text("—", justify="right", style="dim"),
                "assignment": plain(assignment_label(assigned)) if assigned else self._unassigned(line),
                "calc": number(assigned.calc, 4) if assigned else Text("—", justify="right", style="dim"),
                "residual": Text(f"{assigned.residual:+.4f}", justify="right") if assigned else Text("—", justify="right", style="dim"),
                "confidence": number(assigned.confidence, 2) if assigned else Text(""),
                "flags": plain(line_flags(line)),
                "note": self._note(line),
            }))
        self.set_rows(rows)

    def _unassigned(self, line: Line) -> Text:
        if self._operator_excluded(line):
            return Text("x excluded", style="bold")
        return Text("? unassigned", style="bold")

    def _operator_excluded(self, line: Line) -> bool:
        return line.assigned is None and (
            line.likely_cause == "excluded by the operator"
            or any(abs(line.key - p) < 1e-3 for p in self.operator_excluded)
        )

    def _note(self, line: Line) -> Text:
        if line.key in self.excluded:
            return Text("x EXCLUDE on redo", style="bold")
        if self._operator_excluded(line):
            return Text("excluded by the operator (redo)")
        notes = [line.likely_cause] if line.likely_cause else []
        assigned = line.assigned
        if line.saturated:
            notes.append("saturated")
        if line.blended or (assigned is not None and assigned.blended):
            notes.append("blended")
        if line.ringing:
            notes.append("ringing")
        if assigned is not None and not assigned.used_in_fit:
            notes.append("not in fit")
        return plain(", ".join(notes))

    def detail(self, row: int) -> str:
        """Everything about one line in a sentence (columns left out at 80 columns too)."""
        if not 0 <= row < len(self.lines):
            return ""
        line = self.lines[row]
        assigned = line.assigned
        parts = [f"{line.position.value:.4f}" + (f" ± {line.position.sigma:.4f}" if line.position.sigma is not None else "") + " cm-1"]
        parts.append(f"height {line.height:.4g} A")
        if line.width is not None:
            parts.append(f"width {line.width:.3g} cm-1")
        if line.snr is not None:
            parts.append(f"S/N {line.snr:.0f}")
        if assigned is not None:
            parts.append(f"{assignment_label(assigned)}: calc {assigned.calc:.4f}, obs-calc {assigned.residual:+.4f},"
                         f" confidence {assigned.confidence:.2f}")
        flags = [word for word, on in (("saturated", line.saturated), ("blended", line.blended),
                                        ("profile on few points", line.few_points), ("ringing", line.ringing)) if on]
        if flags:
            parts.append(", ".join(flags))
        note = self._note(line).plain
        if note and note not in parts[-1]:
            parts.append(note)
        return safe_text("; ".join(parts))

    def action_toggle_exclude(self) -> None:
        if not self.lines:
            return
        line = self.lines[self.cursor_row]
        key = line.key
        self.excluded ^= {key}
        self.set_cell(str(self.cursor_row), "note", self._note(line))
        self.post_message(self.ExclusionsChanged(self))

    def action_zoom_here(self) -> None:
        """Show the highlighted line in the plot, zoomed on it."""
        if self.lines:
            line = self.lines[self.cursor_row]
            width = line.width if line.width and line.width > 0 else 0.5
            self.post_message(ZoomRequested(float(line.position.value), max(2.0, 20 * width)))

    class ExclusionsChanged(Message):
        """The set of lines marked for exclusion changed."""

        def __init__(self, table: LinesTable) -> None:
            super().__init__()
            self.table = table


class ZoomRequested(Message):
    """Show the plot zoomed on `centre_cm1` with `span_cm1` in view (a line or a band)."""

    def __init__(self, centre_cm1: float, span_cm1: float) -> None:
        super().__init__()
        self.centre_cm1 = centre_cm1
        self.span_cm1 = span_cm1


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


def band_rows(band: Band) -> list[tuple[str, str]]:
    """The band's rows (key, label): D' and D'' as one row when the fit constrained them equal."""
    rows = []
    for key, label in BAND_ROWS:
        if key == "D_lower" and band.d_model == "common D":
            continue
        if key == "D_upper" and band.d_model == "common D":
            label = "D'=D'' cm-1"
        rows.append((key, label))
    return rows


class ConstantsTable(FittedTable):
    """Band constants per band and molecular constants per isotopologue, each beside the
    reference its Δ/σ is computed against (the same model on the library's own lines)."""

    BINDINGS = [*bindings.TABLE, *bindings.CONSTANTS]
    COLUMNS = (
        Column("iso", "isotopologue", 12),
        Column("quantity", "quantity", 17, min_width=14),
        Column("value", "fitted", 12),
        Column("sigma", "±", 9),
        Column("reference", "reference", 11, drop=1),
        Column("z", "Δ/σ", 6),
    )

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.quantities: list[tuple[str, str]] = []  # (isotopologue, quantity) per row
        self.details: list[str] = []  # a sentence per row, shown under the table
        self.regions: list[tuple[float, float] | None] = []  # the band's lines, cm-1, per row

    def fill(self, bands: Sequence[Band], constants: Sequence[IsotopologueConstants],
             band_regions: Mapping[str, tuple[float, float]] | None = None) -> None:
        """`band_regions`: (lowest, highest) assigned line of each band by "ISO v'-v''"."""
        self.quantities, self.details, self.regions = [], [], []
        rows: list[tuple[str, dict[str, Text]]] = []
        regions = band_regions or {}
        for band in bands:
            iso, tag = band.isotopologue, band.band
            region = regions.get(f"{iso} {tag}")
            note = d_model_note(band)
            for key, label in band_rows(band):
                estimate = band.quantity(key)
                if estimate is None:
                    continue
                comparison = band.reference.get(key)
                value, sigma = quantity_cells(estimate)
                ref_cell = reference_cell(comparison.compared_reference if comparison else None, estimate)
                detail = comparison_sentence(iso, f"{key} ({tag})", estimate, comparison)
                if note is not None and key in ("D_upper", "D_lower"):
                    detail = f"{detail}; {note}"
                self._add(rows, iso, f"{key}@{tag}", f"{label} {tag}", value, sigma, ref_cell,
                          z_cell(comparison.compared_z if comparison else None), detail, region)
            self._add(
                rows, iso, "", f"rms {tag} n={band.n_lines}", number(band.rms, 4), Text(""), Text(""),
                Text(""), f"{iso} {tag}: {band.n_lines} lines in the fit, rms {band.rms:.4f} cm-1", region,
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
                self._add(rows, iso, key, label, value, sigma, ref_cell, z_cell(comparison.compared_z if comparison else None),
                          comparison_sentence(iso, key, estimate, comparison), None)
        if not rows:
            rows.append(("none", {"iso": Text("no fitted constants for this run", style="dim")}))
        self.set_rows(rows)

    def _add(
        self, rows: list[tuple[str, dict[str, Text]]], iso: str, key: str, label: str, value: Text, sigma: Text,
        reference: Text, z: Text, detail: str, region: tuple[float, float] | None,
    ) -> None:
        self.quantities.append((iso, key))
        self.details.append(detail)
        self.regions.append(region)
        rows.append((str(len(rows)), {"iso": plain(iso), "quantity": plain(label), "value": value, "sigma": sigma,
                                      "reference": reference, "z": z}))

    def selected_quantity(self) -> tuple[str, str] | None:
        if not self.quantities or self.cursor_row >= len(self.quantities):
            return None
        iso, key = self.quantities[self.cursor_row]
        return (iso, key) if key else None

    def action_zoom_here(self) -> None:
        """Show the highlighted row's band in the plot."""
        if self.regions and self.cursor_row < len(self.regions):
            region = self.regions[self.cursor_row]
            if region is not None:
                self.post_message(ZoomRequested(*band_view(*region)))


class ChecksTable(FittedTable):
    """Each check with its status as a word and its whole reason (wrapped, never cut)."""

    BINDINGS = bindings.TABLE
    ROW_HEIGHT = None
    COLUMNS = (
        Column("status", "status", 7),
        Column("name", "check", 15, min_width=10),
        Column("detail", "reason", 30, min_width=20, grow=True),
    )

    def fill(self, checks: Sequence[Check], error: str | None = None) -> None:
        rows: list[tuple[str, dict[str, Text]]] = []
        if error:
            rows.append(("file", {"status": check_text("fail"), "name": plain("file"), "detail": plain(error)}))
        for check in checks:
            rows.append((str(len(rows)), {"status": check_text(check.status), "name": plain(check.name),
                                          "detail": plain(check.detail)}))
        if not rows:
            rows.append(("none", {"name": Text("no checks ran", style="dim")}))
        self.set_rows(rows)
