"""`bandwatch reprocess` as people and scripts see it: dry runs, progress, summaries, refusals."""
from __future__ import annotations

import hashlib
import io
import json
import re
import sys
from pathlib import Path

import pytest
from reprocess_support import versions_by_path, write_archive

from processing.errors import ConfigError
from processing.reprocess.summary import Progress
from processing.station.config import config_from_table
from tui.cli import main
from tui.commands.reprocess import _Display, progress_line


def test_a_dry_run_says_what_it_would_do_and_writes_nothing(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    archive, data = isolated / "archive", isolated / "data"
    write_archive(archive, 5)
    assert main(["reprocess", str(archive), "--data", str(data), "--dry-run", "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert (summary["mode"], summary["why_analysed"], summary["recorded"]) == ("dry-run", {"new": 5}, 0)
    assert len(summary["would_analyse"]) == 5
    assert not data.exists()  # no ledger made, no lock file

    assert main(["reprocess", str(archive), "--data", str(data), "--json"]) == 0
    capsys.readouterr()
    before = hashlib.sha256((data / "ledger.sqlite3").read_bytes()).hexdigest()
    (archive / "run-00000.csv").write_text("wavenumber,absorbance\n", encoding="utf-8")
    assert main(["reprocess", str(archive), "--data", str(data), "--dry-run"]) == 0
    out = capsys.readouterr().out
    assert "would analyse 1, skip 4" in out and "nothing analysed or written" in out
    assert "why: file changed or not known unchanged 1" in out
    assert hashlib.sha256((data / "ledger.sqlite3").read_bytes()).hexdigest() == before


def test_plain_progress_is_one_line_per_n_files_and_the_summary_names_verdict_changes(
    isolated: Path, capsys: pytest.CaptureFixture[str],
) -> None:
    archive, data = isolated / "archive", isolated / "data"
    write_archive(archive, 5)
    # thresholds under which every file warns (its signal-to-noise, hundreds, is under the pass mark)
    strict = isolated / "strict.toml"
    strict.write_text("[checks]\nsnr_pass = 1e9\nsnr_warn = 10.0\n", encoding="utf-8")
    assert main(["reprocess", str(archive), "--data", str(data), "--config", str(strict), "--plain", "--every", "2", "--workers", "1"]) == 0
    lines = capsys.readouterr().out.splitlines()
    progress = [line for line in lines if line.startswith("reprocess: ")]
    assert [re.match(r"reprocess: (\d+)/(\d+|\?) files", line).group(1) for line in progress] == ["2", "4"]
    assert any(line.startswith("reprocess (local): 5 files in ") and line.endswith(": 5 recorded, 0 skipped, 0 failed") for line in lines)
    assert all(len(line) <= 80 for line in lines)
    assert "  by verdict: warn 5" in lines

    config = isolated / "station.toml"
    config.write_text("[checks]\ncalibration_pass_cm1 = 0.5\ncalibration_warn_cm1 = 1.0\n", encoding="utf-8")
    assert main(["reprocess", str(archive), "--data", str(data), "--config", str(config), "--plain", "--reports"]) == 0
    out = capsys.readouterr().out
    reports = sorted((data / "reports").iterdir())  # --reports: the new versions' report files
    assert len(reports) == 5 and all(int(folder.name.split("-")[0]) > 5 for folder in reports)
    assert all((folder / "result.json").is_file() and (folder / "summary.md").is_file() for folder in reports)
    assert "  why analysed: settings changed 5" in out
    assert "  verdict changed (5 runs): warn -> pass 5" in out
    assert re.search(r"run \d+ -> \d+  warn -> pass  .*run-0000\d\.csv", out)
    assert re.search(r"^ +H35Cl +1-0 +origin +5 +0 +0 +0 +cm-1$", out, re.MULTILINE)  # the what-changed table: thresholds move no fit
    assert all(len(line) <= 80 for line in out.splitlines() if "run-0" not in line)  # paths may be longer
    assert set(versions_by_path(data).values()) == {2}

    assert main(["ledger", "list", "--json", "--data", str(data), "--limit", "1"]) == 0
    newest = json.loads(capsys.readouterr().out)
    assert newest["version"] == 2 and 1 <= newest["reprocessed_from"] <= 5
    assert newest["analysis_version"] and newest["library_hash"] and newest["settings_hash"]
    assert main(["ledger", "show", str(newest["reprocessed_from"]), "--json", "--data", str(data)]) == 0
    old = json.loads(capsys.readouterr().out)
    assert old["path"] == newest["path"] and old["version"] == 1 and old["settings_hash"] != newest["settings_hash"]
    assert main(["ledger", "show", str(newest["run_id"]), "--data", str(data)]) == 0
    shown = capsys.readouterr().out
    assert f"reprocessed from run {newest['reprocessed_from']} with today's analysis (bandwatch reprocess)" in shown
    assert f"made with  analysis {newest['analysis_version']}, library {newest['library_hash']}" in shown


def test_the_progress_bar_shows_done_total_rate_time_left_and_failures_in_80_columns() -> None:
    out = io.StringIO()  # rich draws it 80 columns wide, as on a small terminal
    display = _Display(out, plain=False, every=100)
    display.progress(Progress(done=400_000, total=1_000_000, analysed=350_000, skipped=50_000, failed=3_000, seconds=8000.0))
    display.close()
    [line] = out.getvalue().splitlines()
    assert len(line) <= 80
    assert line.endswith(" 400000/1000000 50.0 files/s left 3h20m skip 50000 fail 3000"), line
    assert progress_line(Progress(40, 100, 35, 5, 3, 8.0)) == (
        "reprocess: 40/100 files (analysed 35, skipped 5, failed 3) 5.0 files/s, left 12s"
    )
    assert progress_line(Progress(40, None, 40, 0, 0, 8.0)).startswith("reprocess: 40/? files")


def test_refusals_are_one_line(isolated: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    archive = isolated / "archive"
    write_archive(archive, 1)
    data = str(isolated / "data")
    cases = [
        (["reprocess", "--data", data], "name folders, globs or files, or --ledger-runs"),
        (["reprocess", str(isolated / "nowhere"), "--data", data], "nowhere: no such file or folder"),
        (["reprocess", "--ledger-runs", "verdict=great", "--data", data], "verdict=great is not one of"),
        (["reprocess", str(archive), "--data", data, "--cluster"], "--cluster without an address needs [cluster]"),
        (["reprocess", "--data", data, "--cluster", str(archive)], "put folders and files before --cluster"),
    ]
    for argv, says in cases:
        assert main(argv) == 1
        err = capsys.readouterr().err
        assert len(err.splitlines()) == 1 and says in err, (argv, err)

    monkeypatch.setitem(sys.modules, "distributed", None)  # as if the extra were not installed
    assert main(["reprocess", str(archive), "--data", data, "--cluster", "tcp://127.0.0.1:8786"]) == 1
    err = capsys.readouterr().err
    assert err == "bandwatch: the cluster mode needs Dask: pip install 'bandwatch[cluster]'\n"
    assert not (isolated / "data" / "ledger.sqlite3").exists() or versions_by_path(isolated / "data") == {}


def test_the_cluster_table_of_the_configuration() -> None:
    assert config_from_table({"cluster": {"address": " tcp://scheduler:8786 "}}).cluster_address == "tcp://scheduler:8786"
    assert config_from_table({"cluster": {}}).cluster_address is None
    for table, says in (
        ({"cluster": "tcp://x:1"}, "must be a table"),
        ({"cluster": {"address": 8786}}, "scheduler address"),
        ({"cluster": {"port": 1}}, "cluster.port: unknown key"),
    ):
        with pytest.raises(ConfigError, match=re.escape(says)):
            config_from_table(table)
