"""`bandwatch ledger list|show|export|accept|flag|undo|copy|migrate`: the station's ledger (the
data folder's file or a PostgreSQL server), for people and scripts."""
from __future__ import annotations

import argparse
import csv
import io
import json
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from processing import strict_json
from processing.safe_text import safe_text
from tui.commands.watch import add_station_arguments

if TYPE_CHECKING:
    from processing.station.ledger import Connection, DecisionEvent, RunRecord

HELP = "list, show, export runs in the ledger; accept, flag or undo a decision; copy a ledger to a server"

CSV_COLUMNS = (
    "run_id", "path", "sha256", "version", "status", "verdict", "decision", "decision_reason",
    "operator", "decided_at", "received_at", "processed_at", "species", "error", "decision_history",
    "instrument",
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)

    listing = actions.add_parser("list", help="runs, newest first")
    add_station_arguments(listing)
    listing.add_argument("--json", action="store_true", help="one JSON object per run, one per line")
    listing.add_argument("--limit", type=int, default=None, help="at most this many runs")
    listing.add_argument("--latest", action="store_true", help="only the newest version of each file")
    listing.add_argument("--instrument", default=None, metavar="NAME", help="only this instrument's runs")

    show = actions.add_parser("show", help="one run and its decision history")
    add_station_arguments(show)
    show.add_argument("run_id", type=int, metavar="RUN")
    show.add_argument("--json", action="store_true", help="the run as one JSON object (with its result)")

    export = actions.add_parser("export", help="write runs and decisions as CSV or JSON")
    add_station_arguments(export)
    export.add_argument("output", nargs="?", default="-", metavar="PATH",
                        help="file to write (default: standard output)")
    export.add_argument("--format", choices=("csv", "json"), default=None,
                        help="default: json for a .json PATH, else csv")

    for name, text in (("accept", "accept a run"), ("flag", "flag a run for a second look")):
        decide = actions.add_parser(name, help=text)
        add_station_arguments(decide)
        decide.add_argument("run_id", type=int, metavar="RUN")
        decide.add_argument("--reason", default="", help="why (recorded with the decision)")
        decide.add_argument("--operator", default=None, help="who (default: configuration, else login name)")

    undo = actions.add_parser("undo", help="revert a run's latest decision (recorded as a new event)")
    add_station_arguments(undo)
    undo.add_argument("run_id", type=int, metavar="RUN")
    undo.add_argument("--operator", default=None, help="who (default: configuration, else login name)")

    copy = actions.add_parser(
        "copy", help="copy a ledger's whole history (runs, versions, decisions, results, quantities) into another",
        description="Copy every run, version, decision, result and fitted quantity of one ledger into another "
        "(e.g. a station's file into the facility's server), in one transaction, and check the counts.",
    )
    copy.add_argument("--from", dest="source", required=True, metavar="LEDGER",
                      help="sqlite:PATH (a data folder or its ledger.sqlite3) or postgresql://...")
    copy.add_argument("--to", dest="target", required=True, metavar="LEDGER",
                      help="postgresql://USER@HOST/DATABASE (or sqlite:PATH)")
    copy.add_argument("--instrument", default=None, metavar="NAME",
                      help="instrument of runs recorded before instruments existed (default: the "
                      "configuration's [station] instrument, else the host name)")
    copy.add_argument("--config", default=None, metavar="FILE", help="station configuration (for the instrument)")

    migrate = actions.add_parser("migrate", help="bring the ledger's schema up to date (a server: as its owner)")
    add_station_arguments(migrate)


def run_public(record: RunRecord) -> dict[str, Any]:
    """A run as a JSON object for scripts (the result itself only with `show --json`)."""
    return {
        "run_id": record.run_id,
        "path": record.path,
        "sha256": record.sha256,
        "version": record.version,
        "status": record.status,
        "verdict": record.verdict,
        "decision": record.decision,
        "decision_reason": record.decision_reason,
        "operator": record.operator,
        "decided_at": record.decided_at,
        "received_at": record.received_at,
        "processed_at": record.processed_at,
        "species": list(record.species),
        "error": record.error,
        "reprocessed_from": record.reprocessed_from,
        "instrument": record.instrument,
        "analysis_version": record.provenance.analysis_version if record.provenance else None,
        "library_hash": record.provenance.library_hash if record.provenance else None,
        "settings_hash": record.provenance.settings_hash if record.provenance else None,
    }


