"""Every text form of a run's result, in one place: the aligned tables of `bandwatch process`,
the report files (summary.md, lines.csv, report.txt) and the sentences the interface shows
beside a fitted value. All read the typed `RunResult`; `assignment_label` is the one place an
assignment such as "H35Cl 1-0 R(3)" is written.

Plain text only (no colour, no markup); text that came from a file (names, titles, notes) is
made safe for a terminal by `safe_text` where it is printed.
"""
from __future__ import annotations

import csv
import io
import json
import math
import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from processing.estimate import Estimate, format_value_sigma
from processing.results import MOLECULAR_CONSTANTS, Assignment, Band, Check, Comparison, IsotopologueConstants, Line, RunResult
from processing.safe_text import safe_text
from processing.text_table import GAP as GAP  # re-exported, as are the table functions
from processing.text_table import REASON_SEPARATOR as REASON_SEPARATOR
from processing.text_table import fitted_table as fitted_table
from processing.text_table import reasons_line as reasons_line
from processing.text_table import table, tables_fitted_to

if TYPE_CHECKING:
    from processing.station.ledger import DecisionEvent, RunRecord


# ----------------------------------------------------------------------------- shared pieces
def assignment_label(assigned: Assignment | None, unassigned: str = "-") -> str:
    """e.g. "H35Cl 1-0 R(3)" (J of the lower level in brackets, trade convention);
    `unassigned` when there is none."""
    if assigned is None:
        return unassigned
    return f"{assigned.isotopologue} {assigned.v_upper}-{assigned.v_lower} {branch_label(assigned)}"


def branch_label(assigned: Assignment) -> str:
    """"R(3)": the branch and J'' of an assignment (a figure's marker beside its band's name)."""
    return f"{assigned.branch}({assigned.J_lower})"


def _q(estimate: Estimate | None) -> str:
    if estimate is None:
        return "-"
    return format_value_sigma(estimate.value, estimate.sigma)


def estimate_text(estimate: Estimate) -> str:
    """"10.5934(6) cm-1": value(sigma) and unit."""
    return f"{format_value_sigma(float(estimate.value), estimate.sigma)} {estimate.unit}"


def ordered_constants(entry: IsotopologueConstants) -> list[tuple[str, Estimate]]:
    """The fitted molecular constants in the order of the JSON object."""
    return [(name, estimate) for name in MOLECULAR_CONSTANTS if (estimate := entry.constants.get(name)) is not None]


def origin_comparisons(entry: IsotopologueConstants) -> dict[str, Comparison]:
    return {c.name: c for c in entry.origin_comparisons}


def B_v_comparisons(entry: IsotopologueConstants) -> dict[str, Comparison]:
    return {c.name: c for c in entry.B_v_comparisons}


def comparison_sentence(isotopologue: str, name: str, estimate: Estimate | None, comparison: Comparison | None) -> str:
    """One sentence on a fitted quantity: its value, the reference it is compared with (the
    same model on the library's lines), Δ/σ, the handbook value and the model."""
    if estimate is not None and isinstance(estimate.value, (int, float)) and math.isfinite(estimate.value):
        first = f"{isotopologue} {name}: fitted {estimate.value:.8g}"
        if estimate.sigma is not None:
            first += f" ± {estimate.sigma:.2g}"
    else:
        first = f"{isotopologue} {name}"
    parts = [first]
    if comparison is None:
        return first
    compared = comparison.compared_reference
    if compared is not None:
        text = f"reference {compared:.8g}"
        if comparison.reference_sigma:
            text += f" ± {comparison.reference_sigma:.2g}"
        if comparison.compared_z is not None:
            text += f": {comparison.compared_z:+.1f} σ"
        parts.append(text)
    handbook = comparison.handbook_value
    if handbook is not None:
        source = f" ({comparison.source})" if comparison.source else ""
        parts.append(f"handbook {handbook:.8g}{source}")
    model = comparison.model or comparison.effective_rule
    if model:
        parts.append(f"model: {model}")
    return "; ".join(parts)


