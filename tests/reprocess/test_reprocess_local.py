"""`bandwatch reprocess` on this PC: each file once, skips, resumes, reasons, failures, redo requests."""
from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import threading
from dataclasses import replace
from pathlib import Path

import pytest
from archive_files import verdict_counts
from reprocess_support import stored_results, versions_by_path, write_archive

from processing.checks import CheckThresholds
from processing.pipeline import ProcessSettings
from processing.provenance import current_provenance
from processing.reprocess import plan
from processing.reprocess.job import JobOptions, ReprocessJob
from processing.reprocess.local import LocalBackend
from processing.reprocess.selection import PathSelection
from processing.reprocess.summary import Progress, ReprocessSummary
from processing.station import ledger
from processing.station.redo import RedoRequest, redo_settings

REPO = Path(__file__).resolve().parents[2]
PROGRESS = re.compile(r"^reprocess: (\d+)/")


def reprocess(data: Path, *sources: Path | str, settings: ProcessSettings | None = None, workers: int = 2,
              function: str = "processing.pipeline:process_file", stop: threading.Event | None = None,
              on_progress=None) -> ReprocessSummary:  # noqa: ANN001
    """One reprocess through the library API, on the station's pool."""
    conn = ledger.open_ledger(data)
    backend = LocalBackend(workers, function, 30.0, 2048)
    try:
        job = ReprocessJob(conn, JobOptions(data, settings or ProcessSettings()), backend, stop=stop, on_progress=on_progress)
        return job.run(PathSelection(tuple(str(s) for s in sources)).candidates())
    finally:
        backend.close()
        conn.close()


def _resolved(paths: list[Path]) -> set[str]:
    return {str(path.resolve()) for path in paths}


@pytest.mark.slow
def test_500_files_interrupted_by_sigint_resume_once_each_and_a_third_run_skips_all(isolated: Path) -> None:
    archive, data = isolated / "archive", isolated / "data"
    files = write_archive(archive, 500)
    command = [sys.executable, "-m", "tui", "reprocess", str(archive), "--data", str(data), "--plain", "--every", "10", "--workers", "2"]
    env = dict(os.environ, BANDWATCH_CONFIG=str(isolated / "no-config.toml"), XDG_DATA_HOME=str(isolated / "xdg"),
               PYTHONPATH=str(REPO))
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        assert process.stdout is not None
        for line in process.stdout:
            found = PROGRESS.match(line)
            if found and int(found.group(1)) >= 250:
                process.send_signal(signal.SIGINT)  # Ctrl-C after about half
                break
        _, err = process.communicate(timeout=60)
    finally:
        if process.poll() is None:
            process.kill()
    assert process.returncode == 130, err
    assert "run the same command again" in err
    first = versions_by_path(data)
    assert 250 <= len(first) < 500 and set(first.values()) == {1}

    resumed = subprocess.run(command + ["--json"], capture_output=True, text=True, env=env, timeout=120)
    assert resumed.returncode == 0, resumed.stderr
    summary = json.loads(resumed.stdout)
    assert (summary["skipped"], summary["recorded"], summary["failed"]) == (len(first), 500 - len(first), 0)
    assert summary["why_analysed"] == {"new": 500 - len(first)}
    final = versions_by_path(data)
    assert set(final) == _resolved(files) and set(final.values()) == {1}  # every file, each once

    again = subprocess.run(command + ["--json"], capture_output=True, text=True, env=env, timeout=120)
    assert again.returncode == 0, again.stderr
    summary = json.loads(again.stdout)
    assert (summary["skipped"], summary["analysed"], summary["recorded"], summary["selected"]) == (500, 0, 0, 500)
    assert versions_by_path(data) == final


def test_a_file_named_twice_is_recorded_once(isolated: Path) -> None:
    archive, data = isolated / "archive", isolated / "data"
    files = write_archive(archive, 6)
    summary = reprocess(data, archive, files[1], archive / "*.csv", files[2])
    assert summary.recorded == 6 and summary.selected == 6 + 1 + 6 + 1
    assert summary.skipped + summary.unchanged == 8
    assert sum(summary.reasons.values()) == summary.analysed == 6 + summary.unchanged  # read again, found the same
    assert set(versions_by_path(data).values()) == {1}


