"""`bandwatch reprocess` on either ledger backend, with runs keyed by instrument + path: files
named on the command line are the station's instrument's, files found in the ledger keep the
instrument that recorded them, and `--ledger-runs instrument=NAME` takes that instrument's only."""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest
from reprocess_support import write_archive

from processing.checks import CheckThresholds
from processing.pipeline import ProcessSettings
from processing.provenance import current_provenance
from processing.reprocess import plan
from processing.reprocess.job import JobOptions, ReprocessJob
from processing.reprocess.local import LocalBackend
from processing.reprocess.selection import Candidate, LedgerSelection, PathSelection, parse_query
from processing.reprocess.summary import ReprocessSummary
from processing.station import ledger
from tui.cli import main

# a signal-to-noise pass mark no file reaches (theirs is hundreds): every run warns; then other
# limits (a settings change) under which they pass
STRICT = ProcessSettings(thresholds=CheckThresholds(snr_pass=1e9, snr_warn=10.0))
LOOSE = ProcessSettings(thresholds=CheckThresholds(calibration_pass_cm1=0.5, calibration_warn_cm1=1.0))


def _reprocess(where: str | Path, data: Path, candidates: object, settings: ProcessSettings) -> ReprocessSummary:
    conn = ledger.open_ledger(where)
    backend = LocalBackend(2, "processing.pipeline:process_file", 30.0, 2048)
    try:
        job = ReprocessJob(conn, JobOptions(data, settings, ledger_location=where), backend)
        return job.run(candidates(conn) if callable(candidates) else candidates)  # type: ignore[arg-type]
    finally:
        backend.close()
        conn.close()


def test_a_reprocess_on_either_backend_keeps_each_file_on_its_instrument(ledger_at: str | Path, tmp_path: Path) -> None:
    archive, data = tmp_path / "archive", tmp_path / "reprocess-data"
    files = write_archive(archive, 3)
    first = _reprocess(ledger_at, data, PathSelection((str(archive),), instrument="ftir-a").candidates(), STRICT)
    assert first.recorded == 3 and first.reasons == {plan.NEW: 3} and first.by_outcome == {"warn": 3}

    # the same files for another instrument are other files: new there, and ftir-a's stay as they are
    other = _reprocess(ledger_at, data, PathSelection((str(archive),), instrument="ftir-b").candidates(), STRICT)
    assert other.recorded == 3 and other.reasons == {plan.NEW: 3}

    # ftir-a's runs found in the ledger, analysed with changed settings: new versions on ftir-a
    only_a = LedgerSelection(parse_query("instrument=ftir-a"))
    second = _reprocess(ledger_at, data, only_a.candidates, LOOSE)
    assert second.selected == 3 and second.reasons == {plan.SETTINGS_CHANGED: 3}
    assert second.verdict_changes == {"warn -> pass": 3}
    # what changed, read back from the ledger on this backend: thresholds move no fitted value
    origin = [s for s in second.quantity_shifts if (s.isotopologue, s.band, s.quantity) == ("H35Cl", "1-0", "origin")]
    assert len(origin) == 1 and origin[0].count == 3 and origin[0].smallest == origin[0].largest == 0.0
    conn = ledger.open_ledger(ledger_at, read_only=True)
    try:
        paths = [str(path.resolve()) for path in files]
        on_a = ledger.latest_versions(conn, paths, "ftir-a")
        on_b = ledger.latest_versions(conn, paths, "ftir-b")
        assert {latest.provenance for latest in on_a.values()} == {current_provenance(LOOSE)}
        assert {latest.provenance for latest in on_b.values()} == {current_provenance(STRICT)}
        assert sorted((r.instrument, r.version) for r in ledger.list_runs(conn, with_result=False)) == (
            [("ftir-a", 1)] * 3 + [("ftir-a", 2)] * 3 + [("ftir-b", 1)] * 3
        )
    finally:
        conn.close()

    # and then they stand: nothing analysed again on either instrument
    again = _reprocess(ledger_at, data, LedgerSelection(parse_query("all")).candidates, LOOSE)
    assert (again.selected, again.skipped, again.analysed) == (6, 3, 3)
    assert again.reasons == {plan.SETTINGS_CHANGED: 3}  # ftir-b's were made with the strict settings