# ----------------------------------------------------------------------------- reasons at a glance
CHECK_SHORT_NAMES = {
    "signal_to_noise": "S/N",
    "assigned_lines": "lines per band",
    "fit_rms": "fit rms",
    "y_axis": "y axis",
}
BRIEF_LENGTH = 40  # a brief longer than this is a sentence, not a glance


def check_short_name(name: str) -> str:
    """"signal_to_noise" -> "S/N": the name a check goes by in a run's one-line reasons."""
    return CHECK_SHORT_NAMES.get(name, name.replace("_", " "))


def _clause(detail: str) -> str:
    """The first clause of a check's reason, at most BRIEF_LENGTH characters."""
    first = detail.split(";", 1)[0].strip()
    return first if len(first) <= BRIEF_LENGTH else first[: BRIEF_LENGTH - 1].rstrip() + "…"


def check_briefs(check: Check, result: RunResult | None = None) -> list[str]:
    """What a warn or fail check found, in a few words with its number ("calibration +0.24
    cm-1", "fringes 0.004 A"); the baseline check can give more than one."""
    value, detail = check.value, check.detail
    finite = value is not None and math.isfinite(value)
    name = check.name
    if name == "calibration" and finite:
        if check.fit is not None and detail.startswith("wavenumber scale"):
            return [f"scale {check.fit.scale_ppm:+.0f} ppm"]
        return [f"calibration {value:+.2f} cm-1" if abs(value) >= 0.1 else f"calibration {value:+.3f} cm-1"]
    if name == "baseline" and result is not None and result.baseline is not None:
        baseline, found = result.baseline, []
        if "where nothing absorbs" in detail:
            found.append(f"baseline {baseline.offset_median:+.2f} A")
        if "tilt" in detail:
            found.append(f"tilt {baseline.tilt_per_1000_cm1:+.2f} A/1000 cm-1")
        if "fringes" in detail and baseline.fringes is not None:
            found.append(f"fringes {baseline.fringes.amplitude:.3f} A")
        if found:
            return found
    if name == "saturation" and finite:
        if "optically thick" in detail:
            return [f"optically thick (ratio {value:.2f})"]
        return [f"{value:.0f} lines saturated"]
    if name == "fit_rms" and finite:
        return [f"fit rms {100 * value:.0f}% of width"]
    if name == "signal_to_noise" and finite:
        return ["no line above noise"] if value == 0 else [f"S/N {value:.0f}"]
    if name == "assigned_lines" and finite:
        return ["no band assigned"] if value == 0 else [f"{value:.0f} lines in a band"]
    if name == "interferents" and finite:
        return [f"interferents: {value:.0f} lines"]
    if name == "temperature" and finite:
        return [f"temperature {value:.0f} K"]
    if name == "y_axis":
        return [f"y axis: {_clause(detail.split(': ', 1)[-1])}"]
    return [f"{check_short_name(name)}: {_clause(detail)}" if name not in detail else _clause(detail)]


def main_reasons(result: RunResult | None, limit: int = 2) -> tuple[str, ...]:
    """The one or two main reasons behind a run's verdict (fail before warn, in check order),
    "+N more" when there are others, and the checks that could not be made ("n/a: ...")."""
    if result is None:
        return ()
    checks = result.checks
    severe = [c for c in checks if c.status == "fail"] + [c for c in checks if c.status == "warn"]
    briefs = [brief for check in severe for brief in check_briefs(check, result)]
    out = briefs[:limit]
    if len(briefs) > limit:
        out.append(f"+{len(briefs) - limit} more")
    not_assessed = [check_short_name(c.name) for c in checks if c.status == "not_assessed"]
    if not_assessed:
        shown = ", ".join(not_assessed[:3]) + (f" +{len(not_assessed) - 3}" if len(not_assessed) > 3 else "")
        out.append(f"n/a: {shown}")
    return tuple(safe_text(text) for text in out)


