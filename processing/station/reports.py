"""Per-run report files in the data folder: result JSON, line list CSV, Markdown summary.

DATA/reports/<run_id>-<file stem>/ holds
    result.json   the public result object, as `bandwatch process --json` prints it
    lines.csv     one row per line found (position, sigma, height, width, assignment, obs-calc)
    summary.md    file, sha256, verdict, bands with their constants, checks
Written atomically (temporary file in the same folder, then rename); never in the export folder.
"""
from __future__ import annotations

import csv
import io
import math
import os
import re
import tempfile
from pathlib import Path
from typing import Any

from processing import strict_json
from processing.safe_text import safe_text

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
# first key present wins; the analysis's own key names come first
_LINE_KEYS: dict[str, tuple[str, ...]] = {
    "position_cm1": ("position_cm1", "position", "center_cm1", "wavenumber_cm1"),
    "sigma_cm1": ("position_sigma_cm1", "sigma_cm1", "sigma", "position_sigma"),
    "height": ("height", "peak_height", "absorbance", "depth"),
    "width_cm1": ("fwhm_cm1", "width_cm1", "width", "fwhm"),
    "calc_cm1": ("calc_cm1", "calc"),
    "isotopologue": ("isotopologue", "species"),
    "branch": ("branch",),
    "J_lower": ("J_lower", "J", "j_lower"),
    "assignment": ("assignment", "label"),
    "obs_minus_calc_cm1": ("obs_minus_calc_cm1", "obs_minus_calc", "residual_cm1", "residual", "o_c"),
}


def report_folder(data_dir: str | Path, run_id: int, path: str) -> Path:
    stem = re.sub(r"[^A-Za-z0-9._-]+", "_", Path(path).stem)[:60] or "file"
    return Path(data_dir) / "reports" / f"{run_id}-{stem}"


def _scalar(value: Any) -> Any:
    if isinstance(value, dict) and "value" in value:
        return value["value"]
    return value


def _cell(value: Any) -> str:
    value = _scalar(value)
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if not math.isfinite(value) else repr(value)
    if isinstance(value, (list, tuple)):
        return " ".join(_cell(v) for v in value)
    return str(value)


def line_rows(result: dict[str, Any]) -> list[dict[str, str]]:
    """The result's "lines" as CSV rows with LINE_COLUMNS (blank when a value is absent)."""
    rows = []
    for line in result.get("lines") or ():
        if not isinstance(line, dict):
            continue
        assigned = line.get("assigned") if isinstance(line.get("assigned"), dict) else {}
        merged = {**line, **{key: value for key, value in assigned.items() if key not in ("blended",)}}
        row: dict[str, str] = {}
        for column, keys in _LINE_KEYS.items():
            found = next((merged[key] for key in keys if key in merged), None)
            if column == "sigma_cm1" and found is None and isinstance(line.get("position"), dict):
                found = line["position"].get("sigma")
            row[column] = _cell(found)
        if not row["assignment"] and row["branch"] and row["J_lower"]:
            band = f"{assigned['v_upper']}-{assigned['v_lower']} " if "v_upper" in assigned and "v_lower" in assigned else ""
            row["assignment"] = f"{row['isotopologue']} {band}{row['branch']}({row['J_lower']})".strip()
        rows.append(row)
    return rows


def lines_csv(result: dict[str, Any]) -> str:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(LINE_COLUMNS), lineterminator="\n")
    writer.writeheader()
    writer.writerows(line_rows(result))
    return buffer.getvalue()


def _estimate_text(value: Any) -> str:
    if isinstance(value, dict) and "value" in value:
        from processing.estimate import format_value_sigma

        unit = value.get("unit", "cm-1")
        return f"{format_value_sigma(float(value['value']), value.get('sigma'))} {unit}"
    return _cell(value)


def _reference_text(comparison: Any) -> str:
    """" (reference R, z Z)": the value a constant's z is computed against (the reference for
    the model fitted), never a number it was not compared with."""
    from processing.model_reference import compared_reference, compared_z

    reference, z = compared_reference(comparison), compared_z(comparison)
    if reference is None:
        return ""
    return f" (reference {reference:.8g}" + (f", z {z:+.1f})" if isinstance(z, (int, float)) else ")")


def summary_markdown(result: dict[str, Any], run_id: int, version: int) -> str:
    """A short human summary of one run."""
    out = [
        f"# Run {run_id} v{version}: {Path(str(result.get('file', ''))).name}",
        "",
        f"- file: `{result.get('file')}`",
        f"- sha256: `{result.get('sha256')}`",
        f"- status: {result.get('status')}",
        f"- verdict: **{result.get('verdict') or '-'}**",
    ]
    if result.get("error"):
        out.append(f"- error: {result['error']}")
    spectrum = result.get("spectrum") or {}
    if spectrum:
        out.append(
            f"- spectrum: {spectrum.get('points')} points, {spectrum.get('first_cm1')}"
            f" to {spectrum.get('last_cm1')} cm-1, format {spectrum.get('format')}"
        )
    out.append(f"- lines found: {len(result.get('lines') or ())}")
    bands = [b for b in result.get("bands") or () if isinstance(b, dict)]
    if bands:
        out += ["", "## Bands", "", "| isotopologue | band | origin | B_upper | B_lower | lines | rms cm-1 |",
                "|---|---|---|---|---|---|---|"]
        for band in bands:
            out.append(
                f"| {band.get('isotopologue', '')} | {band.get('v_upper', '?')}-{band.get('v_lower', '?')}"
                f" | {_estimate_text(band.get('origin'))} | {_estimate_text(band.get('B_upper'))}"
                f" | {_estimate_text(band.get('B_lower'))} | {_cell(band.get('n_lines'))}"
                f" | {_cell(band.get('rms'))} |"
            )
    constants = [c for c in result.get("constants") or () if isinstance(c, dict)]
    if constants:
        out += ["", "## Constants", ""]
        for entry in constants:
            label = entry.get("isotopologue", "")
            references = entry.get("reference") if isinstance(entry.get("reference"), dict) else {}
            values = ", ".join(
                f"{key} = {_estimate_text(value)}{_reference_text(references.get(key))}"
                for key, value in entry.items()
                if isinstance(value, dict) and "value" in value
            )
            out.append(f"- {label}: {values}")
    checks = [c for c in result.get("checks") or () if isinstance(c, dict)]
    if checks:
        out += ["", "## Checks", ""]
        for check in checks:
            name = check.get("name") or check.get("check") or "check"
            status = check.get("status") or check.get("result") or check.get("verdict") or ""
            detail = check.get("message") or check.get("detail") or ""
            out.append(f"- {name}: {str(status).replace('_', ' ')} {detail}".rstrip())
    return "\n".join(safe_text(line) for line in out) + "\n"  # names and titles come from files


def _write_atomic(path: Path, text: str) -> None:
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=".", suffix=".tmp")
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="") as stream:
            stream.write(text)
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise


def write_reports(data_dir: str | Path, run_id: int, version: int, result: dict[str, Any]) -> Path:
    """Write the three report files for a run; returns their folder."""
    folder = report_folder(data_dir, run_id, str(result.get("file", "")))
    folder.mkdir(parents=True, exist_ok=True)
    _write_atomic(folder / "result.json", strict_json.dumps_result(result) + "\n")
    _write_atomic(folder / "lines.csv", lines_csv(result))
    _write_atomic(folder / "summary.md", summary_markdown(result, run_id, version))
    return folder
