"""Work the main screen hands to thread workers: redo a run with changed settings, export a report.

Plain functions over the ledger and the pipeline, called from worker threads (never from the
event loop); they return data or a one-line problem, never touch widgets.
"""
from __future__ import annotations

import json
from dataclasses import fields
from pathlib import Path
from typing import Any, Callable

from tui.widgets.run_tables import line_label

ProcessFunction = Callable[[str, Any], Any]  # (path, ProcessSettings) -> RunResult


def split_request(requested: dict[str, Any]) -> tuple[dict[str, Any], list[str]]:
    """(settings payload the pipeline understands, names of requested changes it does not yet)."""
    from processing.pipeline import ProcessSettings

    known = {f.name for f in fields(ProcessSettings)}
    payload: dict[str, Any] = {}
    not_applied: list[str] = []
    for key, value in requested.items():
        if key in known:
            payload[key] = value
        elif value:  # an empty request (no shift, nothing excluded) needs no field
            not_applied.append(key)
    return payload, not_applied


def reprocess_in_thread(
    data_dir: str | Path, run_id: int, requested: dict[str, Any], process_function: ProcessFunction
) -> tuple[int | None, str | None, list[str]]:
    """Redo one run's file with the requested settings; record it as a new version of the run.

    The full request is stored with the new run (`settings`), including any change this version
    of the pipeline cannot apply yet (listed under "not_applied"), so the request is on record.
    Returns (new run id, problem, names not applied).
    """
    from processing.station.ledger import get_run, open_ledger, record_reprocessed
    from processing.station.pool import make_settings
    from processing.station.reports import write_reports

    payload, not_applied = split_request(requested)
    conn = open_ledger(data_dir)
    try:
        run = get_run(conn, run_id)
        if run is None:
            return None, f"run {run_id} is not in the ledger", not_applied
        from processing.regular_files import ReadPolicy

        # the same limits as the station's workers: never the data folder, bounded readers
        payload["read_policy"] = ReadPolicy(forbidden=(str(Path(data_dir).resolve()),))
        try:
            result = process_function(run.path, make_settings(payload))
        except MemoryError:
            return None, f"run {run_id}: out of memory while redoing it", not_applied
        result_dict = result.to_dict() if hasattr(result, "to_dict") else dict(result)
        stored = {**requested, "not_applied": not_applied}
        record = record_reprocessed(conn, run_id, result_dict, stored)
        write_reports(data_dir, record.run_id, record.version, result_dict)
    finally:
        conn.close()
    return record.run_id, None, not_applied


def render_report(run: Any, decisions: list[Any]) -> str:
    """A plain-text report of one run: verdict, decisions, lines, constants, checks."""
    result = run.result or {}
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
    if run.error:
        out.append(f"error       {run.error}")
    if decisions:
        out.append("")
        out.append("decision trail")
        for event in decisions:
            out.append(f"  {event.at}  {event.action:<6} {event.operator or '-':<10} {event.reason}")
    lines = result.get("lines") or []
    if lines:
        out.append("")
        out.append(f"{'obs cm-1':>12} {'assignment':<20} {'calc cm-1':>12} {'obs-calc':>9}")
        for line in sorted(lines, key=lambda ln: -float((ln.get('position') or {}).get('value', 0.0))):
            assigned = line.get("assigned") or None
            obs = float((line.get("position") or {}).get("value", float("nan")))
            calc = f"{assigned['calc']:.4f}" if assigned and assigned.get("calc") is not None else "-"
            resid = f"{assigned['residual']:.4f}" if assigned and assigned.get("residual") is not None else "-"
            out.append(f"{obs:12.4f} {line_label(assigned):<20} {calc:>12} {resid:>9}")
    for section, title in (("bands", "bands"), ("constants", "constants")):
        items = result.get(section) or []
        if not items:
            continue
        out.append("")
        out.append(title)
        for item in items:
            iso = item.get("isotopologue", "?")
            for key, value in item.items():
                if isinstance(value, dict) and "value" in value:
                    sigma = value.get("sigma")
                    sigma_text = f" ± {sigma:.2g}" if isinstance(sigma, (int, float)) else ""
                    unit = value.get("unit", "cm-1")
                    out.append(f"  {iso:<8} {key:<12} {value['value']:.8g}{sigma_text} {unit}")
    checks = result.get("checks") or []
    if checks:
        out.append("")
        out.append("checks")
        for check in checks:
            out.append(f"  {str(check.get('status', '?')).upper():<5} {check.get('name', '')}: {check.get('detail', '')}")
    return "\n".join(out) + "\n"


def export_in_thread(data_dir: str | Path, run_id: int) -> tuple[str | None, str | None]:
    """Write the run's reports under DATA/reports/ (never the export folder); returns the folder.

    The station's report files (result.json, lines.csv, summary.md) are written again, and
    report.txt beside them adds the decision trail as it stands now.
    """
    from processing.station.ledger import decision_history, get_run, open_ledger
    from processing.station.reports import report_folder, write_reports

    conn = open_ledger(data_dir)
    try:
        run = get_run(conn, run_id)
        if run is None:
            return None, f"run {run_id} is not in the ledger"
        decisions = decision_history(conn, run_id)
    finally:
        conn.close()
    folder = report_folder(data_dir, run.run_id, run.path)
    try:
        if run.result is not None:
            folder = write_reports(data_dir, run.run_id, run.version, {**run.result, "file": run.path})
        folder.mkdir(parents=True, exist_ok=True)
        (folder / "report.txt").write_text(render_report(run, decisions), encoding="utf-8")
    except OSError as error:
        return None, f"{folder}: cannot write the report ({error.strerror or error})"
    return str(folder), None