def molecules_text(labels: Sequence[str]) -> str:
    """Isotopologues as their molecules, in order ("H35Cl, H37Cl, D35Cl" -> "HCl,DCl"): a short
    column; a label the library does not know ("unidentified-2885") stays as it is."""
    from processing.errors import BandwatchError
    from processing.species import load_library

    library = load_library()
    names: list[str] = []
    for label in labels:
        try:
            name = library.isotopologue(label).molecule
        except BandwatchError:
            name = label
        if name not in names:
            names.append(name)
    return safe_text(",".join(names))


def d_model_note(band: Band) -> str | None:
    """What the band fit did with D, when a reader could take D' and D'' as two fitted values:
    constrained equal (one D fitted), or held at the library's values."""
    model = band.d_model or ""
    if model == "common D":
        return "D' and D'' constrained equal (one common D fitted)"
    if "from the library" in model:
        return f"D: {model}"
    return None


def redo_description(settings: Mapping[str, object] | None) -> str:
    """A redo's request in words: "species H35Cl, H37Cl; H35Cl 1-0 P branch J+1; 1 line
    excluded by the operator (2906.8980 cm-1)"; "" for a run that is not a redo."""
    if not settings:
        return ""
    parts: list[str] = []
    species = settings.get("species")
    if isinstance(species, list | tuple):
        parts.append("species " + (", ".join(str(s) for s in species) if species else "detected"))
    for offset in settings.get("j_offsets") or ():  # type: ignore[attr-defined]
        if isinstance(offset, list | tuple) and len(offset) == 5:
            iso, v_upper, v_lower, branch, shift = offset
            parts.append(f"{iso} {v_upper}-{v_lower} {branch} branch J{int(shift):+d}")
    excluded = settings.get("excluded_positions_cm1")
    if isinstance(excluded, list | tuple) and excluded:
        where = ", ".join(f"{float(x):.4f}" for x in excluded[:4]) + (" …" if len(excluded) > 4 else "")
        parts.append(f"{len(excluded)} line{'s' if len(excluded) != 1 else ''} excluded by the operator ({where} cm-1)")
    for key, label in (("threshold_sigma", "threshold {:g} sigma"), ("max_shift_cm1", "shift up to {:g} cm-1"),
                       ("temperature_K", "predictions at {:g} K")):
        value = settings.get(key)
        if isinstance(value, int | float):
            parts.append(label.format(value))
    return safe_text("; ".join(parts) if parts else "the station's settings as they are")


# ----------------------------------------------------------------------------- process tables
def render_spectrum_summary(result: RunResult) -> list[str]:
    s = result.spectrum
    assert s is not None
    spacing = f"{s.spacing_cm1:.4f}" if s.spacing_cm1 is not None else "-"
    resolution = f"{s.resolution_cm1:g}" if s.resolution_cm1 is not None else "not stated"
    out = [
        table(
            ["kind", "points", "first cm-1", "last cm-1", "spacing cm-1", "y read as", "resolution cm-1", "format"],
            [[s.kind, str(s.points), f"{s.first_cm1:.4f}", f"{s.last_cm1:.4f}", spacing, s.y_units, resolution, s.format]],
            right={1, 2, 3, 4},
        )
    ]
    out += [f"   note: {note}" for note in s.notes]
    return out


def line_flags(line: Line) -> str:
    """s = saturated, b = blended, p = profile on too few points."""
    return "".join(flag for flag, on in (("s", line.saturated), ("b", line.blended), ("p", line.few_points)) if on)


def render_lines(result: RunResult) -> list[str]:
    rows = []
    for line in result.lines:
        assigned = line.assigned
        rows.append(
            [
                f"{line.position.value:.4f}",
                f"{line.position.sigma:.4f}" if line.position.sigma is not None else "-",
                f"{line.height:.4f}",
                assignment_label(assigned),
                f"{assigned.calc:.4f}" if assigned else "",
                f"{assigned.residual:+.4f}" if assigned else "",
                f"{assigned.confidence:.2f}" if assigned else "",
                line_flags(line),
                "" if assigned else (line.likely_cause or ""),
            ]
        )
    if not rows:
        return ["   no lines found above the detection threshold"]
    return [
        table(
            ["obs cm-1", "sigma", "height", "assignment", "calc cm-1", "obs-calc", "conf", "flags", "likely cause"],
            rows,
            right={0, 1, 2, 4, 5, 6},
        ),
        "   flags: s = saturated, b = blended, p = profile on too few points (conservative sigma)",
    ]


