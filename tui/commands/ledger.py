"""`bandwatch ledger list|show|export|day|accept|flag|undo|copy|migrate`: the station's ledger (the
data folder's file or a PostgreSQL server), for people and scripts."""
from __future__ import annotations

import argparse
import contextlib
import csv
import gc
import io
import json
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from processing import strict_json
from processing.safe_text import safe_text
from tui.commands.watch import add_station_arguments

if TYPE_CHECKING:
    from collections.abc import Iterator

    from processing.station.ledger import Connection, DecisionEvent, RunRecord

HELP = ("list, show, export runs in the ledger (also a day's runs for the lab's records); accept, flag or undo "
        "a decision; copy a ledger to a server")
EXPORT_FORMATS = {".csv": "csv", ".json": "json"}


def positive_int(text: str) -> int:
    """An argparse type: a whole number of at least 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value

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
    listing.add_argument("--limit", type=positive_int, default=None, help="at most this many runs (1 or more)")
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
                        help="default: from PATH's extension (.csv or .json; another is refused); csv on standard output")

    day = actions.add_parser("day", help="a day's runs for the lab's records: one row per run with file, time, "
                             "verdict, main reasons, decision, band origins and B values with sigmas")
    add_station_arguments(day)
    day.add_argument("day", nargs="?", default=None, metavar="DATE",
                     help="YYYY-MM-DD in the local zone (TZ honoured; default: today)")
    day.add_argument("-o", "--output", default="-", metavar="PATH", help="file to write (default: standard output)")
    day.add_argument("--format", choices=("csv", "json"), default=None,
                     help="default: from PATH's extension (.csv or .json), csv on standard output")

    for name, text in (("accept", "accept a run"), ("flag", "flag a run for a second look (needs --reason)")):
        decide = actions.add_parser(name, help=text)
        add_station_arguments(decide)
        decide.add_argument("run_id", type=int, metavar="RUN")
        decide.add_argument("--reason", default="", help="why (recorded with the decision; required for a flag)")
        decide.add_argument("--operator", default=None, help="who (default: configuration, else login name)")
        decide.add_argument("--yes", action="store_true",
                            help="decide over another person's decision without asking (both stay on record)")

    undo = actions.add_parser("undo", help="revert a run's latest decision (recorded as a new event)")
    add_station_arguments(undo)
    undo.add_argument("run_id", type=int, metavar="RUN")
    undo.add_argument("--operator", default=None, help="who (default: configuration, else login name)")
    undo.add_argument("--yes", action="store_true",
                      help="undo another person's decision without asking (both stay on record)")

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
        "reasons": list(record.reasons),
        "superseded_by": record.superseded_by,
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
    if args.action == "flag" and not args.reason.strip():
        print("bandwatch: ledger flag needs a reason: --reason TEXT (why the run needs a second look)", file=sys.stderr)
        return 2
    if args.action in ("export", "day"):
        problem = _format_problem(args)
        if problem:
            print(f"bandwatch: {problem}", file=sys.stderr)
            return 2
    reading = args.action in ("list", "show", "export", "day")
    if not reading and not ledger.is_server_url(where) and not ledger.ledger_path(where).exists():
        raise ledger.LedgerError(f"{where}: no ledger here yet (run `bandwatch watch` first, or give --data)")
    conn = ledger.open_ledger(where, read_only=reading)
    try:
        if args.action == "list":
            return _list(conn, args, str(where))
        if args.action == "show":
            return _show(conn, args)
        if args.action == "export":
            return _export(conn, args)
        if args.action == "day":
            return _day(conn, args)
        return _decide(conn, args, config.operator)
    finally:
        conn.close()


def _list(conn: Connection, args: argparse.Namespace, where: str) -> int:
    from processing.station.ledger import list_run_columns, list_runs

    if args.json:
        runs = list_runs(conn, args.limit, latest_only=args.latest, with_result=False, instrument=args.instrument)
        sys.stdout.write("".join(strict_json.dumps_flat(run_public(record)) + "\n" for record in runs))
        return 0
    from processing.listing_halves import can_split, write_in_halves
    from processing.listing_table import listing_table
    from tui.commands.process import table_width

    width = table_width()
    with _no_cycle_collection():  # 100,000 runs are a million objects, none of them in a cycle
        span = can_split(conn, args.instrument, sys.stdout) if width is None and args.limit is None else None
        if span is not None:  # a long listing, not for a terminal: on two cores
            write_in_halves(where, conn, span, sys.stdout, latest_only=args.latest, instrument=args.instrument)
            return 0
        # column by column: 100,000 runs without an object per run (`RunColumns`)
        runs = list_run_columns(conn, args.limit, latest_only=args.latest, instrument=args.instrument)
        sys.stdout.write(listing_table(runs, width=width) + "\n")
    return 0


@contextlib.contextmanager
def _no_cycle_collection() -> Iterator[None]:
    """Python's cycle collector paused: it would walk every object of a long listing again and
    again while the listing grows (a fifth of its time), and the listing makes no cycles."""
    was_on = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_on:
            gc.enable()


def _format_problem(args: argparse.Namespace) -> str | None:
    """Why an export's PATH cannot be written as asked (an extension that is neither .csv nor
    .json, without --format), or None."""
    from pathlib import Path

    output = args.output
    if output == "-" or args.format is not None:
        return None
    extension = Path(output).suffix.lower()
    if extension not in EXPORT_FORMATS:
        return (f"{output}: bandwatch writes .csv or .json, not {extension or 'a file without an extension'}; "
                "name the file .csv or .json, or give --format csv|json")
    return None


def _export_format(args: argparse.Namespace) -> str:
    from pathlib import Path

    if args.format is not None:
        return str(args.format)
    return EXPORT_FORMATS.get(Path(args.output).suffix.lower(), "csv")


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
    from processing.local_time import local_iso
    from processing.result_text import reasons_line, redo_description, status_word
    from processing.listing_table import decision_word

    decision = decision_word(record.decision, record.superseded_by)
    if record.decision:
        decision += f" by {record.operator or '?'}" + (f": {record.decision_reason}" if record.decision_reason else "")
    verdict = (record.verdict or "-").upper()
    if record.reasons:
        verdict += f"  ({reasons_line(record.reasons)})"
    out = [
        f"run {record.run_id} v{record.version}  {record.path}",
        f"  instrument {record.instrument or '-'}",
        f"  sha256     {record.sha256 or '-'}",
        f"  status     {record.status}",
        f"  verdict    {verdict}",
        f"  species    {', '.join(record.species) or '-'}",
        f"  received   {local_iso(record.received_at)}",
        f"  processed  {local_iso(record.processed_at)}",
        f"  decision   {decision}",
    ]
    if record.error:
        out.append(f"  error      {record.error}")
    if record.reprocessed_from is not None:
        if record.settings is not None:
            out.append(f"  redo of run {record.reprocessed_from}: {redo_description(record.settings)}")
            out.append(f"             (settings {json.dumps(record.settings, sort_keys=True)})")
        else:
            out.append(f"  reprocessed from run {record.reprocessed_from} with today's analysis (bandwatch reprocess)")
    if record.superseded_by is not None:
        out.append(f"  replaced by run {record.superseded_by} (a newer version of the file)")
    if record.provenance is not None:
        made = record.provenance
        out.append(f"  made with  analysis {made.analysis_version}, library {made.library_hash}, settings {made.settings_hash}")
    checks = record.result.checks if record.result is not None else ()
    if checks:
        out.append("  checks:")
        for check in checks:
            out.append(f"    {status_word(check.status).upper():<12} {check.name}: {check.detail}")
    out.append("  decision history:" if history else "  decision history: none")
    for event in history:
        out.append(f"    {local_iso(event.at)}  #{event.event_id}  {event.action:<6}  {event.operator or '?'}  {event.reason}")
    sys.stdout.write("\n".join(safe_text(line) for line in out) + "\n")  # paths, errors, reasons
    return 0


def _export(conn: Connection, args: argparse.Namespace) -> int:
    from processing.station.ledger import all_decisions, list_runs

    runs = list(reversed(list_runs(conn, with_result=False)))  # oldest first in an export
    events: dict[int, list[Any]] = {}
    for event in all_decisions(conn):
        events.setdefault(event.run_id, []).append(event)
    chosen = _export_format(args)
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
    return _write_output(args.output, text, f"{len(runs)} runs as {chosen.upper()}")


def _write_output(output: str, text: str, what: str) -> int:
    """`text` to standard output ("-") or to the file `output`, saying what was written there."""
    if output == "-":
        sys.stdout.write(text)
        return 0
    try:
        with open(output, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
    except OSError as error:
        print(f"bandwatch: {output}: cannot write ({error.strerror or error})", file=sys.stderr)
        return 1
    print(f"wrote {what} to {output}", file=sys.stderr)
    return 0


def _day(conn: Connection, args: argparse.Namespace) -> int:
    """One row per run received on the local day (the newest version of each file)."""
    from datetime import date

    from processing.station.day_export import day_csv, day_json, day_rows, runs_of_day
    from processing.station.ledger import band_quantities, list_runs

    day = args.day or date.today().isoformat()
    try:
        date.fromisoformat(day)
    except ValueError:
        print(f"bandwatch: {day!r} is not a date (YYYY-MM-DD)", file=sys.stderr)
        return 2
    runs = runs_of_day(list_runs(conn, latest_only=True, with_result=False), day)
    rows = day_rows(runs, band_quantities(conn, [run.run_id for run in runs]))
    chosen = _export_format(args)
    text = day_json(day, rows) if chosen == "json" else day_csv(rows)
    return _write_output(args.output, text, f"{len(rows)} runs of {day} as {chosen.upper()}")


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
    """Accept, flag or undo. Over another person's decision only when confirmed: --yes, or
    `y` at the question on a terminal; without a terminal it is refused, saying why."""
    from processing.local_time import local_iso
    from processing.station.ledger import LedgerError, decide, get_run

    operator = _operator(args.operator, configured_operator)
    if get_run(conn, args.run_id, with_result=False) is None:
        print(f"bandwatch: run {args.run_id} is not in the ledger", file=sys.stderr)
        return 1
    reason = getattr(args, "reason", "")
    try:
        decided = decide(conn, args.run_id, args.action, reason, operator)
        if decided.event is None and decided.over is not None:
            other = decided.over
            said = (f"run {args.run_id} was {other.action}ged" if other.action == "flag" else
                    f"run {args.run_id} was {other.action}ed") + (
                f" by {other.operator or 'someone'} at {local_iso(other.at)}" + (f": {other.reason}" if other.reason else ""))
            if not (args.yes or _confirmed(f"{safe_text(said)}\n{args.action} it anyway? Both stay on record. [y/N] ")):
                print(f"bandwatch: {safe_text(said)}; nothing recorded (give --yes to {args.action} it anyway; "
                      "both decisions stay on record)", file=sys.stderr)
                return 1
            decided = decide(conn, args.run_id, args.action, reason, operator, confirmed_over=other.event_id)
        event = decided.event
        if event is None:
            print(f"bandwatch: run {args.run_id} has no decision to undo", file=sys.stderr)
            return 1
    except LedgerError as error:
        print(f"bandwatch: {error}", file=sys.stderr)
        return 1
    current = get_run(conn, args.run_id, with_result=False)
    state = current.decision if current and current.decision else "no decision"
    print(safe_text(f"run {args.run_id}: {event.action} recorded (event {event.event_id}); now {state}"))
    return 0


def _confirmed(question: str) -> bool:
    """Ask on the terminal; False without one (a script decides with --yes)."""
    if not (sys.stdin.isatty() and sys.stderr.isatty()):
        return False
    print(question, end="", file=sys.stderr, flush=True)
    try:
        return input().strip().lower() in ("y", "yes")
    except EOFError:
        return False


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
