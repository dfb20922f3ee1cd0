"""The command line as an operator meets it: --version, a first start without a configuration,
tables fitted to the terminal, local times with their zone, refusals in one line (a flag
without a reason, an export to an unknown extension, --limit -1), `ledger show` with the check
reasons, `watch --once` exit statuses, reports readable by the lab, `process --config`, the
day export, and the demo cleaning up when its terminal closes."""
from __future__ import annotations

import csv
import io
import json
import os
import re
import signal
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import pytest
from station_files import spectrum_csv, write_file

from processing.station import ledger
from tui.cli import main

ROOT = Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "sample_runs"


@pytest.fixture()
def isolated(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """No user configuration or data folder leaks in; the local zone is a fixed one."""
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "no-config.toml"))
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    return tmp_path


@pytest.fixture()
def lab_zone(monkeypatch: pytest.MonkeyPatch):  # type: ignore[no-untyped-def]
    """TZ=LAB-2: a POSIX zone string (IEEE 1003.1 TZ, no zone database needed), UTC+2, named LAB."""
    monkeypatch.setenv("TZ", "LAB-2")
    time.tzset()
    yield
    monkeypatch.undo()
    time.tzset()


def _sample_ledger(isolated: Path, capsys: pytest.CaptureFixture[str], names: tuple[str, ...]) -> tuple[Path, Path]:
    export, data = isolated / "export", isolated / "data"
    export.mkdir()
    for index, name in enumerate(names):
        (export / name).write_bytes((SAMPLES / name).read_bytes())
        os.utime(export / name, (1_000_000 + index, 1_000_000 + index))
    main(["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"])
    capsys.readouterr()
    return export, data


def test_version_is_the_installed_packages(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as done:
        main(["--version"])
    assert done.value.code == 0
    declared = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]
    assert capsys.readouterr().out.strip() == f"bandwatch {declared}"