BAND_SYMBOLS = (("origin", "nu0"), ("B_upper", "B'"), ("B_lower", "B''"), ("D_upper", "D'"), ("D_lower", "D''"),
                ("H_upper", "H'"), ("H_lower", "H''"))


def render_bands(result: RunResult) -> list[str]:
    if not result.bands:
        return ["   no band could be assigned"]
    rows = [
        [b.label, str(b.n_lines), f"{b.rms:.4f}", _q(b.origin), _q(b.B_upper), _q(b.B_lower), _q(b.D_upper), _q(b.D_lower)]
        for b in result.bands
    ]
    out = [table(["band", "lines", "rms", "nu0 cm-1", "B' cm-1", "B'' cm-1", "D' cm-1", "D'' cm-1"], rows, right={1, 2, 3, 4, 5, 6, 7})]
    sextic = [[b.label, _q(b.H_upper), _q(b.H_lower)] for b in result.bands if b.H_upper is not None]
    if sextic:
        out.append(table(["band", "H' cm-1", "H'' cm-1"], sextic, right={1, 2}))
    reference_rows = []
    for b in result.bands:
        for key, label in BAND_SYMBOLS:
            comparison = b.reference.get(key)
            value = b.quantity(key)
            if comparison is None or value is None:
                continue
            compared, z = comparison.compared_reference, comparison.compared_z
            reference_rows.append([
                b.label, label, _q(value),
                format_value_sigma(compared, comparison.reference_sigma) if compared is not None else "-",
                "" if z is None else f"{z:+.1f}",
                f"{comparison.handbook:.8g}" if comparison.handbook is not None else "",
            ])
    if reference_rows:
        out.append("   against the reference for each band model (the same model fitted to the library's positions of the same lines):")
        out.append(table(["band", "constant", "fitted", "reference", "z", "library B_v/G"], reference_rows, right={2, 3, 4, 5}))
    cd_rows = []
    for b in result.bands:
        for cd in b.combination_differences:
            label = "B''" if cd.state == "lower" else "B'"
            cd_rows.append([b.label, f"{label} (v={cd.v})", str(cd.n_pairs), _q(cd.B), _q(cd.D)])
    if cd_rows:
        out.append("   cross-check from combination differences (one state each):")
        out.append(table(["band", "constant", "pairs", "B cm-1", "D cm-1"], cd_rows, right={2, 3, 4}))
    return out


CONSTANT_ROWS = (
    ("omega_e", "omega_e", "cm-1"),
    ("omega_e_x_e", "omega_e x_e", "cm-1"),
    ("omega_e_y_e", "omega_e y_e", "cm-1"),
    ("B_e", "B_e", "cm-1"),
    ("alpha_e", "alpha_e", "cm-1"),
    ("gamma_e", "gamma_e", "cm-1"),
    ("D_e", "D_e", "cm-1"),
    ("beta_e", "beta_e", "cm-1"),
    ("H_e", "H_e", "cm-1"),
    ("r_e", "r_e", "angstrom"),
)


def _comparison_row(isotopologue: str, label: str, estimate: Estimate, unit: str, comparison: Comparison | None) -> list[str]:
    reference_text = difference = handbook = ""
    z = None
    if comparison is not None:
        reference, z = comparison.compared_reference, comparison.compared_z
        if reference is not None:
            reference_text = format_value_sigma(reference, comparison.reference_sigma)
            if reference:
                difference = f"{100 * (estimate.value - reference) / reference:+.3f}%"
        if comparison.handbook_value is not None:
            handbook = f"{comparison.handbook_value:.8g}"
    return [isotopologue, label, format_value_sigma(estimate.value, estimate.sigma), unit, reference_text, difference,
            "" if z is None else f"{z:+.1f}", handbook]


