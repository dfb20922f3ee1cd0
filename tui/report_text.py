"""Plain-text rendering of a RunResult for `bandwatch process` (aligned tables, no colour)."""
from __future__ import annotations

from typing import Any

from processing.estimate import format_value_sigma
from processing.pipeline import RunResult
from processing.safe_text import safe_text
from tui.comparison_text import comparison_z, reference_value


def table(headers: list[str], rows: list[list[str]], right: set[int] | None = None) -> str:
    """Columns padded to their widest cell; indices in `right` right-justified."""
    right = right or set()
    widths = [len(h) for h in headers]
    for row in rows:
        widths = [max(w, len(cell)) for w, cell in zip(widths, row)]

    def fmt(cells: list[str]) -> str:
        return "  ".join(
            cell.rjust(w) if i in right else cell.ljust(w) for i, (cell, w) in enumerate(zip(cells, widths))
        ).rstrip()

    lines = [fmt(headers), fmt(["-" * w for w in widths])]
    lines += [fmt(row) for row in rows]
    return "\n".join(lines)


def _q(q: dict[str, Any] | None) -> str:
    if not q:
        return "-"
    return format_value_sigma(q["value"], q.get("sigma"))


def assignment_label(assigned: dict[str, Any] | None) -> str:
    """e.g. "H35Cl 1-0 R(3)"; "-" when unassigned."""
    if not assigned:
        return "-"
    return f"{assigned['isotopologue']} {assigned['v_upper']}-{assigned['v_lower']} {assigned['branch']}({assigned['J_lower']})"


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


