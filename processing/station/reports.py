"""Per-run report files in the data folder: result JSON, line list CSV, Markdown summary.

DATA/reports/<run_id>-<file stem>/ holds
    result.json   the public result object, as `bandwatch process --json` prints it
    lines.csv     one row per line found (position, sigma, height, width, assignment, obs-calc)
    summary.md    file, sha256, verdict, bands with their constants, checks
    report.txt    (written on request: `e`, `bandwatch report`) the run with its decision trail
    figure.svg    (on request, with the figures extra) spectrum with assignments, residuals, trend
Written atomically (temporary file in the same folder, then rename); never in the export folder.
"""
from __future__ import annotations

import os
import re
import secrets
import shutil
from dataclasses import replace
from pathlib import Path

from processing.result_text import LINE_COLUMNS, lines_csv, summary_body, summary_markdown, summary_with_title
from processing.results import RunResult, to_json
from processing.run_digest import RunDigest

__all__ = ["LINE_COLUMNS", "export_run_report", "lines_csv", "report_folder", "summary_markdown", "write_reports",
           "write_run_figure"]
FIGURE_NAME = "figure.svg"  # beside report.txt when `e` writes a run's report (with the figures extra)



_NOT_IN_NAMES = re.compile(r"[^A-Za-z0-9._-]+")


def report_folder(data_dir: str | Path, run_id: int, path: str) -> Path:
    stem = _NOT_IN_NAMES.sub("_", Path(path).stem)[:60] or "file"
    return Path(os.path.join(data_dir, "reports", f"{run_id}-{stem}"))


REPORT_MODE = 0o666  # before the umask: 0644 under the usual 022, so others in the lab can read the reports


def _write_atomic(path: Path, text: str | bytes) -> None:
    """Write under a temporary name in the same folder, then rename over `path`. The file is
    created with REPORT_MODE through the umask, as any file a program writes (a temporary
    file's private 0600 would keep the rest of the lab out)."""
    temporary = path.parent / f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp"
    handle = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, REPORT_MODE)
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(text.encode("utf-8") if isinstance(text, str) else text)
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise


STAGING_FOLDER = ".reports-incoming"  # in the data folder: a worker's report files before the run has an id


def staging_folder(data_dir: str | Path) -> Path:
    """Where workers write a processed run's result.json and lines.csv before the ledger gives
    the run its id: beside reports/ on the same disk (a folder is moved in by one rename);
    emptied when a station starts (what a stopped station left is not a report)."""
    return Path(data_dir) / STAGING_FOLDER


def stage_reports(staging: str, job_id: int, result_json: str, lines_csv_text: str,
                  summary_body_text: str | None = None, file: str = "") -> str | None:
    """Write result.json and lines.csv of a processed run into a new folder under `staging` (a
    worker, while the station records the run), and with `summary_body_text` summary.md too,
    under a stand-in title (the run's id is not known yet) that the station writes over when it
    adopts the folder (`adopt_staged_reports`): writing over a file costs the station a fraction
    of creating one while the disk is busy with a burst of exports. The folder, or None when it
    could not be written (the station then writes the reports itself)."""
    folder = os.path.join(staging, f"{job_id}-{os.getpid()}-{secrets.token_hex(4)}")
    try:
        os.mkdir(folder)
        _write_new(os.path.join(folder, "result.json"), result_json + "\n")
        _write_new(os.path.join(folder, "lines.csv"), lines_csv_text)
        if summary_body_text is not None:
            _write_new(os.path.join(folder, "summary.md"),
                       summary_with_title(STAND_IN_RUN_ID, STAND_IN_VERSION, file, summary_body_text))
    except OSError:
        shutil.rmtree(folder, ignore_errors=True)
        return None
    return folder


STAND_IN_RUN_ID, STAND_IN_VERSION = 10**12, 10**4  # a staged summary's title: as long as any real one


def _write_new(path: str, text: str) -> None:
    """Create `path` (never an existing file) with REPORT_MODE through the umask and write `text`."""
    handle = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_CLOEXEC, REPORT_MODE)
    try:
        _write_all(handle, text.encode("utf-8"))
    finally:
        os.close(handle)


def _write_over(path: str, text: str) -> None:
    """Write `text` over the file at `path` (which must exist), cut to its length."""
    data = text.encode("utf-8")
    handle = os.open(path, os.O_WRONLY | os.O_CLOEXEC)
    try:
        _write_all(handle, data)
        os.ftruncate(handle, len(data))
    finally:
        os.close(handle)


