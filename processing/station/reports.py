"""Per-run report files in the data folder: result JSON, line list CSV, Markdown summary.

DATA/reports/<run_id>-<file stem>/ holds
    result.json   the public result object, as `bandwatch process --json` prints it
    lines.csv     one row per line found (position, sigma, height, width, assignment, obs-calc)
    summary.md    file, sha256, verdict, bands with their constants, checks
Written atomically (temporary file in the same folder, then rename); never in the export folder.
"""
from __future__ import annotations

import os
import re
import tempfile
from dataclasses import replace
from pathlib import Path

from processing.result_text import LINE_COLUMNS, lines_csv, summary_markdown
from processing.results import RunResult, to_json

__all__ = ["LINE_COLUMNS", "export_run_report", "lines_csv", "report_folder", "summary_markdown", "write_reports"]



def report_folder(data_dir: str | Path, run_id: int, path: str) -> Path:
    stem = re.sub(r"[^A-Za-z0-9._-]+", "_", Path(path).stem)[:60] or "file"
    return Path(data_dir) / "reports" / f"{run_id}-{stem}"


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


def write_reports(
    data_dir: str | Path, run_id: int, version: int, result: RunResult, result_json: str | None = None,
    lines_csv_text: str | None = None,
) -> Path:
    """Write the three report files for a run; returns their folder. `result_json` and
    `lines_csv_text` are the result's JSON and lines.csv texts when a worker already made
    them (the ledger stores the same JSON bytes)."""
    folder = report_folder(data_dir, run_id, result.file)
    folder.mkdir(parents=True, exist_ok=True)
    _write_atomic(folder / "result.json", (result_json if result_json is not None else to_json(result)) + "\n")
    _write_atomic(folder / "lines.csv", lines_csv_text if lines_csv_text is not None else lines_csv(result))
    _write_atomic(folder / "summary.md", summary_markdown(result, run_id, version))
    return folder


def export_run_report(data_dir: str | Path, run_id: int) -> tuple[str | None, str | None]:
    """(folder, None) after writing a run's reports under DATA/reports/ (never the export
    folder), or (None, problem). The station's report files are written again, and report.txt
    beside them adds the decision trail as it stands now."""
    from processing.result_text import run_report
    from processing.station.ledger import decision_history, get_run, open_ledger

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
            folder = write_reports(data_dir, run.run_id, run.version, replace(run.result, file=run.path))
        folder.mkdir(parents=True, exist_ok=True)
        _write_atomic(folder / "report.txt", run_report(run, decisions))
    except OSError as error:
        return None, f"{folder}: cannot write the report ({error.strerror or error})"
    return str(folder), None