def render_constants(result: RunResult) -> list[str]:
    if not result.constants:
        return []
    out = ["   molecular constants (one term-value fit of all lines of each isotopologue), each against the reference"
           " for the model fitted (the same fit of the library's positions of the same lines):"]
    rows = []
    for entry in result.constants:
        references = entry.reference
        for key, label, unit in CONSTANT_ROWS:
            estimate = entry.constants.get(key)
            if estimate is None:
                continue
            rows.append(_comparison_row(entry.isotopologue, label, estimate, unit, references.get(key)))
        origins = origin_comparisons(entry)
        for tag, estimate in entry.band_origins.items():
            rows.append(_comparison_row(entry.isotopologue, f"nu0 {tag}", estimate, "cm-1", origins.get(tag)))
        rotational = B_v_comparisons(entry)
        for v, estimate in entry.B_v.items():
            rows.append(_comparison_row(entry.isotopologue, f"B_{v}", estimate, "cm-1", rotational.get(f"B_{v}")))
    out.append(table(["isotopologue", "constant", "fitted", "unit", "reference", "diff", "z", "handbook"], rows, right={2, 4, 5, 6, 7}))
    for entry in result.constants:
        if entry.held:
            out.append(f"   {entry.isotopologue}: held at library values: " + ", ".join(
                f"{name} {format_value_sigma(held.value, held.sigma)}" for name, held in entry.held.items()))
        if entry.model:
            out.append(f"   {entry.isotopologue} model: {entry.model}")
    derived_rows = []
    for entry in result.constants:
        for name, d in entry.derived.items():
            derived_rows.append([entry.isotopologue, name, format_value_sigma(d.value, d.sigma), d.unit,
                                 format_value_sigma(d.reference, d.reference_sigma) if d.reference is not None else "",
                                 "" if d.z is None else f"{d.z:+.1f}", d.model])
    if derived_rows:
        out.append("   derived (each under the model named):")
        out.append(table(["isotopologue", "quantity", "value", "unit", "reference", "z", "model"], derived_rows, right={2, 4, 5}))
    for fit in result.mass_reduced or ():
        out.append(f"   mass-reduced fit {fit.molecule} ({', '.join(fit.isotopologues)}): rms {fit.rms_cm1:.4f} cm-1")
        mr_rows = []
        for label, member in fit.per_isotopologue.items():
            omega = member.constants.get("omega_e")
            mean, mean_sigma = member.residual_mean, member.residual_mean_sigma
            mr_rows.append([
                label,
                format_value_sigma(omega.value, omega.sigma) if omega else "-",
                format_value_sigma(omega.reference, omega.reference_sigma) if omega and omega.reference is not None else "-",
                f"{omega.z:+.1f}" if omega and omega.z is not None else "",
                "-" if mean is None else (f"{mean:+.4f}" + (f" +- {mean_sigma:.4f}" if mean_sigma else "")),
                "-" if member.residual_rms is None else f"{member.residual_rms:.4f}",
            ])
        out.append(table(["isotopologue", "omega_e cm-1", "reference", "z", "mean obs-calc", "rms"], mr_rows, right={1, 2, 3, 4, 5}))
        out += [f"   note: {note}" for note in fit.notes]
    return out


def status_word(status: str) -> str:
    """"not_assessed" -> "not assessed"."""
    return status.replace("_", " ")


def render_checks(result: RunResult) -> list[str]:
    if not result.checks:
        return []
    rows = [[status_word(c.status).upper(), c.name, c.detail] for c in result.checks]
    reasons = main_reasons(result)
    said = f" ({reasons_line(reasons)})" if reasons else ""
    return [table(["status", "check", "reason"], rows), f"   verdict: {str(result.verdict).upper()}{said}"]


def render_result(result: RunResult, width: int | None = None) -> str:
    """The aligned tables of one run; every line made safe for a terminal (file names, titles
    and notes come from the file). With `width` (a terminal's), tables are fitted to it (see
    `table`) and sentences wrapped between words."""
    with tables_fitted_to(width):
        lines = [safe_text(line) for line in "\n".join(_result_lines(result)).split("\n")]
    if width is None:
        return "\n".join(lines)
    out = []
    for line in lines:
        if len(line) <= width:
            out.append(line)
            continue
        indent = " " * (len(line) - len(line.lstrip()))
        out += textwrap.wrap(line, width, initial_indent="", subsequent_indent=indent + "  ") or [line]
    return "\n".join(out)


