"""`bandwatch watch --plain`, `bandwatch ledger ...` and `bandwatch init` as a script sees them."""
from __future__ import annotations

import csv
import io
import json
import re
from pathlib import Path

import pytest
from station_files import spectrum_csv, write_file

from tui.cli import main

PLAIN_LINE = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d[+-]\d\d:\d\d \S")  # local time with its offset


@pytest.fixture()
def isolated(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """No user configuration or data folder leaks in."""
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "no-config.toml"))
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    return tmp_path


def _processed_folder(isolated: Path, capsys: pytest.CaptureFixture[str]) -> tuple[Path, Path, str]:
    export, data = isolated / "export", isolated / "data"
    export.mkdir()
    write_file(export / "a.csv", spectrum_csv(200), mtime=1_000_000)
    write_file(export / "bad.csv", "nothing here\n", mtime=1_000_001)
    code = main(["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"])
    out = capsys.readouterr().out
    assert code == 3  # all recorded, but bad.csv is unreadable (and a.csv, one line, fails its checks)
    return export, data, out


def test_watch_plain_prints_one_line_per_event(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _, _, out = _processed_folder(isolated, capsys)
    lines = out.splitlines()
    assert lines and all(PLAIN_LINE.match(line) for line in lines)
    # the verdict, then its main reasons (this one-line spectrum leaves checks not assessed)
    assert any(re.search(r" processed run 1 v1 a\.csv verdict=\S+ species=\S+ reasons=.*n/a: ", line) for line in lines)
    assert any(re.search(r" unreadable run 2 v1 bad\.csv error=.*bad\.csv", line) for line in lines)
    assert lines[-1].endswith(" stopped")


def test_ledger_list_json_show_decide_export(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _, data, _ = _processed_folder(isolated, capsys)
    assert main(["ledger", "list", "--json", "--data", str(data)]) == 0
    rows = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    assert [(r["run_id"], Path(r["path"]).name, r["status"], r["version"]) for r in rows] == [
        (2, "bad.csv", "unreadable", 1), (1, "a.csv", "processed", 1),
    ]
    for key in ("sha256", "verdict", "decision", "received_at", "processed_at"):
        assert key in rows[0]

    assert main(["ledger", "flag", "1", "--reason", "baseline tilt", "--operator", "ana", "--data", str(data)]) == 0
    # over ana's flag: refused without a terminal to ask on, recorded with --yes (both kept)
    assert main(["ledger", "accept", "1", "--operator", "ben", "--data", str(data)]) == 1
    assert "run 1 was flagged by ana" in capsys.readouterr().err
    assert main(["ledger", "accept", "1", "--operator", "ben", "--yes", "--data", str(data)]) == 0
    assert main(["ledger", "undo", "1", "--operator", "ben", "--data", str(data)]) == 0
    assert "now flag" in capsys.readouterr().out.splitlines()[-1]
    assert main(["ledger", "list", "--json", "--data", str(data)]) == 0
    first = [json.loads(line) for line in capsys.readouterr().out.splitlines()][-1]
    assert (first["decision"], first["decision_reason"], first["operator"]) == ("flag", "baseline tilt", "ana")

    assert main(["ledger", "show", "1", "--data", str(data)]) == 0
    shown = capsys.readouterr().out
    assert "decision   flag by ana: baseline tilt" in shown and "()" not in shown
    assert [line.split()[2] for line in shown.splitlines() if re.match(r"\s+\d{4}-", line)] == ["flag", "accept", "undo"]

    target = isolated / "export.csv"
    assert main(["ledger", "export", str(target), "--data", str(data)]) == 0
    table = list(csv.DictReader(io.StringIO(target.read_text())))
    assert [row["run_id"] for row in table] == ["1", "2"]
    history = table[0]["decision_history"]
    assert table[0]["decision"] == "flag" and history.count("; ") == 2  # three events
    assert "accept by ben: over flag by ana (event 1)" in history  # both on record
    assert main(["ledger", "export", "--format", "json", "--data", str(data)]) == 0
    exported = json.loads(capsys.readouterr().out)
    assert [e["action"] for e in exported["runs"][0]["decisions"]] == ["flag", "accept", "undo"]


def test_ledger_errors_are_one_line(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["ledger", "list", "--data", str(isolated / "nothing")]) == 1
    assert "no ledger here yet" in capsys.readouterr().err
    _, data, _ = _processed_folder(isolated, capsys)
    assert main(["ledger", "accept", "99", "--data", str(data)]) == 1
    assert capsys.readouterr().err.strip() == "bandwatch: run 99 is not in the ledger"
    assert main(["ledger", "undo", "1", "--data", str(data)]) == 1
    assert "no decision to undo" in capsys.readouterr().err


def test_init_writes_a_configuration_watch_accepts(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    export, data = isolated / "export", isolated / "data"
    export.mkdir()
    target = isolated / "station.toml"
    assert main(["init", str(target), "--export", str(export), "--data", str(data), "--operator", "ana"]) == 0
    assert main(["init", str(target)]) == 1
    assert "already exists" in capsys.readouterr().err
    write_file(export / "a.csv", spectrum_csv(150))
    assert main(["watch", "--config", str(target), "--once", "--plain"]) in (0, 3)  # 3: verdict FAIL
    assert " processed run 1 v1 a.csv " in capsys.readouterr().out
    assert main(["ledger", "list", "--config", str(target)]) == 0  # data folder from the file
    assert "a.csv" in capsys.readouterr().out


def test_bad_configuration_and_folder_mistakes_are_one_line(isolated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    export = isolated / "export"
    export.mkdir()
    config = isolated / "station.toml"
    config.write_text('export_folder = "export"\nworkers = "many"\n')
    assert main(["watch", "--config", str(config), "--plain"]) == 1
    assert capsys.readouterr().err == f"bandwatch: {config}: workers: must be a whole number\n"
    assert main(["watch", str(export), "--data", str(export / "bw"), "--plain"]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "data_folder" in err and "inside the export folder" in err
    assert not (export / "bw").exists()


def test_watch_without_plain_hands_a_station_factory_to_the_app(
    isolated: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    import tui.app

    export, data = isolated / "export", isolated / "data"
    export.mkdir()
    seen: dict[str, object] = {}

    class FakeApp:
        def __init__(self, data_dir, export_dir, *, station_factory, operator=None, config=None, ledger_location=None):  # type: ignore[no-untyped-def]
            seen.update(data_dir=data_dir, export_dir=export_dir, operator=operator, factory=station_factory, config=config,
                        ledger_location=ledger_location)

        def run(self) -> int:
            station = seen["factory"](lambda event: None)  # type: ignore[operator]
            seen["station"] = station
            return 0

    monkeypatch.setattr(tui.app, "BandwatchApp", FakeApp)
    monkeypatch.setattr("sys.stdout.isatty", lambda: True)
    assert main(["watch", str(export), "--data", str(data), "--operator", "ana"]) == 0
    from processing.station.station import Station

    assert (seen["data_dir"], seen["export_dir"], seen["operator"]) == (data, export, "ana")
    assert seen["config"].operator == "ana"  # the station's settings: a redo without the station uses them
    assert seen["ledger_location"] == data  # the data folder's file: no server configured
    assert isinstance(seen["station"], Station) and seen["station"].export_dir == export
