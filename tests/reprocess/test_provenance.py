"""What a result was made with: analysis version, library hash, settings hash; kept with every
version the station records; the reasons a reprocess gives for analysing a file again."""
from __future__ import annotations

import shutil
import sqlite3
import time
from dataclasses import replace
from pathlib import Path

from processing import provenance
from processing.checks import CheckThresholds
from processing.pipeline import ProcessSettings
from processing.provenance import Provenance, code_hash, current_provenance, library_hash, settings_hash
from processing.regular_files import ReadPolicy
from processing.reprocess import plan
from processing.reprocess.selection import Candidate
from processing.species import shipped_library_path
from processing.station import ledger
from processing.station.config import StationConfig
from processing.station.station import Station

PROCESSING = Path(provenance.__file__).resolve().parent


def test_the_analysis_version_follows_the_analysis_code_and_not_the_orchestration(tmp_path: Path) -> None:
    copy = tmp_path / "processing"
    shutil.copytree(PROCESSING, copy, ignore=shutil.ignore_patterns("__pycache__"))
    before = code_hash(copy)
    assert before == provenance.analysis_code_hash()  # the same bytes, the same hash
    (copy / "station" / "pool.py").write_text("# the station's plumbing changes no result\n", encoding="utf-8")
    (copy / "reprocess" / "job.py").write_text("# nor does the reprocess job's\n", encoding="utf-8")
    assert code_hash(copy) == before
    fit = copy / "fit.py"
    fit.write_text(fit.read_text(encoding="utf-8") + "\n# a comment is a change too\n", encoding="utf-8")
    assert code_hash(copy) != before
    assert provenance.analysis_version() == f"{provenance.package_version()}+{provenance.analysis_code_hash()}"


def test_the_library_hash_is_the_library_files_bytes(tmp_path: Path) -> None:
    shipped = library_hash()
    user = tmp_path / "lab.toml"
    user.write_text(shipped_library_path().read_text(encoding="utf-8"), encoding="utf-8")
    with_user = library_hash(user)
    assert with_user != shipped
    time.sleep(0.01)
    user.write_text(user.read_text(encoding="utf-8").replace("34.968852682", "34.968852683"), encoding="utf-8")
    assert library_hash(user) not in (shipped, with_user)


def test_the_settings_hash_follows_what_changes_a_result_and_ignores_where_files_are_read() -> None:
    base = ProcessSettings()
    assert settings_hash(replace(base, read_policy=ReadPolicy(forbidden=("/data",)))) == settings_hash(base)
    changed = [
        replace(base, species=("HCl",)), replace(base, threshold_sigma=6.0),
        replace(base, thresholds=CheckThresholds(calibration_pass_cm1=0.1)), replace(base, excluded_positions_cm1=(2906.2,)),
    ]
    hashes = {settings_hash(settings) for settings in changed}
    assert len(hashes) == 4 and settings_hash(base) not in hashes


def test_the_station_records_what_each_run_was_made_with(tmp_path: Path) -> None:
    export, data = tmp_path / "export", tmp_path / "data"
    export.mkdir()
    (export / "empty.csv").write_text("", encoding="utf-8")
    station = Station(StationConfig(export_folder=export, data_folder=data, settle_seconds=0.05, workers=1))
    with station:
        assert station.wait_idle(timeout=30)
    conn = ledger.open_ledger(data)
    try:
        [run] = ledger.list_runs(conn)
    finally:
        conn.close()
    assert run.status == "unreadable"
    assert run.provenance == current_provenance(station.settings) == current_provenance(ProcessSettings())


def test_a_ledger_from_before_migrates_and_its_runs_are_analysed_again(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    old = sqlite3.connect(ledger.ledger_path(data), isolation_level=None)  # schema 4, as bandwatch made it then
    for step in ledger.MIGRATIONS[:4]:
        if isinstance(step, str):
            for statement in ledger._statements(step):
                old.execute(statement)
        else:
            step(old)
    old.execute(
        "INSERT INTO runs (path, sha256, version, status, verdict, received_at, size_bytes, mtime_ns)"
        " VALUES ('/archive/a.csv', 'abc', 1, 'processed', 'pass', '2024-01-01T00:00:00.000Z', 10, 5)"
    )
    old.execute("PRAGMA user_version = 4")
    old.close()
    conn = ledger.open_ledger(data)
    try:
        assert ledger.schema_version(conn) == ledger.SCHEMA_VERSION
        latest = ledger.latest_versions(conn, ["/archive/a.csv"])["/archive/a.csv"]
    finally:
        conn.close()
    assert latest.provenance is None and latest.verdict == "pass"
    today = current_provenance(ProcessSettings())
    assert plan.why_analyse(Candidate("/archive/a.csv", 10, 5), latest, today) == plan.NO_VERSIONS
    raw = sqlite3.connect(ledger.ledger_path(data))
    assert raw.execute("SELECT analysis_version FROM runs").fetchone() == (None,)
    raw.close()


def test_the_reason_to_analyse_again_is_the_first_thing_that_differs() -> None:
    today = Provenance("1.0+aaaa", "lib1", "set1")
    same = Candidate("/a.csv", 100, 7)

    def version(made: Provenance | None, status: str = "processed", size: int | None = 100, mtime: int | None = 7) -> ledger.LatestVersion:
        return ledger.LatestVersion(1, "/a.csv", "sha", status, "pass", "2024-01-01T00:00:00.000Z", size, mtime, made)

    assert plan.why_analyse(same, None, today) == plan.NEW
    assert plan.why_analyse(same, version(Provenance("0.9+bbbb", "lib1", "set1")), today) == plan.ANALYSIS_CHANGED
    assert plan.why_analyse(same, version(Provenance("1.0+aaaa", "lib0", "set0")), today) == plan.LIBRARY_CHANGED
    assert plan.why_analyse(same, version(Provenance("1.0+aaaa", "lib1", "set0")), today) == plan.SETTINGS_CHANGED
    assert plan.why_analyse(same, version(today, status="failed"), today) == plan.FAILED_BEFORE
    assert plan.why_analyse(Candidate("/a.csv", 101, 7), version(today), today) == plan.FILE_CHANGED
    assert plan.why_analyse(Candidate("/a.csv", 100, 8), version(today), today) == plan.FILE_CHANGED
    assert plan.why_analyse(Candidate("/a.csv"), version(today), today) == plan.FILE_CHANGED  # gone: the analysis says so
    assert plan.why_analyse(same, version(today, size=None, mtime=None), today) == plan.FILE_CHANGED
    assert plan.why_analyse(same, version(today), today) is None
    assert plan.why_analyse(same, version(today, status="unreadable"), today) is None
