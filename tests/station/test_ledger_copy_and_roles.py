"""`bandwatch ledger copy`, `ledger migrate`, `ledger list --instrument`, and the roles the
README documents (their SQL is read from the README and run on a throwaway server)."""
from __future__ import annotations

import json
import re
from pathlib import Path
from urllib.parse import urlsplit

import pytest

from processing.estimate import Estimate
from processing.provenance import Provenance
from processing.results import Band, IsotopologueConstants, RunResult
from processing.station import ledger as lg

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(autouse=True)
def no_user_config(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "none.toml"))


def _result(index: int) -> RunResult:
    # H35Cl 1-0 origin and B_e of the right size (Huber & Herzberg 1979 via NIST WebBook, recalled);
    # each run a little apart so that a mixed-up copy would show
    band = Band("H35Cl", 1, 0, 12, 0.003, Estimate(2885.98 + index * 1e-5, 0.002), Estimate(10.1365, 0.0004), Estimate(10.4398, 0.0004))
    constants = IsotopologueConstants("H35Cl", 12, (0, 1), 0.003, {"B_e": Estimate(10.5934, 0.0003)}, {}, {}, {}, (), {}, {}, ())
    return RunResult(f"r{index}.csv", "processed", f"{index:064x}", bands=(band,), constants=(constants,), verdict="pass")


def _fill(conn: lg.Connection, runs: int, instrument: str = "") -> None:
    """`runs` runs: processed ones with results, some unreadable, some redone, some decided."""
    for index in range(runs):
        path = f"/export/day1/run{index:04d}.csv"
        if index % 10 == 9:
            lg.record_run(conn, path, None, "unreadable", error=f"{path}: file is empty", instrument=instrument)
            continue
        made = Provenance(f"0.1.0+{index % 3}", "library", "settings") if index % 4 else None
        record = lg.record_run(conn, path, f"{index:064x}", "processed", result=_result(index), instrument=instrument,
                               size_bytes=1000 + index, mtime_ns=index * 10**9, provenance=made)
        if index % 7 == 0:
            lg.record_decision(conn, record.run_id, "accept", "lines look right", "ana")
        if index % 13 == 0:
            lg.record_decision(conn, record.run_id, "flag", "baseline drifts", "ben")
            lg.undo_last_decision(conn, record.run_id, "ben")
        if index % 50 == 0:
            lg.record_reprocessed(conn, record.run_id, _result(index + 1), {"species": ["H35Cl"]},
                                  provenance=Provenance("0.1.0+redo", "library", "requested"))


def _listing(capsys: pytest.CaptureFixture[str], *where: str) -> list[dict[str, object]]:
    from tui.cli import main

    assert main(["ledger", "list", "--json", *where]) == 0
    return [json.loads(line) for line in capsys.readouterr().out.splitlines()]


def _export(capsys: pytest.CaptureFixture[str], *where: str) -> dict[str, object]:
    from tui.cli import main

    assert main(["ledger", "export", "--format", "json", *where]) == 0
    return json.loads(capsys.readouterr().out)


