"""Report files: result JSON as `process --json` prints it, the line list CSV, the summary."""
from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest

from station_files import spectrum_csv, write_file

from processing.pipeline import process_file
from processing.results import RunResult, to_json
from processing.station.reports import LINE_COLUMNS, lines_csv, report_folder, summary_markdown, write_reports


def _result() -> RunResult:
    # the shape of the pipeline's public JSON; numbers invented for the test
    return RunResult.from_dict({
        "schema": 1, "file": "/exp/run 7.csv", "sha256": "ab" * 32, "status": "processed", "error": None,
        "spectrum": {"points": 4096, "first_cm1": 2500.0, "last_cm1": 3200.0, "format": "delimited text"},
        "lines": [
            {"position": {"value": 2906.2466, "sigma": 0.0004}, "height": 0.41, "width": 0.21,
             "assigned": {"isotopologue": "H35Cl", "v_upper": 1, "v_lower": 0, "branch": "R", "J_lower": 0,
                          "calc": 2906.2460, "residual": 0.0006}},
            {"position": {"value": 2750.1, "sigma": None}, "height": 0.02, "width": None, "assigned": None},
        ],
        "bands": [{"isotopologue": "H35Cl", "v_upper": 1, "v_lower": 0, "n_lines": 20, "rms": 0.0012,
                   "origin": {"value": 2885.9775, "sigma": 0.0031}, "B_upper": {"value": 10.1365, "sigma": 0.0002},
                   "B_lower": {"value": 10.4398, "sigma": 0.0002}}],
        "constants": [{"isotopologue": "H35Cl", "B_e": {"value": 10.5934, "sigma": 0.0004}}],
        "checks": [{"name": "combination differences", "status": "pass", "detail": "agree within 2 sigma"}],
        "verdict": "pass",
    })


def test_line_list_csv_has_one_row_per_line_with_assignment_and_obs_minus_calc() -> None:
    rows = list(csv.DictReader(io.StringIO(lines_csv(_result()))))
    assert tuple(rows[0]) == LINE_COLUMNS
    assert rows[0]["position_cm1"] == "2906.2466" and rows[0]["sigma_cm1"] == "0.0004"
    assert rows[0]["assignment"] == "H35Cl 1-0 R(0)" and rows[0]["obs_minus_calc_cm1"] == "0.0006"
    assert rows[1]["assignment"] == "" and rows[1]["width_cm1"] == "" and rows[1]["sigma_cm1"] == ""
    # the writer takes each row's values in order under the header: a row's keys are the columns
    from processing.result_text import line_row

    assert all(tuple(line_row(line)) == LINE_COLUMNS for line in _result().lines)
    assert rows[0]["calc_cm1"] == "2906.246" and rows[0]["J_lower"] == "0" and rows[0]["branch"] == "R"


def test_summary_names_file_hash_verdict_bands_constants_checks() -> None:
    text = summary_markdown(_result(), 7, 2)
    assert text.startswith("# Run 7 v2: run 7.csv")
    assert "ab" * 32 in text and "**pass**" in text
    assert "| H35Cl | 1-0 | 2885.9775(31) cm-1 |" in text
    assert "B_e = 10.59340(40) cm-1" in text  # two digits of sigma, as the estimate formatter writes
    assert "- combination differences: pass agree within 2 sigma" in text


def test_reports_of_a_real_run_are_written_in_the_data_folder(tmp_path: Path) -> None:
    (tmp_path / "export").mkdir()
    source = write_file(tmp_path / "export" / "sample.csv", spectrum_csv(300))
    result = process_file(source)
    folder = write_reports(tmp_path / "data", 12, 1, result)
    assert folder == report_folder(tmp_path / "data", 12, str(source)) == tmp_path / "data" / "reports" / "12-sample"
    assert json.loads((folder / "result.json").read_text()) == json.loads(to_json(result))
    rows = list(csv.DictReader(io.StringIO((folder / "lines.csv").read_text())))
    assert len(rows) == len(result.lines) >= 1
    assert "sample.csv" in (folder / "summary.md").read_text()
    assert sorted(p.name for p in (tmp_path / "export").iterdir()) == ["sample.csv"]


def test_report_reads_the_run_from_the_ledger_where_the_station_keeps_it(
    tmp_path: Path, ledger_at: str | Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """`bandwatch report RUN --ledger URL`: the run comes from that ledger (a server), the files
    go to the data folder; on the file the data folder's ledger is used."""
    from processing.station import ledger
    from tui.cli import main

    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "none.toml"))
    data = tmp_path / "data"
    conn = ledger.open_ledger(ledger_at)
    run = ledger.record_run(conn, "/exp/run 7.csv", "ab" * 32, "processed", result=_result(), instrument="ftir-1")
    conn.close()
    where = [] if isinstance(ledger_at, Path) else ["--ledger", str(ledger_at)]
    assert main(["report", str(run.run_id), "--data", str(data), *where]) == 0
    folder = report_folder(data, run.run_id, "/exp/run 7.csv")
    assert capsys.readouterr().out.strip() == f"report written: {folder}"
    assert "H35Cl" in (folder / "report.txt").read_text() and (folder / "lines.csv").exists()


