"""Plain-text rendering of a RunResult for `bandwatch process` (aligned tables, no colour)."""
from __future__ import annotations

from typing import Any

from processing.estimate import format_value_sigma
from processing.pipeline import RunResult


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
    ("B_e", "B_e", "cm-1"),
    ("alpha_e", "alpha_e", "cm-1"),
    ("gamma_e", "gamma_e", "cm-1"),
    ("D_e", "D_e", "cm-1"),
    ("beta_e", "beta_e", "cm-1"),
    ("r_e", "r_e", "angstrom"),
)


def render_constants(result: RunResult) -> list[str]:
    if not result.constants:
        return []
    out = ["   molecular constants (one term-value fit of all lines of each isotopologue):"]
    rows = []
    for entry in result.constants:
        references = entry.get("reference", {})
        for key, label, unit in CONSTANT_ROWS:
            q = entry.get(key)
            if not q:
                continue
            ref = references.get(key)
            if ref:
                reference_text = f"{ref['reference']:.6g}"
                difference = f"{ref['difference_percent']:+.3f}%"
                z = ref.get("effective_z") if ref.get("effective_z") is not None else ref.get("z")
                z_text = "" if z is None else f"{z:+.1f}"
                if ref.get("effective_reference") is not None:
                    reference_text += f" (eff {ref['effective_reference']:.6g})"
            else:
                reference_text = difference = z_text = ""
            rows.append([entry["isotopologue"], label, format_value_sigma(q["value"], q.get("sigma")), unit, reference_text, difference, z_text])
    out.append(table(["isotopologue", "constant", "fitted", "unit", "reference", "diff", "z"], rows, right={2, 5, 6}))
    derived_rows = []
    for entry in result.constants:
        for name, d in entry.get("derived", {}).items():
            derived_rows.append([entry["isotopologue"], name, format_value_sigma(d["value"], d.get("sigma")), d["unit"], d["model"]])
    if derived_rows:
        out.append("   derived (each under the model named):")
        out.append(table(["isotopologue", "quantity", "value", "unit", "model"], derived_rows, right={2}))
    for fit in result.extra.get("mass_reduced", []):
        out.append(f"   mass-reduced fit {fit['molecule']} ({', '.join(fit['isotopologues'])}): rms {fit['rms']:.4f} cm-1")
        mr_rows = []
        for label, entry in fit["per_isotopologue"].items():
            omega = entry.get("omega_e")
            mr_rows.append([label, format_value_sigma(omega["value"], omega["sigma"]) if omega else "-", f"{entry['residual_mean']:+.4f}", f"{entry['residual_rms']:.4f}"])
        out.append(table(["isotopologue", "omega_e cm-1", "mean obs-calc", "rms"], mr_rows, right={1, 2, 3}))
        out += [f"   note: {note}" for note in fit.get("notes", [])]
    return out


def render_checks(result: RunResult) -> list[str]:
    if not result.checks:
        return []
    rows = [[c["status"].replace("_", " ").upper(), c["name"], c["detail"]] for c in result.checks]
    return [table(["status", "check", "reason"], rows), f"   verdict: {str(result.verdict).upper()}"]


def render_result(result: RunResult) -> str:
    out = [f"== {result.file}"]
    if result.status != "processed" or result.spectrum is None:
        out.append(f"   {result.status}: {result.error}")
        return "\n".join(out)
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
    return "\n".join(out)