@pytest.mark.parametrize("target_kind", ["sqlite", "postgresql"])
def test_copy_of_a_thousand_runs_gives_identical_listings(
    tmp_path: Path, target_kind: str, request: pytest.FixtureRequest, capsys: pytest.CaptureFixture[str]
) -> None:
    from tui.cli import main

    source = tmp_path / "station-data"
    conn = lg.open_ledger(source)
    _fill(conn, 1000)  # recorded before instruments existed: instrument ""
    lg.adopt_unnamed_runs(conn, "ftir-1")
    before_trend = lg.trend(conn, "H35Cl", "origin", "1-0")
    conn.close()
    target = str(tmp_path / "server-data") if target_kind == "sqlite" else request.getfixturevalue("pg_url")
    target_arg = f"sqlite:{target}" if target_kind == "sqlite" else target
    before = _listing(capsys, "--data", str(source))
    before_export = _export(capsys, "--data", str(source))
    assert len(before) == 1020 and len({r["path"] for r in before}) == 1000  # 1000 files, 20 redone
    assert {r["analysis_version"] for r in before} == {None, "0.1.0+0", "0.1.0+1", "0.1.0+2", "0.1.0+redo"}

    assert main(["ledger", "copy", "--from", f"sqlite:{source / lg.LEDGER_FILE}", "--to", target_arg]) == 0
    said = capsys.readouterr().out
    assert "copied 1020 run(s)" in said and "counts checked" in said and "ids kept" in said

    where = ["--data", target] if target_kind == "sqlite" else ["--ledger", target]
    assert _listing(capsys, *where) == before
    assert _export(capsys, *where) == before_export  # every decision of the trail, in order
    copied = lg.open_ledger(target)
    assert lg.trend(copied, "H35Cl", "origin", "1-0") == before_trend  # the quantities came along
    assert lg.get_run(copied, before[0]["run_id"]).result == lg.get_run(lg.open_ledger(source), before[0]["run_id"]).result
    # a second copy would double the history: refused, nothing written
    assert main(["ledger", "copy", "--from", f"sqlite:{source}", "--to", target_arg]) == 1
    assert "already holds" in capsys.readouterr().err
    assert len(lg.list_runs(copied, with_result=False)) == 1020
    # new runs after the copy get new ids (the server's id sequences were moved past the copy)
    new = lg.record_run(copied, "/export/day2/a.csv", None, "unreadable", error="bad", instrument="ftir-1")
    assert new.run_id == max(r["run_id"] for r in before) + 1


def test_copy_into_a_server_that_already_has_runs_renumbers_and_keeps_links(
    tmp_path: Path, pg_url: str, capsys: pytest.CaptureFixture[str]
) -> None:
    from processing.station.ledger_copy import copy_ledger

    server = lg.open_ledger(pg_url)
    _fill(server, 30, instrument="ftir-2")
    first = lg.open_ledger(tmp_path)
    _fill(first, 60, instrument="")
    first.close()
    report = copy_ledger(tmp_path, pg_url, "ftir-1")
    assert (report.runs, report.kept_ids) == (62, False)  # 60 files, 2 redone
    ours = lg.list_runs(server, instrument="ftir-1", with_result=False)
    assert len(ours) == 62 and len(lg.list_runs(server, instrument="ftir-2", with_result=False)) == 31
    redone = [r for r in ours if r.reprocessed_from is not None]
    assert redone and all(lg.get_run(server, r.reprocessed_from).path == r.path for r in redone)
    accepted = {r.path for r in ours if r.decision == "accept"}
    assert accepted == {f"/export/day1/run{i:04d}.csv" for i in range(60) if i % 7 == 0 and i % 10 != 9}