def test_reports_from_a_digest_are_the_reports_from_the_result(tmp_path: Path) -> None:
    """The station writes a run's reports from the worker's texts and digest; the files are the
    ones written from the result; a digest without the texts is refused."""
    from processing.result_text import summary_body
    from processing.results import to_json
    from processing.run_digest import digest_of

    result = _result()
    texts = (to_json(result), lines_csv(result), summary_body(result))
    one = write_reports(tmp_path / "a", 7, 2, result)
    two = write_reports(tmp_path / "b", 7, 2, digest_of(result), *texts)
    for name in ("result.json", "lines.csv", "summary.md"):
        assert (one / name).read_bytes() == (two / name).read_bytes(), name
    with pytest.raises(ValueError):
        write_reports(tmp_path / "c", 7, 2, digest_of(result), texts[0])


def test_reports_staged_by_a_worker_are_the_reports_the_station_writes(tmp_path: Path) -> None:
    """A worker writes result.json and lines.csv of a processed run before it has an id; the
    station moves that folder in place and adds summary.md: the same three files, byte for byte,
    as written by the station itself."""
    from processing.result_text import summary_body
    from processing.run_digest import digest_of
    from processing.station.reports import adopt_staged_reports, stage_reports, staging_folder

    result = _result()
    texts = (to_json(result), lines_csv(result), summary_body(result))
    written = write_reports(tmp_path / "a", 7, 2, digest_of(result), *texts)
    staging = staging_folder(tmp_path / "b")
    staging.mkdir(parents=True)
    staged = stage_reports(str(staging), 12, texts[0], texts[1])
    assert staged is not None and sorted(p.name for p in Path(staged).iterdir()) == ["lines.csv", "result.json"]
    adopted = adopt_staged_reports(staged, tmp_path / "b", 7, 2, result.file, texts[2])
    assert adopted == report_folder(tmp_path / "b", 7, result.file) and not Path(staged).exists()
    for name in ("result.json", "lines.csv", "summary.md"):
        assert (written / name).read_bytes() == (adopted / name).read_bytes(), name
    again = stage_reports(str(staging), 13, texts[0], texts[1])  # the run's folder is taken: not adopted
    assert again is not None and adopt_staged_reports(again, tmp_path / "b", 7, 2, result.file, texts[2]) is None
    assert stage_reports(str(tmp_path / "missing"), 14, texts[0], texts[1]) is None  # cannot write: the station writes


def test_a_summary_staged_under_a_stand_in_title_ends_as_the_station_writes_it(tmp_path: Path) -> None:
    """A worker stages summary.md too, under a stand-in title (the run's id is not known yet);
    the station writes the real title over it: byte for byte the summary it writes itself, for
    a title shorter than the stand-in and for one longer (an id of 14 digits)."""
    from processing.result_text import summary_body
    from processing.run_digest import digest_of
    from processing.station.reports import STAND_IN_RUN_ID, adopt_staged_reports, stage_reports, staging_folder

    result = _result()
    texts = (to_json(result), lines_csv(result), summary_body(result))
    staging = staging_folder(tmp_path / "b")
    staging.mkdir(parents=True)
    for run_id in (7, STAND_IN_RUN_ID * 100 + 7):
        written = write_reports(tmp_path / "a", run_id, 2, digest_of(result), *texts)
        staged = stage_reports(str(staging), run_id, texts[0], texts[1], texts[2], result.file)
        assert staged is not None
        stand_in = (Path(staged) / "summary.md").read_text()
        assert stand_in.startswith(f"# Run {STAND_IN_RUN_ID} ") and stand_in.endswith(texts[2])
        adopted = adopt_staged_reports(staged, tmp_path / "b", run_id, 2, result.file, texts[2])
        assert adopted is not None
        for name in ("result.json", "lines.csv", "summary.md"):
            assert (written / name).read_bytes() == (adopted / name).read_bytes(), (run_id, name)


def test_a_station_leaves_no_staged_reports_and_clears_what_a_stopped_one_left(make_station, folders, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """A processed run's reports come from its worker's staged folder (the station does not
    write them itself); the staging folder ends empty, what a stopped station left included."""
    import processing.station.station as station_module
    from processing.station.reports import staging_folder

    written_by_station: list[int] = []
    monkeypatch.setattr(station_module, "write_reports", lambda *args, **kwargs: written_by_station.append(args[1]))
    export, data = folders
    leftover = staging_folder(data) / "9-123-abcd"
    leftover.mkdir(parents=True)
    (leftover / "result.json").write_text("{}")
    write_file(export / "a.csv", spectrum_csv(300))
    write_file(export / "b.csv", "not a spectrum\n")
    station, _ = make_station()
    station.start()
    assert station.wait_idle(30)
    station.stop()
    assert list(staging_folder(data).iterdir()) == []  # the leftover cleared; the runs' folders moved in
    assert written_by_station == []
    [folder] = [p for p in (data / "reports").iterdir()]
    assert sorted(p.name for p in folder.iterdir()) == ["lines.csv", "result.json", "summary.md"]
    assert json.loads((folder / "result.json").read_text())["file"].endswith("a.csv")
