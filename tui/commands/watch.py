"""`bandwatch watch [DIR]`: the station. Watches the export folder and processes files as they land."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from processing.station.config import StationConfig

HELP = "watch an export folder: process each file as it lands, record runs in the ledger"


def add_station_arguments(parser: argparse.ArgumentParser) -> None:
    """--config, --data and --ledger, shared by every station command."""
    parser.add_argument("--config", default=None, metavar="FILE",
                        help="station configuration (default: $BANDWATCH_CONFIG or ~/.config/bandwatch/station.toml)")
    parser.add_argument("--data", default=None, metavar="DIR",
                        help="data folder with the ledger and reports (default: the configuration's, "
                        "else $XDG_DATA_HOME/bandwatch or ~/.local/share/bandwatch)")
    parser.add_argument("--ledger", default=None, metavar="URL",
                        help="a PostgreSQL ledger server (postgresql://USER@HOST/DATABASE) instead of the data "
                        "folder's ledger file; the password comes from PGPASSWORD or ~/.pgpass (default: the "
                        "configuration's [ledger] url)")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("folder", nargs="?", default=None, metavar="DIR",
                        help="export folder to watch (default: the configuration's export_folder)")
    add_station_arguments(parser)
    parser.add_argument("--plain", action="store_true",
                        help="one line per event on standard output, no interface (logs, scripts; "
                        "also chosen when standard output is not a terminal)")
    parser.add_argument("--once", action="store_true",
                        help="process what is in the folder now, then exit (no watching)")
    parser.add_argument("--poll", action="store_true", default=None,
                        help="poll the folder instead of file-system events")
    parser.add_argument("--recursive", action="store_true", default=None, help="watch subfolders too")
    parser.add_argument("--include", action="append", default=None, metavar="PATTERN",
                        help="take only file names matching this pattern (repeatable; default *)")
    parser.add_argument("--exclude", action="append", default=None, metavar="PATTERN",
                        help="skip file names matching this pattern (repeatable)")
    parser.add_argument("--settle", type=float, default=None, metavar="SECONDS",
                        help="seconds a file must stay unchanged before it is read (default 0.5)")
    parser.add_argument("--workers", type=int, default=None, help="worker processes (default 2)")
    parser.add_argument("--timeout", type=float, default=None, metavar="SECONDS",
                        help="longest analysis of one file before it is stopped (default 60)")
    parser.add_argument("--memory-mb", type=int, default=None, metavar="MB",
                        help="memory limit of each worker (default 2048; 0 = none)")
    parser.add_argument("--species", default=None,
                        help="comma-separated molecules or isotopologues expected (default: detect)")
    parser.add_argument("--operator", default=None, help="name written beside decisions")
    parser.add_argument("--instrument", default=None, metavar="NAME",
                        help="this instrument's name; runs are kept by instrument and file (default: the "
                        "configuration's [station] instrument, else the host name)")


def build_config(args: argparse.Namespace) -> StationConfig:
    from processing.station.config import station_config

    config = station_config(args.config, args.data, args.ledger)
    species = None
    if args.species is not None:
        species = tuple(s.strip() for s in args.species.split(",") if s.strip())
    return config.with_overrides(
        export_folder=Path(args.folder).expanduser() if args.folder else None,
        poll=args.poll,
        recursive=args.recursive,
        include=tuple(args.include) if args.include else None,
        exclude=tuple(args.exclude) if args.exclude else None,
        settle_seconds=args.settle,
        workers=args.workers,
        timeout_seconds=args.timeout,
        memory_limit_mb=args.memory_mb,
        species=species,
        operator=args.operator,
        instrument=args.instrument,
    )


def run(args: argparse.Namespace) -> int:
    config = build_config(args)
    if args.plain or args.once:
        return run_plain(config, once=args.once)
    if not sys.stdout.isatty():
        print("bandwatch: no terminal; printing events instead (--plain)", file=sys.stderr)
        return run_plain(config, once=False)
    try:
        from tui.app import BandwatchApp, EventCallback
    except ImportError:
        print("bandwatch: the interface is not available here; printing events instead (--plain)",
              file=sys.stderr)
        return run_plain(config, once=False)
    from processing.station.config import check_folders
    from processing.station.station import Station

    export_dir, data_dir = check_folders(config)  # one clear error before the screen opens

    def make_station(on_event: EventCallback) -> Station:
        return Station(config, on_event=on_event)

    app = BandwatchApp(
        data_dir, export_dir, station_factory=make_station, operator=config.operator or None, config=config,
        ledger_location=config.ledger_location,
    )
    return int(app.run() or 0)


ONCE_PATIENCE_SECONDS = 120.0  # `--once`: how long ledger trouble (a lock, a full disk) is waited out
EXIT_RUN_FAILED = 3  # `--once`: every file recorded, but a run's verdict is FAIL or its file unreadable


def run_plain(config: StationConfig, once: bool) -> int:
    """Run the station, printing one line per event, until Ctrl-C (or idle with `once`).

    Exit status 1 when the station stopped itself (its data folder went away) and, with
    `once`, when an analysis stopped (crashed, hung, ran out of memory) or a file could not be
    recorded (ledger trouble that lasted longer than ONCE_PATIENCE_SECONDS); with `once`,
    EXIT_RUN_FAILED when all was recorded but a run's verdict is FAIL or its file unreadable."""
    import signal
    import threading

    from processing.station.events import RunFailed, RunProcessed, StationEvent, plain_line
    from processing.station.station import Station

    failures = 0
    failed_runs = 0

    def on_event(event: StationEvent) -> None:
        nonlocal failures, failed_runs
        # a process function may also return a "failed" result, announced as RunProcessed
        failures += isinstance(event, RunFailed) or (isinstance(event, RunProcessed) and event.status == "failed")
        failed_runs += isinstance(event, RunProcessed) and (event.status == "unreadable" or event.verdict == "fail")
        sys.stdout.write(plain_line(event) + "\n")
        sys.stdout.flush()

    station = Station(config, on_event=on_event)
    stop = threading.Event()
    previous = signal.signal(signal.SIGTERM, lambda signum, frame: stop.set())
    try:
        station.start()
        if once:
            while not station.wait_idle(timeout=0.5) and station.halted is None:
                if station.trouble_seconds > ONCE_PATIENCE_SECONDS:
                    break  # what is left cannot be recorded now; said at stop, exit status 1
        else:
            while not stop.wait(0.5) and station.halted is None:
                pass
    except KeyboardInterrupt:
        pass
    finally:
        station.stop()
        signal.signal(signal.SIGTERM, previous)
    if station.consumer_failure is not None:
        print(f"bandwatch: printing the station's events failed: {station.consumer_failure}", file=sys.stderr)
    if station.halted is not None:
        return 1
    if once and (failures or station.not_recorded or station.spooled):
        return 1
    return EXIT_RUN_FAILED if once and failed_runs else 0