def test_ledger_list_filters_by_instrument_and_names_it(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from tui.cli import main

    conn = lg.open_ledger(tmp_path)
    lg.record_run(conn, "/e/a.csv", "1" * 64, "processed", result=_result(1), instrument="ftir-a")
    lg.record_run(conn, "/e/a.csv", "2" * 64, "processed", result=_result(2), instrument="ftir-b")
    assert [r["instrument"] for r in _listing(capsys, "--data", str(tmp_path), "--instrument", "ftir-b")] == ["ftir-b"]
    assert main(["ledger", "list", "--data", str(tmp_path)]) == 0
    table = capsys.readouterr().out.splitlines()
    assert table[0].split()[:2] == ["run", "instrument"]
    rows = [line for line in table[1:] if line.strip() and set(line.split()[0]) != {"-"}]  # not the rule under the head
    assert [line.split()[1] for line in rows] == ["ftir-b", "ftir-a"]


def test_migrate_brings_an_empty_server_up_to_date(pg_url: str, capsys: pytest.CaptureFixture[str]) -> None:
    from tui.cli import main

    assert main(["ledger", "migrate", "--ledger", pg_url]) == 0
    assert f"schema version {lg.SCHEMA_VERSION} (brought up from version 0)" in capsys.readouterr().out
    assert main(["ledger", "migrate", "--ledger", pg_url]) == 0
    assert "already up to date" in capsys.readouterr().out


def _readme_sql(marker: str) -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    found = re.search(rf"<!-- {marker} -->\n```\n(.*?)```", text, re.S)
    assert found, f"README has no SQL block marked {marker}"
    return found.group(1)


def test_the_readme_roles_reader_lists_station_records_neither_rewrites(
    postgres: object, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """The README's SQL, run as written: the reader lists and trends but cannot decide (the
    database refuses, bandwatch says so in one line); the station records runs and decisions
    but can neither change nor delete any; nobody can rewrite the decision trail."""
    from tui.cli import main

    server = postgres
    for statement in _readme_sql("ledger-roles-superuser").split(";"):
        if statement.strip():
            server.admin(statement)  # type: ignore[attr-defined]
    try:
        owner = server.url("bandwatch", "bandwatch_owner")  # type: ignore[attr-defined]
        assert main(["ledger", "migrate", "--ledger", owner]) == 0
        owner_conn = lg.open_ledger(owner)
        owner_conn.execute(_readme_sql("ledger-roles-owner"))
        station = server.url("bandwatch", "bandwatch_station")  # type: ignore[attr-defined]
        reader = server.url("bandwatch", "bandwatch_reader")  # type: ignore[attr-defined]

        as_station = lg.open_ledger(station)
        run = lg.record_run(as_station, "/e/a.csv", "1" * 64, "processed", result=_result(1), instrument="ftir-1")
        claim = lg.claim_file(as_station, "/e/b.csv", None, 1, "ftir-1")
        lg.drop_claim(as_station, claim.claim_id)
        lg.record_decision(as_station, run.run_id, "accept", "", "ana")
        for forbidden in ("UPDATE decisions SET reason = 'x'", "DELETE FROM decisions", "DELETE FROM runs",
                          "UPDATE runs SET verdict = 'pass'", "DROP TABLE decisions", "ALTER TABLE decisions DISABLE TRIGGER ALL"):
            with pytest.raises(lg.LedgerRefused):
                as_station.execute(forbidden)
        with pytest.raises(lg.LedgerRefused, match="append-only"):  # not even the owner
            owner_conn.execute("DELETE FROM decisions")

        as_reader = lg.open_ledger(reader, read_only=True)
        assert [r.run_id for r in lg.list_runs(as_reader)] == [run.run_id]
        assert len(lg.trend(as_reader, "H35Cl", "origin", "1-0")) == 1
        with pytest.raises(lg.LedgerRefused, match="permission denied"):
            lg.record_decision(as_reader, run.run_id, "flag", "no", "eve")
        with pytest.raises(lg.LedgerRefused):
            lg.record_run(as_reader, "/e/c.csv", None, "unreadable", error="x", instrument="ftir-1")
        capsys.readouterr()
        assert main(["ledger", "flag", str(run.run_id), "--reason", "no", "--yes", "--ledger", reader]) == 1
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and "permission denied for table decisions" in err[0] and err[0].startswith("bandwatch: ")
        assert main(["ledger", "list", "--ledger", reader]) == 0  # reading is allowed
        assert lg.get_run(as_reader, run.run_id).decision == "accept"  # the refused flag left no trace
        for conn in (as_station, as_reader, owner_conn):
            conn.close()
    finally:
        server.admin("DROP DATABASE IF EXISTS bandwatch WITH (FORCE)")  # type: ignore[attr-defined]
        for role in ("bandwatch_reader", "bandwatch_station", "bandwatch_owner"):
            server.admin(f"DROP ROLE IF EXISTS {role}")  # type: ignore[attr-defined]


def test_a_server_url_names_no_password_and_a_reader_cannot_migrate(
    postgres: object, pg_url: str, capsys: pytest.CaptureFixture[str]
) -> None:
    from tui.cli import main

    server = postgres
    database = urlsplit(pg_url).path.lstrip("/")
    server.admin("CREATE ROLE late_reader LOGIN")  # type: ignore[attr-defined]
    try:
        # an empty database: the reader can neither read a ledger there nor make one
        code = main(["ledger", "list", "--ledger", server.url(database, "late_reader")])  # type: ignore[attr-defined]
        assert code == 1
        err = capsys.readouterr().err
        assert "older" in err and "bandwatch ledger migrate" in err and len(err.strip().splitlines()) == 1
    finally:
        server.admin("DROP ROLE late_reader")  # type: ignore[attr-defined]
