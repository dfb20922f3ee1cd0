"""`bandwatch ledger copy`: one ledger's whole history into another (a station's file into the
facility's server, typically), without loss.

Runs (every version, with result, settings, file stat, what it was made with, main reasons),
decisions (the whole append-only trail, in order) and fitted quantities are copied as they are, in one transaction on the
target: all or nothing. Into an empty ledger the run and event ids are kept (listings before
and after are identical); into one that already holds runs they are renumbered (a redo's link
to its original and each decision's run follow). Runs recorded before instruments existed get
`instrument`. A file already in the target (same instrument, path and version) stops the copy
before anything is written. The counts are checked inside the transaction.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from processing.station import ledger
from processing.station.ledger import Connection, LedgerError, LedgerRow, _insert_returning, _Transaction, dialect, path_of, stored_path
from processing.station.ledger_postgres import is_server_url, password_in_url

RUN_COLUMNS = (
    "run_id", "path", "sha256", "version", "status", "verdict", "species", "result_json", "error", "received_at",
    "processed_at", "settings_json", "reprocessed_from", "size_bytes", "mtime_ns", "instrument", "record_key",
    "analysis_version", "library_hash", "settings_hash", "reasons_json",
)
DECISION_COLUMNS = ("event_id", "run_id", "action", "reason", "operator", "at")
QUANTITY_COLUMNS = ("run_id", "isotopologue", "band", "quantity", "value", "sigma", "unit")


@dataclass(frozen=True)
class CopyReport:
    source: str
    target: str
    runs: int
    decisions: int
    quantities: int
    kept_ids: bool

    def summary(self) -> str:
        ids = "run and event ids kept" if self.kept_ids else "run and event ids renumbered (the target already held runs)"
        return (
            f"copied {self.runs} run(s), {self.decisions} decision(s), {self.quantities} fitted quantities "
            f"from {self.source} to {self.target}; counts checked; {ids}"
        )


def ledger_argument(text: str, option: str) -> str | Path:
    """`sqlite:PATH` (a data folder or its ledger file) or a server URL without a password."""
    if text.startswith("sqlite:"):
        path = Path(text[len("sqlite:"):]).expanduser()
        return path.parent if path.name == ledger.LEDGER_FILE or path.is_file() else path
    if is_server_url(text):
        if password_in_url(text):
            raise LedgerError(f"{option}: the URL holds a password; give it in PGPASSWORD or ~/.pgpass instead")
        return text
    raise LedgerError(f"{option} {text}: give sqlite:PATH (a data folder or its {ledger.LEDGER_FILE}) or postgresql://USER@HOST/DATABASE")


def copy_ledger(source: str | Path, target: str | Path, instrument: str) -> CopyReport:
    """Copy everything in `source` into `target` (see the module's doc); a LedgerError line
    when it cannot be done, and then nothing was written."""
    source_name, target_name = ledger.describe_ledger(source), ledger.describe_ledger(target)
    if not is_server_url(source) and not ledger.ledger_path(source).exists():
        raise LedgerError(f"{source_name}: no ledger there to copy")
    if source_name == target_name:
        raise LedgerError(f"{source_name}: copying a ledger into itself")
    src = ledger.open_ledger(source, read_only=True)
    try:
        runs = [_row(row, RUN_COLUMNS) for row in src.execute(f"SELECT {', '.join(RUN_COLUMNS)} FROM runs ORDER BY run_id")]
        decisions = [_row(row, DECISION_COLUMNS) for row in src.execute(f"SELECT {', '.join(DECISION_COLUMNS)} FROM decisions ORDER BY event_id")]
        quantities = [
            _row(row, QUANTITY_COLUMNS)
            for row in src.execute(f"SELECT {', '.join(QUANTITY_COLUMNS)} FROM quantities ORDER BY run_id, isotopologue, band, quantity")
        ]
        for run in runs:
            run["path"] = path_of(run["path"], src)
            run["instrument"] = run["instrument"] or instrument
    finally:
        src.close()
    dst = ledger.open_ledger(target)
    try:
        with _Transaction(dst):
            kept_ids = _empty(dst)
            _refuse_files_already_there(dst, runs, target_name)
            new_ids = _copy_runs(dst, runs, kept_ids)
            _copy_decisions(dst, decisions, new_ids, kept_ids)
            dst.executemany(
                f"INSERT INTO quantities ({', '.join(QUANTITY_COLUMNS)}) VALUES ({', '.join('?' * len(QUANTITY_COLUMNS))})",
                [tuple(new_ids[q["run_id"]] if name == "run_id" else q[name] for name in QUANTITY_COLUMNS) for q in quantities],
            )
            if kept_ids and dialect(dst) == "postgresql":
                for table, key in (("runs", "run_id"), ("decisions", "event_id")):
                    dst.execute(
                        f"SELECT setval(pg_get_serial_sequence('{table}', '{key}'), (SELECT max({key}) FROM {table}), true)"
                        f" WHERE EXISTS (SELECT 1 FROM {table})"
                    )
            _check_counts(dst, new_ids, len(decisions), len(quantities), target_name)
    finally:
        dst.close()
    return CopyReport(source_name, target_name, len(runs), len(decisions), len(quantities), kept_ids)


def _row(row: LedgerRow, columns: tuple[str, ...]) -> dict[str, Any]:
    return {name: row[index] for index, name in enumerate(columns)}


def _empty(conn: Connection) -> bool:
    return not conn.execute("SELECT 1 FROM runs LIMIT 1").fetchone() and not conn.execute("SELECT 1 FROM decisions LIMIT 1").fetchone()


def _refuse_files_already_there(conn: Connection, runs: list[dict[str, Any]], target_name: str) -> None:
    there = {
        (row[0], path_of(row[1], conn), int(row[2]))
        for row in conn.execute("SELECT instrument, path, version FROM runs").fetchall()
    }
    for run in runs:
        if (run["instrument"], run["path"], int(run["version"])) in there:
            raise LedgerError(
                f"{target_name} already holds {run['path']} v{run['version']} of instrument {run['instrument']}: "
                "copy refused, nothing written (was this ledger copied before?)"
            )


def _copy_runs(conn: Connection, runs: list[dict[str, Any]], kept_ids: bool) -> dict[int, int]:
    """Insert the runs oldest first; old run id -> new run id."""
    new_ids: dict[int, int] = {}
    columns = [name for name in RUN_COLUMNS if kept_ids or name != "run_id"]
    sql = f"INSERT INTO runs ({', '.join(columns)}) VALUES ({', '.join('?' * len(columns))})"
    for run in runs:
        values = dict(run, path=stored_path(run["path"], conn))
        if run["reprocessed_from"] is not None:
            values["reprocessed_from"] = new_ids.get(int(run["reprocessed_from"]), run["reprocessed_from"])
        new_ids[int(run["run_id"])] = _insert_returning(conn, sql, tuple(values[name] for name in columns), "run_id")
    return new_ids


def _copy_decisions(conn: Connection, decisions: list[dict[str, Any]], new_ids: dict[int, int], kept_ids: bool) -> None:
    columns = [name for name in DECISION_COLUMNS if kept_ids or name != "event_id"]
    sql = f"INSERT INTO decisions ({', '.join(columns)}) VALUES ({', '.join('?' * len(columns))})"
    conn.executemany(
        sql, [tuple(new_ids[d["run_id"]] if name == "run_id" else d[name] for name in columns) for d in decisions]
    )


def _check_counts(conn: Connection, new_ids: dict[int, int], decisions: int, quantities: int, target_name: str) -> None:
    """The target holds exactly what was copied (else the transaction is rolled back)."""
    ids = sorted(new_ids.values())
    if not ids:
        return
    low, high = ids[0], ids[-1]
    found_runs = conn.execute("SELECT count(*) FROM runs WHERE run_id BETWEEN ? AND ?", (low, high)).fetchone()[0]
    found_decisions = conn.execute("SELECT count(*) FROM decisions WHERE run_id BETWEEN ? AND ?", (low, high)).fetchone()[0]
    found_quantities = conn.execute("SELECT count(*) FROM quantities WHERE run_id BETWEEN ? AND ?", (low, high)).fetchone()[0]
    expected = (len(ids), decisions, quantities)
    if (int(found_runs), int(found_decisions), int(found_quantities)) != expected:
        raise LedgerError(
            f"{target_name}: after copying, counts differ (runs, decisions, quantities {found_runs}, {found_decisions}, "
            f"{found_quantities} against {expected}); rolled back, nothing written"
        )