def _event_public(event: DecisionEvent) -> dict[str, Any]:
    return {"event_id": event.event_id, "run_id": event.run_id, "action": event.action,
            "reason": event.reason, "operator": event.operator, "at": event.at}


def run(args: argparse.Namespace) -> int:
    from processing.station import ledger
    from processing.station.config import station_config

    if args.action == "copy":
        return _copy(args)
    config = station_config(args.config, args.data, args.ledger)
    where = config.ledger_location
    if args.action == "migrate":
        return _migrate(where)
    reading = args.action in ("list", "show", "export")
    if not reading and not ledger.is_server_url(where) and not ledger.ledger_path(where).exists():
        raise ledger.LedgerError(f"{where}: no ledger here yet (run `bandwatch watch` first, or give --data)")
    conn = ledger.open_ledger(where, read_only=reading)
    try:
        if args.action == "list":
            return _list(conn, args)
        if args.action == "show":
            return _show(conn, args)
        if args.action == "export":
            return _export(conn, args)
        return _decide(conn, args, config.operator)
    finally:
        conn.close()


def _list(conn: Connection, args: argparse.Namespace) -> int:
    from processing.station.ledger import list_runs

    runs = list_runs(conn, args.limit, latest_only=args.latest, with_result=False, instrument=args.instrument)
    if args.json:
        sys.stdout.write("".join(strict_json.dumps_flat(run_public(record)) + "\n" for record in runs))
        return 0
    rows = [[str(r.run_id), f"v{r.version}", r.status, r.verdict or "-", r.decision or "-",
             safe_text(",".join(r.species) or "-"), (r.processed_at or "")[:19], safe_text(r.name)] for r in runs]
    headers = ["run", "ver", "status", "verdict", "decision", "species", "processed", "file"]
    if any(r.instrument for r in runs):  # runs of one or several instruments: say whose
        headers.insert(1, "instrument")
        for row, record in zip(rows, runs):
            row.insert(1, safe_text(record.instrument or "-"))
    sys.stdout.write(_table(headers, rows))
    return 0


def _table(headers: list[str], rows: list[list[str]]) -> str:
    widths = [max([len(h)] + [len(row[i]) for row in rows]) for i, h in enumerate(headers)]
    lines = ["  ".join(cell.ljust(w) for cell, w in zip(line, widths)).rstrip() for line in [headers] + rows]
    return "\n".join(lines) + "\n"


def _show(conn: Connection, args: argparse.Namespace) -> int:
    from processing.station.ledger import decision_history, get_run

    record = get_run(conn, args.run_id)
    if record is None:
        print(f"bandwatch: run {args.run_id} is not in the ledger", file=sys.stderr)
        return 1
    history = decision_history(conn, record.run_id)
    if args.json:
        payload = run_public(record) | {
            "settings": record.settings,
            "result": record.result.to_dict() if record.result is not None else None,
            "decisions": [_event_public(e) for e in history],
        }
        sys.stdout.write(strict_json.dumps(payload) + "\n")
        return 0
    out = [
        f"run {record.run_id} v{record.version}  {record.path}",
        f"  instrument {record.instrument or '-'}",
        f"  sha256     {record.sha256 or '-'}",
        f"  status     {record.status}",
        f"  verdict    {record.verdict or '-'}",
        f"  species    {', '.join(record.species) or '-'}",
        f"  received   {record.received_at}",
        f"  processed  {record.processed_at or '-'}",
        f"  decision   {record.decision or '-'}"
        + (f" ({record.decision_reason}) by {record.operator or '?'}" if record.decision else ""),
    ]
    if record.error:
        out.append(f"  error      {record.error}")
    if record.reprocessed_from is not None:
        changed = f"with {json.dumps(record.settings)}" if record.settings is not None else "with today's analysis (bandwatch reprocess)"
        out.append(f"  reprocessed from run {record.reprocessed_from} {changed}")
    if record.provenance is not None:
        made = record.provenance
        out.append(f"  made with  analysis {made.analysis_version}, library {made.library_hash}, settings {made.settings_hash}")
    out.append("  decision history:" if history else "  decision history: none")
    for event in history:
        out.append(f"    {event.at[:19]}  #{event.event_id}  {event.action:<6}  {event.operator or '?'}  {event.reason}")
    sys.stdout.write("\n".join(safe_text(line) for line in out) + "\n")  # paths, errors, reasons
    return 0