def test_each_version_carries_what_it_was_made_with_and_only_a_change_is_analysed_again(isolated: Path) -> None:
    archive, data = isolated / "archive", isolated / "data"
    files = write_archive(archive, 4)
    # a signal-to-noise pass mark no file reaches (theirs is hundreds): every run warns
    base = ProcessSettings(thresholds=CheckThresholds(snr_pass=1e9, snr_warn=10.0))
    first = reprocess(data, archive, settings=base)
    assert first.recorded == 4 and first.reasons == {plan.NEW: 4} and first.by_outcome == {"warn": 4}

    # Other limits (the default signal-to-noise marks, looser calibration limits): the settings
    # changed, so every file again; now they pass, and the summary says which verdicts moved.
    loose = replace(base, thresholds=CheckThresholds(calibration_pass_cm1=0.5, calibration_warn_cm1=1.0))
    second = reprocess(data, archive, settings=loose)
    assert second.reasons == {plan.SETTINGS_CHANGED: 4} and second.recorded == 4
    assert second.verdict_changes == {"warn -> pass": 4}
    assert sorted(change.new_run_id for change in second.changed_runs) == [5, 6, 7, 8]
    conn = ledger.open_ledger(data)
    try:
        newest = ledger.latest_versions(conn, sorted(_resolved(files)))
        assert {latest.provenance for latest in newest.values()} == {current_provenance(loose)}
        record = ledger.get_run(conn, newest[str(files[0].resolve())].run_id)
        assert record is not None and record.version == 2 and record.reprocessed_from is not None
        old = ledger.get_run(conn, record.reprocessed_from)
        assert old is not None and old.version == 1 and old.received_at == record.received_at  # received once
    finally:
        conn.close()

    # Touched (time stamp only): read again, found identical, not recorded; rewritten: a new
    # version of its own content, not "reprocessed from" the old bytes.
    os.utime(files[0], (1_000_000, 1_000_000))
    files[1].write_text(files[1].read_text(encoding="utf-8").replace("\n", "\n", 1) + "2999.5,0.0013\n", encoding="utf-8")
    third = reprocess(data, archive, settings=loose)
    assert third.reasons == {plan.FILE_CHANGED: 2} and third.skipped == 2
    assert third.unchanged == 1 and third.recorded == 1
    conn = ledger.open_ledger(data)
    try:
        rewritten = ledger.latest_run_for_path(conn, str(files[1].resolve()))
        assert rewritten is not None and rewritten.version == 3 and rewritten.reprocessed_from is None
    finally:
        conn.close()


def test_a_crash_fails_that_file_alone_with_the_reason_and_is_tried_again_next_time(isolated: Path) -> None:
    archive, data = isolated / "archive", isolated / "data"
    good = write_archive(archive, 3)
    (archive / "crash-now.csv").write_text("wavenumber,absorbance\n1,2\n", encoding="utf-8")
    summary = reprocess(data, archive, function="reprocess_hooks:crash_on_name")
    assert (summary.recorded, summary.failed, summary.not_recorded) == (4, 1, 0)
    assert summary.by_outcome == {**verdict_counts(good), "failed": 1}
    assert summary.failures[0].path.endswith("crash-now.csv")
    assert summary.failures[0].reason == "worker process exited with code 3"
    assert not summary.complete

    again = reprocess(data, archive, function="reprocess_hooks:crash_on_name")
    assert again.reasons == {plan.FAILED_BEFORE: 1} and again.skipped == 3 and again.failed == 1


def test_an_operators_redo_request_is_kept_and_applied_to_todays_settings(isolated: Path) -> None:
    archive, data = isolated / "archive", isolated / "data"
    files = write_archive(archive, 2)
    reprocess(data, archive)
    request = RedoRequest(species=("HCl",), threshold_sigma=6.0)
    conn = ledger.open_ledger(data)
    try:
        first = ledger.latest_run_for_path(conn, str(files[0].resolve()))
        assert first is not None
        ledger.record_reprocessed(conn, first.run_id, None, request.to_dict(), status="failed", error="test: a redo on record")
    finally:
        conn.close()
    loose = ProcessSettings(thresholds=CheckThresholds(calibration_pass_cm1=0.5, calibration_warn_cm1=1.0))
    summary = reprocess(data, archive, settings=loose)
    assert summary.recorded == 2
    conn = ledger.open_ledger(data)
    try:
        redone = ledger.latest_run_for_path(conn, str(files[0].resolve()))
        plain = ledger.latest_run_for_path(conn, str(files[1].resolve()))
        assert redone is not None and plain is not None
        assert redone.settings == request.to_dict()  # still the operator's request
        assert redone.provenance == current_provenance(redo_settings(loose, request))
        assert plain.settings is None and plain.provenance == current_provenance(loose)
    finally:
        conn.close()
    assert reprocess(data, archive, settings=loose).skipped == 2  # and then it stands


def test_stopping_abandons_the_files_out_and_records_nothing_half(isolated: Path) -> None:
    archive, data = isolated / "archive", isolated / "data"
    files = write_archive(archive, 40)
    stop = threading.Event()

    def stop_after_ten(progress: Progress) -> None:
        if progress.done >= 10:
            stop.set()

    summary = reprocess(data, archive, stop=stop, on_progress=stop_after_ten)
    assert summary.interrupted and 10 <= summary.recorded < 40
    counts = versions_by_path(data)
    assert len(counts) == summary.recorded and set(counts.values()) == {1}
    results = stored_results(data)
    assert all(json.loads(text)["status"] == "processed" for text in results.values())
    rest = reprocess(data, archive)
    assert rest.recorded == 40 - summary.recorded and set(versions_by_path(data)) == _resolved(files)