def _result_lines(result: RunResult) -> list[str]:
    out = [f"== {result.file}"]
    if result.status != "processed" or result.spectrum is None:
        out.append(f"   {result.status}: {result.error}")
        return out
    out += render_spectrum_summary(result)
    if result.spectrum.kind == "spectrum" or result.lines:
        out.append("")
        out += render_lines(result)
        out.append("")
        out += render_bands(result)
        constants = render_constants(result)
        if constants:
            out.append("")
            out += constants
        out.append("")
        out += render_checks(result)
    for note in result.notes or ():
        out.append(f"   note: {note}")
    return out


# ----------------------------------------------------------------------------- report files
LINE_COLUMNS = (
    "position_cm1",
    "sigma_cm1",
    "height",
    "width_cm1",
    "calc_cm1",
    "isotopologue",
    "branch",
    "J_lower",
    "assignment",
    "obs_minus_calc_cm1",
)


def _cell(value: float | int | str | None) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if not math.isfinite(value) else repr(value)
    return str(value)


def line_row(line: Line) -> dict[str, str]:
    """One line as a lines.csv row (blank where a value is absent)."""
    assigned = line.assigned
    return {
        "position_cm1": _cell(line.position.value),
        "sigma_cm1": _cell(line.position.sigma),
        "height": _cell(line.height),
        "width_cm1": _cell(line.width),
        "calc_cm1": _cell(assigned.calc) if assigned else "",
        "isotopologue": assigned.isotopologue if assigned else "",
        "branch": assigned.branch if assigned else "",
        "J_lower": _cell(assigned.J_lower) if assigned else "",
        "assignment": assignment_label(assigned, ""),
        "obs_minus_calc_cm1": _cell(assigned.residual) if assigned else "",
    }


def lines_csv(result: RunResult) -> str:
    """The result's lines as CSV with LINE_COLUMNS."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(LINE_COLUMNS)
    writer.writerows(list(line_row(line).values()) for line in result.lines)  # its keys are LINE_COLUMNS, in order
    return buffer.getvalue()


def _reference_text(comparison: Comparison | None) -> str:
    """" (reference R, z Z)": the value a constant's z is computed against (the reference for
    the model fitted), never a number it was not compared with."""
    if comparison is None or comparison.compared_reference is None:
        return ""
    z = comparison.compared_z
    return f" (reference {comparison.compared_reference:.8g}" + (f", z {z:+.1f})" if z is not None else ")")


def summary_markdown(result: RunResult, run_id: int, version: int, body: str | None = None) -> str:
    """A short human summary of one run (summary.md): its title, then `summary_body` (`body`
    when a station worker already wrote it)."""
    return summary_with_title(run_id, version, result.file, summary_body(result) if body is None else body)


def summary_with_title(run_id: int, version: int, file: str, body: str) -> str:
    """summary.md: the run's title (its ledger id and version, known once recorded), then `body`."""
    title = safe_text(f"# Run {run_id} v{version}: {Path(file).name}")
    return f"{title}\n\n{body}"