def _export(conn: Connection, args: argparse.Namespace) -> int:
    from processing.station.ledger import all_decisions, list_runs

    runs = list(reversed(list_runs(conn, with_result=False)))  # oldest first in an export
    events: dict[int, list[Any]] = {}
    for event in all_decisions(conn):
        events.setdefault(event.run_id, []).append(event)
    chosen = args.format or ("json" if str(args.output).lower().endswith(".json") else "csv")
    if chosen == "json":
        text = strict_json.dumps(
            {"runs": [run_public(r) | {"decisions": [_event_public(e) for e in events.get(r.run_id, [])]}
                      for r in runs]},
            indent=1,
        ) + "\n"
    else:
        buffer = io.StringIO()
        writer = csv.DictWriter(buffer, fieldnames=list(CSV_COLUMNS), lineterminator="\n")
        writer.writeheader()
        for record in runs:
            row = run_public(record)
            row["species"] = ",".join(record.species)
            row["decision_history"] = "; ".join(
                f"{e.at} {e.action} by {e.operator or '?'}" + (f": {e.reason}" if e.reason else "")
                for e in events.get(record.run_id, [])
            )
            writer.writerow({key: "" if row.get(key) is None else row[key] for key in CSV_COLUMNS})
        text = buffer.getvalue()
    if args.output == "-":
        sys.stdout.write(text)
    else:
        try:
            with open(args.output, "w", encoding="utf-8", newline="") as handle:
                handle.write(text)
        except OSError as error:
            print(f"bandwatch: {args.output}: cannot write ({error.strerror or error})", file=sys.stderr)
            return 1
        print(f"wrote {len(runs)} runs to {args.output}", file=sys.stderr)
    return 0


def _operator(given: str | None, configured: str) -> str:
    if given:
        return given
    if configured:
        return configured
    import getpass

    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return ""


def _decide(conn: Connection, args: argparse.Namespace, configured_operator: str) -> int:
    from processing.station.ledger import LedgerError, get_run, record_decision, undo_last_decision

    operator = _operator(args.operator, configured_operator)
    if get_run(conn, args.run_id) is None:
        print(f"bandwatch: run {args.run_id} is not in the ledger", file=sys.stderr)
        return 1
    try:
        if args.action == "undo":
            event = undo_last_decision(conn, args.run_id, operator)
            if event is None:
                print(f"bandwatch: run {args.run_id} has no decision to undo", file=sys.stderr)
                return 1
        else:
            event = record_decision(conn, args.run_id, args.action, args.reason, operator)
    except LedgerError as error:
        print(f"bandwatch: {error}", file=sys.stderr)
        return 1
    current = get_run(conn, args.run_id)
    state = current.decision if current and current.decision else "no decision"
    print(f"run {args.run_id}: {event.action} recorded (event {event.event_id}); now {state}")
    return 0


def _copy(args: argparse.Namespace) -> int:
    from processing.station.config import load_config
    from processing.station.ledger_copy import copy_ledger, ledger_argument

    instrument = args.instrument or load_config(args.config).instrument
    source, target = ledger_argument(args.source, "--from"), ledger_argument(args.target, "--to")
    report = copy_ledger(source, target, instrument)
    print(report.summary())
    return 0


def _migrate(where: str | Path) -> int:
    from processing.station import ledger

    before = ledger.found_schema_version(where)
    conn = ledger.open_ledger(where)
    try:
        after = ledger.schema_version(conn)
    finally:
        conn.close()
    state = "already up to date" if before == after else f"brought up from version {before}"
    print(f"ledger {ledger.describe_ledger(where)}: schema version {after} ({state})")
    return 0