def test_no_export_folder_configured_points_to_init(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main([]) == 0
    out = capsys.readouterr().out
    assert "No export folder is configured yet" in out
    assert "bandwatch init --export" in out and str(isolated / "no-config.toml") in out


def test_process_tables_fit_the_terminal_width(monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    sample = str(SAMPLES / "1115_dcl_poor_purge.jdx")  # many unassigned lines with long causes
    monkeypatch.delenv("COLUMNS", raising=False)
    assert main(["process", sample]) == 0
    whole = capsys.readouterr().out
    assert max(len(line) for line in whole.splitlines()) > 80  # tables as wide as they are on a pipe
    monkeypatch.setenv("COLUMNS", "80")
    assert main(["process", sample]) == 0
    fitted = capsys.readouterr().out
    assert max(len(line) for line in fitted.splitlines()) <= 80
    # nothing cut and no word broken: every word of the whole tables is there, intact (the
    # fitted ones may repeat a row's name in a block of the columns that did not fit)
    from collections import Counter

    def words(text: str) -> Counter[str]:
        return Counter(word for word in text.split() if set(word) != {"-"})

    assert not words(whole) - words(fitted)
    assert "verdict: WARN (interferents: " in " ".join(fitted.split())  # the main reasons beside the verdict


def test_times_are_local_with_their_zone(isolated: Path, capsys: pytest.CaptureFixture[str], lab_zone: None) -> None:
    export, data = isolated / "export", isolated / "data"
    export.mkdir()
    write_file(export / "a.csv", spectrum_csv(150))
    main(["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"])
    plain = capsys.readouterr().out.splitlines()
    assert plain and all(re.match(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\+02:00 ", line) for line in plain)
    conn = ledger.open_ledger(data)
    [run] = ledger.list_runs(conn)
    conn.close()
    utc_hour = int(run.received_at[11:13])
    assert main(["ledger", "show", "1", "--data", str(data)]) == 0
    shown = capsys.readouterr().out
    received = re.search(r"received\s+(\S+)", shown)
    assert received and received.group(1).endswith("+02:00")
    assert int(received.group(1)[11:13]) == (utc_hour + 2) % 24
    assert main(["ledger", "list", "--data", str(data)]) == 0
    assert "+02:00" in capsys.readouterr().out


def test_refusals_are_one_line(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    export, data = isolated / "export", isolated / "data"
    export.mkdir()
    write_file(export / "a.csv", spectrum_csv(150))
    main(["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"])
    capsys.readouterr()
    # a flag needs a reason, as in the interface
    assert main(["ledger", "flag", "1", "--data", str(data)]) == 2
    assert main(["ledger", "flag", "1", "--reason", "  ", "--data", str(data)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 2 and "needs a reason" in err
    conn = ledger.open_ledger(data)
    assert ledger.decision_history(conn, 1) == []
    conn.close()
    # an export to an extension bandwatch does not write is refused; --format says what to write
    target = isolated / "runs.txt"
    assert main(["ledger", "export", str(target), "--data", str(data)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and ".csv or .json" in err and not target.exists()
    assert main(["ledger", "export", str(target), "--format", "csv", "--data", str(data)]) == 0
    assert "as CSV to" in capsys.readouterr().err and target.read_text().startswith("run_id,")
    # --limit must be 1 or more
    with pytest.raises(SystemExit) as done:
        main(["ledger", "list", "--limit", "-1", "--data", str(data)])
    assert done.value.code == 2 and "must be at least 1" in capsys.readouterr().err


def test_ledger_show_has_no_empty_brackets_and_gives_the_check_reasons(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _, data = _sample_ledger(isolated, capsys, ("1500_hcl_after_service.jdx",))
    assert main(["ledger", "accept", "1", "--operator", "ana", "--data", str(data)]) == 0
    capsys.readouterr()
    assert main(["ledger", "show", "1", "--data", str(data)]) == 0
    shown = capsys.readouterr().out
    assert "()" not in shown
    assert "decision   accept by ana\n" in shown
    assert "verdict    WARN  (calibration +0.24 cm-1 · fringes 0.004 A · n/a: temperature)" in shown
    assert re.search(r"WARN\s+calibration: wavenumber calibration offset: offset \+0\.240", shown)


def test_watch_once_exit_status_says_when_a_run_failed(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    export, data = isolated / "export", isolated / "data"
    export.mkdir()
    (export / "good.jdx").write_bytes((SAMPLES / "0905_hcl_cell.jdx").read_bytes())
    args = ["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"]
    assert main(args) == 0  # a passing run
    (export / "saturated.jdx").write_bytes((SAMPLES / "1040_hcl_saturated.jdx").read_bytes())
    assert main(args) == 3  # its verdict is FAIL (sample_runs/1040_hcl_saturated: 6 A peaks)
    assert " verdict=fail " in capsys.readouterr().out


def test_watch_once_exits_1_when_an_analysis_stops(isolated: Path) -> None:
    from processing.station.config import StationConfig
    from tui.commands.watch import run_plain

    export = isolated / "export"
    export.mkdir()
    write_file(export / "raise.csv", spectrum_csv(150))
    config = StationConfig(export_folder=export, data_folder=isolated / "data", settle_seconds=0.05, workers=1,
                           process_function="station_hooks:misbehave")
    assert run_plain(config, once=True) == 1


def test_report_files_are_readable_by_the_lab(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    previous = os.umask(0o022)  # the common default umask (common practice)
    try:
        _, data = _sample_ledger(isolated, capsys, ("0905_hcl_cell.jdx",))
    finally:
        os.umask(previous)
    files = [path for path in (data / "reports").rglob("*") if path.is_file()]
    assert {path.name for path in files} == {"result.json", "lines.csv", "summary.md"}
    assert all(path.stat().st_mode & 0o777 == 0o644 for path in files), [oct(p.stat().st_mode) for p in files]


def test_process_with_a_station_configuration_reproduces_its_verdict(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    sample = str(SAMPLES / "1500_hcl_after_service.jdx")
    assert main(["process", sample, "--json"]) == 0
    default = json.loads(capsys.readouterr().out)
    assert default["verdict"] == "warn"  # the 0.24 cm-1 shift is over the default calibration limits
    config = isolated / "station.toml"
    # a station that allows 0.3 cm-1 of calibration offset and 0.01 A of fringes
    config.write_text('[checks]\ncalibration_pass_cm1 = 0.3\ncalibration_warn_cm1 = 0.5\nfringe_amplitude_warn = 0.01\n')
    assert main(["process", sample, "--json", "--config", str(config)]) == 0
    lenient = json.loads(capsys.readouterr().out)
    checks = {check["name"]: check["status"] for check in lenient["checks"]}
    assert checks["calibration"] == "pass" and checks["baseline"] == "pass" and lenient["verdict"] == "pass"
    assert main(["process", sample, "--config", str(isolated / "missing.toml")]) == 1
    assert "no such configuration file" in capsys.readouterr().err


def test_day_export_one_row_per_run_with_band_origins_and_B(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _, data = _sample_ledger(isolated, capsys, ("0905_hcl_cell.jdx", "1500_hcl_after_service.jdx"))
    assert main(["ledger", "flag", "2", "--reason", "after service: check", "--operator", "ana", "--data", str(data)]) == 0
    capsys.readouterr()
    conn = ledger.open_ledger(data)
    runs = {run.run_id: run for run in ledger.list_runs(conn)}
    conn.close()
    from processing.local_time import local_day

    day = local_day(runs[1].received_at)
    target = isolated / "day.csv"
    assert main(["ledger", "day", day, "-o", str(target), "--data", str(data)]) == 0
    rows = list(csv.DictReader(io.StringIO(target.read_text())))
    assert [row["file"] for row in rows] == ["0905_hcl_cell.jdx", "1500_hcl_after_service.jdx"]
    second = rows[1]
    assert (second["verdict"], second["decision"], second["decided_by"]) == ("warn", "flag", "ana")
    assert second["reasons"].startswith("calibration +0.24 cm-1")
    # band origins and B values with sigmas, as the run's result has them (H35Cl 1-0 origin
    # 2885.98 cm-1 in the library, here shifted by the run's +0.24 cm-1 calibration error)
    band = runs[2].result.band("H35Cl", 1, 0)
    assert band is not None
    assert float(second["H35Cl 1-0 origin cm-1"]) == band.origin.value
    assert float(second["H35Cl 1-0 origin sigma cm-1"]) == band.origin.sigma
    assert float(second["H35Cl 1-0 B'' cm-1"]) == band.B_lower.value
    assert abs(float(second["H35Cl 1-0 origin cm-1"]) - 2885.98 - 0.24) < 0.05
    assert main(["ledger", "day", day, "--format", "json", "--data", str(data)]) == 0
    exported = json.loads(capsys.readouterr().out)
    assert exported["day"] == day and len(exported["runs"]) == 2
    origin = next(b for b in exported["runs"][1]["bands"] if b["isotopologue"] == "H35Cl")["origin"]
    assert origin == {"value": band.origin.value, "sigma": band.origin.sigma}
    assert main(["ledger", "day", "2001-01-01", "--data", str(data)]) == 0
    assert capsys.readouterr().out.count("\n") == 1  # the header only: no runs that day


def test_demo_removes_its_folders_when_its_terminal_closes(tmp_path: Path) -> None:
    samples = tmp_path / "samples"
    samples.mkdir()
    (samples / "0905_hcl_cell.jdx").write_bytes((SAMPLES / "0905_hcl_cell.jdx").read_bytes())
    demo = subprocess.Popen(
        [sys.executable, "-m", "tui", "demo", "--plain", "--interval", "30", "--samples", str(samples)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, stdin=subprocess.DEVNULL, cwd=ROOT,
    )
    try:
        assert demo.stdout is not None
        first = demo.stdout.readline()
        folder = Path(first.split()[-1]).parent
        deadline = time.monotonic() + 30
        while "started watching" not in demo.stdout.readline() and time.monotonic() < deadline:
            pass
        assert folder.exists()
        demo.send_signal(signal.SIGHUP)  # the terminal was closed
        demo.wait(timeout=60)
    finally:
        if demo.poll() is None:
            demo.kill()
    assert not folder.exists()