def test_a_file_named_for_two_instruments_in_one_chunk_is_planned_for_each(tmp_path: Path) -> None:
    data = tmp_path / "data"
    [path] = write_archive(tmp_path / "archive", 1)
    conn = ledger.open_ledger(data)
    try:
        made = current_provenance(ProcessSettings())
        found = path.stat()
        ledger.record_run(conn, str(path), "x", "processed", verdict="pass", instrument="ftir-a", provenance=made,
                          size_bytes=found.st_size, mtime_ns=found.st_mtime_ns)
        planner = plan.Planner(ProcessSettings(), lambda instrument, paths: ledger.latest_versions(conn, paths, instrument))
        tasks, skipped = planner.plan([
            Candidate(str(path), found.st_size, found.st_mtime_ns, "ftir-a"),
            Candidate(str(path), found.st_size, found.st_mtime_ns, "ftir-b"),
        ])
    finally:
        conn.close()
    assert [(c.instrument, v.instrument) for c, v in skipped] == [("ftir-a", "ftir-a")]
    assert [(t.key, t.reason) for t in tasks] == [(("ftir-b", str(path)), plan.NEW)]


@pytest.mark.parametrize("backend", ["sqlite", "postgresql"])
def test_the_command_takes_an_instruments_runs_from_the_ledger(
    backend: str, isolated: Path, capsys: pytest.CaptureFixture[str], request: pytest.FixtureRequest,
) -> None:
    archive, data = isolated / "archive", isolated / "data"
    write_archive(archive, 4)
    where = ["--data", str(data)]
    if backend == "postgresql":
        where += ["--ledger", request.getfixturevalue("pg_url")]
    station = isolated / "station.toml"
    station.write_text('[station]\ninstrument = "ftir-a"\n', encoding="utf-8")
    assert main(["reprocess", str(archive), *where, "--config", str(station), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["recorded"] == 4

    def dry_run(query: str) -> dict[str, object]:
        assert main(["reprocess", "--ledger-runs", query, *where, "--config", str(station), "--dry-run", "--json"]) == 0
        return json.loads(capsys.readouterr().out)

    assert (dry_run("instrument=ftir-a")["selected"], dry_run("instrument=ftir-a")["skipped"]) == (4, 4)
    assert dry_run("instrument=ftir-b")["selected"] == 0

    loose = isolated / "loose.toml"  # another station's configuration, with LOOSE's check limits
    loose.write_text('[station]\ninstrument = "ftir-b"\n[checks]\ncalibration_pass_cm1 = 0.5\n'
                     'calibration_warn_cm1 = 1.0\n', encoding="utf-8")
    assert main(["reprocess", "--ledger-runs", "instrument=ftir-a", *where, "--config", str(loose), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert (summary["recorded"], summary["why_analysed"]) == (4, {"settings changed": 4})
    assert main(["ledger", "list", "--json", *where]) == 0
    listed = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    # the runs found in the ledger stay ftir-a's, whichever station reprocesses them
    assert sorted((run["instrument"], run["version"]) for run in listed) == [("ftir-a", 1)] * 4 + [("ftir-a", 2)] * 4
    if backend == "postgresql":
        assert not (data / ledger.LEDGER_FILE).exists()  # the server is the ledger: no file beside it


def test_runs_from_before_instruments_become_the_stations_before_it_reprocesses(
    isolated: Path, capsys: pytest.CaptureFixture[str],
) -> None:
    """As a station does with its ledger file: a file recorded before instruments existed is the
    same file when named again (a new version of it, not a second version 1 under a new key)."""
    archive, data = isolated / "archive", isolated / "data"
    [path] = write_archive(archive, 1)
    conn = ledger.open_ledger(data)
    sha = hashlib.sha256(path.read_bytes()).hexdigest()
    old = ledger.record_run(conn, str(path.resolve()), sha, "processed", verdict="warn")  # instrument ""
    conn.close()
    station = isolated / "station.toml"
    station.write_text('[station]\ninstrument = "ftir-a"\n', encoding="utf-8")
    assert main(["reprocess", str(archive), "--data", str(data), "--config", str(station), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert (summary["recorded"], summary["why_analysed"]) == (1, {plan.NO_VERSIONS: 1})
    conn = ledger.open_ledger(data, read_only=True)
    try:
        runs = ledger.list_runs(conn, with_result=False)
    finally:
        conn.close()
    assert [(r.instrument, r.version, r.reprocessed_from) for r in runs] == [("ftir-a", 2, old.run_id), ("ftir-a", 1, None)]