def render_lines(result: RunResult) -> list[str]:
    rows = []
    for line in result.lines:
        assigned = line.get("assigned")
        flags = "".join(
            flag for flag, on in (("s", line.get("saturated")), ("b", line.get("blended")), ("p", line.get("few_points"))) if on
        )
        rows.append(
            [
                f"{line['position']['value']:.4f}",
                f"{line['position']['sigma']:.4f}",
                f"{line['height']:.4f}",
                assignment_label(assigned),
                f"{assigned['calc']:.4f}" if assigned else "",
                f"{assigned['residual']:+.4f}" if assigned else "",
                f"{assigned['confidence']:.2f}" if assigned else "",
                flags,
                "" if assigned else (line.get("likely_cause") or ""),
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


def render_bands(result: RunResult) -> list[str]:
    if not result.bands:
        return ["   no band could be assigned"]
    rows = [
        [
            f"{b['isotopologue']} {b['v_upper']}-{b['v_lower']}",
            str(b["n_lines"]),
            f"{b['rms']:.4f}",
            _q(b["origin"]),
            _q(b["B_upper"]),
            _q(b["B_lower"]),
            _q(b.get("D_upper")),
            _q(b.get("D_lower")),
        ]
        for b in result.bands
    ]
    out = [table(["band", "lines", "rms", "nu0 cm-1", "B' cm-1", "B'' cm-1", "D' cm-1", "D'' cm-1"], rows, right={1, 2, 3, 4, 5, 6, 7})]
    sextic = [[f"{b['isotopologue']} {b['v_upper']}-{b['v_lower']}", _q(b.get("H_upper")), _q(b.get("H_lower"))] for b in result.bands if b.get("H_upper")]
    if sextic:
        out.append(table(["band", "H' cm-1", "H'' cm-1"], sextic, right={1, 2}))
    reference_rows = []
    for b in result.bands:
        references = b.get("reference") or {}
        for key, label in (("origin", "nu0"), ("B_upper", "B'"), ("B_lower", "B''"), ("D_upper", "D'"), ("D_lower", "D''"), ("H_upper", "H'"), ("H_lower", "H''")):
            if key not in references or not b.get(key):
                continue
            item = references[key]
            rows_ref = reference_value(references, key)
            z = comparison_z(references, key)
            reference_rows.append([
                f"{b['isotopologue']} {b['v_upper']}-{b['v_lower']}", label, _q(b[key]),
                format_value_sigma(rows_ref, item.get("reference_sigma")) if rows_ref is not None else "-",
                "" if z is None else f"{z:+.1f}",
                f"{item['handbook']:.8g}" if isinstance(item.get("handbook"), (int, float)) else "",
            ])
    if reference_rows:
        out.append("   against the reference for each band model (the same model fitted to the library's positions of the same lines):")
        out.append(table(["band", "constant", "fitted", "reference", "z", "library B_v/G"], reference_rows, right={2, 3, 4, 5}))
    cd_rows = []
    for b in result.bands:
        for cd in b.get("combination_differences", []):
            label = "B''" if cd["state"] == "lower" else "B'"
            cd_rows.append([f"{b['isotopologue']} {b['v_upper']}-{b['v_lower']}", f"{label} (v={cd['v']})", str(cd["n_pairs"]), _q(cd["B"]), _q(cd.get("D"))])
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


def _comparison_row(isotopologue: str, label: str, q: dict[str, Any], unit: str, references: Any, key: str) -> list[str]:
    item = references.get(key) if isinstance(references, dict) else None
    reference = reference_value(references, key)
    z = comparison_z(references, key)
    reference_text = difference = handbook = ""
    if reference is not None:
        reference_sigma = item.get("reference_sigma") if isinstance(item, dict) else None
        reference_text = format_value_sigma(reference, reference_sigma)
        if reference:
            difference = f"{100 * (q['value'] - reference) / reference:+.3f}%"
    if isinstance(item, dict):
        value = item.get("handbook") if item.get("handbook") is not None else (item.get("reference") if item.get("effective_reference") is not None else None)
        if isinstance(value, (int, float)):
            handbook = f"{value:.8g}"
    return [isotopologue, label, format_value_sigma(q["value"], q.get("sigma")), unit, reference_text, difference, "" if z is None else f"{z:+.1f}", handbook]


def render_constants(result: RunResult) -> list[str]:
    if not result.constants:
        return []
    out = ["   molecular constants (one term-value fit of all lines of each isotopologue), each against the reference"
           " for the model fitted (the same fit of the library's positions of the same lines):"]
    rows = []
    for entry in result.constants:
        references = entry.get("reference", {})
        for key, label, unit in CONSTANT_ROWS:
            q = entry.get(key)
            if not q:
                continue
            rows.append(_comparison_row(entry["isotopologue"], label, q, unit, references, key))
        for kind, values, refs in (("nu0", entry.get("band_origins", {}), entry.get("band_origins_reference", {})),
                                   ("B", entry.get("B_v", {}), entry.get("B_v_reference", {}))):
            for tag, q in values.items():
                key = tag if kind == "nu0" else f"B_{tag}"
                rows.append(_comparison_row(entry["isotopologue"], f"{kind} {tag}" if kind == "nu0" else key, q, "cm-1", refs, key))
    out.append(table(["isotopologue", "constant", "fitted", "unit", "reference", "diff", "z", "handbook"], rows, right={2, 4, 5, 6, 7}))
    for entry in result.constants:
        held = entry.get("held") or {}
        if held:
            out.append(f"   {entry['isotopologue']}: held at library values: " + ", ".join(
                f"{name} {format_value_sigma(h['value'], h.get('sigma'))}" for name, h in held.items()))
        if entry.get("model"):
            out.append(f"   {entry['isotopologue']} model: {entry['model']}")
    derived_rows = []
    for entry in result.constants:
        for name, d in entry.get("derived", {}).items():
            reference = d.get("reference")
            z = d.get("z")
            derived_rows.append([entry["isotopologue"], name, format_value_sigma(d["value"], d.get("sigma")), d["unit"],
                                 format_value_sigma(reference, d.get("reference_sigma")) if isinstance(reference, (int, float)) else "",
                                 "" if z is None else f"{z:+.1f}", d["model"]])
    if derived_rows:
        out.append("   derived (each under the model named):")
        out.append(table(["isotopologue", "quantity", "value", "unit", "reference", "z", "model"], derived_rows, right={2, 4, 5}))
    for fit in result.extra.get("mass_reduced", []):
        out.append(f"   mass-reduced fit {fit['molecule']} ({', '.join(fit['isotopologues'])}): rms {fit['rms']:.4f} cm-1")
        mr_rows = []
        for label, entry in fit["per_isotopologue"].items():
            omega = entry.get("omega_e")
            mean, mean_sigma = entry.get("residual_mean"), entry.get("residual_mean_sigma")
            mr_rows.append([
                label,
                format_value_sigma(omega["value"], omega["sigma"]) if omega else "-",
                format_value_sigma(omega["reference"], omega.get("reference_sigma")) if omega and isinstance(omega.get("reference"), (int, float)) else "-",
                f"{omega['z']:+.1f}" if omega and isinstance(omega.get("z"), (int, float)) else "",
                "-" if mean is None else (f"{mean:+.4f}" + (f" +- {mean_sigma:.4f}" if mean_sigma else "")),
                "-" if entry.get("residual_rms") is None else f"{entry['residual_rms']:.4f}",
            ])
        out.append(table(["isotopologue", "omega_e cm-1", "reference", "z", "mean obs-calc", "rms"], mr_rows, right={1, 2, 3, 4, 5}))
        out += [f"   note: {note}" for note in fit.get("notes", [])]
    return out


def render_checks(result: RunResult) -> list[str]:
    if not result.checks:
        return []
    rows = [[c["status"].replace("_", " ").upper(), c["name"], c["detail"]] for c in result.checks]
    return [table(["status", "check", "reason"], rows), f"   verdict: {str(result.verdict).upper()}"]


def render_result(result: RunResult) -> str:
    """The aligned tables of one run; every line made safe for a terminal (file names, titles
    and notes come from the file)."""
    return "\n".join(safe_text(line) for line in "\n".join(_result_lines(result)).split("\n"))


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
    for note in result.extra.get("notes", []):
        out.append(f"   note: {note}")
    return out