def _write_all(handle: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        view = view[os.write(handle, view):]


def adopt_staged_reports(staged: str, data_dir: str | Path, run_id: int, version: int, file: str,
                         summary_body_text: str) -> Path | None:
    """Give a worker's staged summary.md its title (or write it, when the worker did not) and
    move the folder into the run's place (one rename: the folder appears with all three files
    whole); None when the folder is taken already or a write fails (the caller then writes the
    reports itself and drops `staged`). summary.md is written straight into the staged folder,
    which nobody reads (no temporary file and rename of its own)."""
    folder = report_folder(data_dir, run_id, file)
    summary = os.path.join(staged, "summary.md")
    text = summary_with_title(run_id, version, file, summary_body_text)
    try:
        try:
            _write_over(summary, text)  # the worker's, under its stand-in title
        except FileNotFoundError:
            _write_new(summary, text)
        try:
            os.rename(staged, folder)
        except FileNotFoundError:  # reports/ not made yet (or removed meanwhile)
            folder.parent.mkdir(exist_ok=True)
            os.rename(staged, folder)
    except OSError:
        return None
    return folder


def drop_staged(staged: str | None) -> None:
    """Remove a worker's staged reports that will not be used (a spooled run, a folder not adopted)."""
    if staged:
        shutil.rmtree(staged, ignore_errors=True)


def write_reports(
    data_dir: str | Path, run_id: int, version: int, result: RunResult | RunDigest, result_json: str | None = None,
    lines_csv_text: str | None = None, summary_body_text: str | None = None,
) -> Path:
    """Write the three report files for a run; returns their folder. `result_json`,
    `lines_csv_text` and `summary_body_text` are the result's JSON, lines.csv and summary.md
    (below its title) texts when a worker already made them (the ledger stores the same JSON
    bytes); with only the run's digest (`run_digest`) all three must be given."""
    if isinstance(result, RunDigest):
        if result_json is None or lines_csv_text is None or summary_body_text is None:
            raise ValueError("reports from a run's digest need its JSON, lines.csv and summary texts")
        texts = (result_json, lines_csv_text, summary_body_text)
    else:
        texts = (to_json(result) if result_json is None else result_json,
                 lines_csv(result) if lines_csv_text is None else lines_csv_text,
                 summary_body(result) if summary_body_text is None else summary_body_text)
    folder = report_folder(data_dir, run_id, result.file)
    folder.mkdir(parents=True, exist_ok=True)
    _write_atomic(folder / "result.json", texts[0] + "\n")
    _write_atomic(folder / "lines.csv", texts[1])
    _write_atomic(folder / "summary.md", summary_with_title(run_id, version, result.file, texts[2]))
    return folder


def export_run_report(data_dir: str | Path, run_id: int,
                      ledger_at: str | Path | None = None) -> tuple[str | None, str | None]:
    """(folder, None) after writing a run's reports under DATA/reports/ (never the export
    folder), or (None, problem). The station's report files are written again, and report.txt
    beside them adds the decision trail as it stands now. `ledger_at`: where the ledger is (a
    server's URL), when not in `data_dir`."""
    from processing.result_text import run_report
    from processing.station.ledger import decision_history, get_run, open_ledger

    conn = open_ledger(data_dir if ledger_at is None else ledger_at)
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


def write_run_figure(data_dir: str | Path, run_id: int, target: str | Path,
                     export_folder: str | Path | None = None, ledger_at: str | Path | None = None) -> Path:
    """Write run `run_id`'s figure (`processing.figures`) to `target` (.svg or .png): its
    spectrum as analysed with the assignment markers, the residuals of each band, and its
    main band's origin over the ledger's runs (`ledger_at`, else the one in `data_dir`).
    Never into the export folder (the run's file's folder, or `export_folder`). Raises
    BandwatchError (FiguresUnavailable without matplotlib)."""
    from processing.errors import BandwatchError
    from processing.figures import FigureInput, TrendValue, figure_format, figure_title, write_figure
    from processing.station.ledger import get_run, open_ledger, trend
    from processing.station.run_spectrum import read_run_spectrum

    figure_format(target)  # a wrong extension is said before anything is read
    conn = open_ledger(data_dir if ledger_at is None else ledger_at)
    try:
        run = get_run(conn, run_id)
        if run is None:
            raise BandwatchError(f"run {run_id} is not in the ledger")
        folders = [Path(run.path).resolve().parent] + ([Path(export_folder).resolve()] if export_folder else [])
        where = Path(target).resolve()
        if any(where == folder or folder in where.parents for folder in folders):
            raise BandwatchError(f"{target}: inside the export folder {folders[-1]}; bandwatch never writes there")
        result = run.result
        if result is None:
            raise BandwatchError(f"run {run_id} ({run.name}) is {run.status}: no result to draw")
        points, reference, label = [], None, ""
        main = max(result.bands, key=lambda band: band.n_lines, default=None)
        if main is not None:
            label = f"{main.isotopologue} {main.band} origin / cm-1"
            comparison = main.reference.get("origin")
            reference = comparison.handbook_value if comparison is not None else None
            points = [TrendValue(p.processed_at, p.value, p.sigma, p.decision == "flag", p.verdict == "fail",
                                 p.run_id == run_id)
                      for p in trend(conn, main.isotopologue, "origin", main.band)]
    finally:
        conn.close()
    spectrum = read_run_spectrum(run, data_dir)
    return write_figure(target, FigureInput(
        title=figure_title(run.run_id, run.version, run.name, result), result=result,
        x=spectrum.x, y=spectrum.y, spectrum_note=spectrum.problem,
        trend_label=label, trend=points, trend_reference=reference,
    ))