def summary_body(result: RunResult) -> str:
    """summary.md below its title: all that does not depend on the run's ledger id."""
    out = [
        f"- file: `{result.file}`",
        f"- sha256: `{result.sha256}`",
        f"- status: {result.status}",
        f"- verdict: **{result.verdict or '-'}**",
    ]
    reasons = main_reasons(result)
    if reasons:
        out.append(f"- reasons: {reasons_line(reasons)}")
    if result.error:
        out.append(f"- error: {result.error}")
    spectrum = result.spectrum
    if spectrum is not None:
        out.append(f"- spectrum: {spectrum.points} points, {spectrum.first_cm1:.4f} to {spectrum.last_cm1:.4f} cm-1, format {spectrum.format}")
    out.append(f"- lines found: {len(result.lines)}")
    if result.bands:
        out += ["", "## Bands", "", "| isotopologue | band | origin | B_upper | B_lower | lines | rms cm-1 |",
                "|---|---|---|---|---|---|---|"]
        for band in result.bands:
            out.append(
                f"| {band.isotopologue} | {band.band} | {estimate_text(band.origin)} | {estimate_text(band.B_upper)}"
                f" | {estimate_text(band.B_lower)} | {_cell(band.n_lines)} | {band.rms:.4g} |"
            )
    if result.constants:
        out += ["", "## Constants", ""]
        for entry in result.constants:
            references = entry.reference
            values = ", ".join(
                f"{name} = {estimate_text(estimate)}{_reference_text(references.get(name))}"
                for name, estimate in ordered_constants(entry)
            )
            out.append(f"- {entry.isotopologue}: {values}")
    if result.checks:
        out += ["", "## Checks", ""]
        for check in result.checks:
            out.append(f"- {check.name}: {status_word(check.status)} {check.detail}".rstrip())
    return "\n".join(safe_text(line) for line in out) + "\n"  # names and titles come from files


def run_report(run: RunRecord, decisions: Sequence[DecisionEvent]) -> str:
    """report.txt: one run with its verdict, decision trail, lines, constants and checks."""
    result = run.result
    out = [
        f"bandwatch report: run {run.run_id} ({run.name}, version {run.version})",
        f"file        {run.path}",
        f"sha256      {run.sha256 or '-'}",
        f"received    {run.received_at}",
        f"processed   {run.processed_at or '-'}",
        f"status      {run.status}",
        f"verdict     {(run.verdict or '-').upper()}",
        f"species     {', '.join(run.species) or '-'}",
        f"decision    {run.decision or 'pending'}"
        + (f" by {run.operator}" if run.operator else "")
        + (f": {run.decision_reason}" if run.decision_reason else ""),
    ]
    if run.settings:
        out.append(f"settings    {json.dumps(run.settings, sort_keys=True)}")
    if run.provenance is not None:
        made = run.provenance
        out.append(f"made with   analysis {made.analysis_version}, library {made.library_hash}, settings {made.settings_hash}")
    if run.error:
        out.append(f"error       {run.error}")
    if decisions:
        out.append("")
        out.append("decision trail")
        for event in decisions:
            out.append(f"  {event.at}  {event.action:<6} {event.operator or '-':<10} {event.reason}")
    if result is None:
        return "\n".join(safe_text(line) for line in out) + "\n"
    if result.lines:
        out.append("")
        out.append(f"{'obs cm-1':>12} {'assignment':<20} {'calc cm-1':>12} {'obs-calc':>9}")
        for line in sorted(result.lines, key=lambda ln: -float(ln.position.value)):
            assigned = line.assigned
            calc = f"{assigned.calc:.4f}" if assigned else "-"
            residual = f"{assigned.residual:.4f}" if assigned else "-"
            out.append(f"{line.position.value:12.4f} {assignment_label(assigned, 'unassigned'):<20} {calc:>12} {residual:>9}")

    def quantities(label: str, named: Sequence[tuple[str, Estimate | None]]) -> list[str]:
        rows = []
        for key, estimate in named:
            if estimate is None:
                continue
            sigma_text = f" ± {estimate.sigma:.2g}" if estimate.sigma is not None else ""
            rows.append(f"  {label:<8} {key:<12} {estimate.value:.8g}{sigma_text} {estimate.unit}")
        return rows

    if result.bands:
        out += ["", "bands"]
        for band in result.bands:
            out += quantities(band.isotopologue, [(key, band.quantity(key)) for key, _ in BAND_SYMBOLS])
    if result.constants:
        out += ["", "constants"]
        for entry in result.constants:
            out += quantities(entry.isotopologue, ordered_constants(entry))
    if result.checks:
        out += ["", "checks"]
        for check in result.checks:
            out.append(f"  {check.status.upper():<5} {check.name}: {check.detail}")
    return "\n".join(safe_text(line) for line in out) + "\n"
