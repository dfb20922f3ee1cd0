"""`bandwatch demo`: a simulated instrument fills a temporary export folder; the interface watches it.

A temporary export folder and data folder are made; a station runs in-process on them; a
simulated instrument writes the sample runs into the export folder a few seconds apart (each
in chunks, as instrument software saves a scan). With a terminal the interface opens on it;
with --plain (or without a terminal) the station's events are printed one per line.
"""
from __future__ import annotations

import argparse
import signal
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from pathlib import Path
from types import FrameType
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from processing.station.events import StationEvent
    from processing.instrument_replay import InstrumentReplay
    from processing.station.config import StationConfig
    from processing.station.station import Station
    from tui.app import BandwatchApp, EventCallback

HELP = "watch a simulated instrument write the sample runs into a temporary folder"

DEFAULT_SAMPLES = Path(__file__).resolve().parents[2] / "sample_runs"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--interval", type=float, default=4.0, metavar="SECONDS",
                        help="seconds between two runs written by the simulated instrument (default 4)")
    parser.add_argument("--plain", action="store_true",
                        help="print the station's events instead of opening the interface (also the case, "
                        "with --once, when there is no terminal)")
    parser.add_argument("--once", action="store_true",
                        help="exit once every sample run has been processed, printing the run list")
    parser.add_argument("--exit-after", type=float, default=None, metavar="SECONDS",
                        help="exit after this many seconds whatever the state (headless checks)")
    parser.add_argument("--samples", default=None, metavar="DIR",
                        help=f"folder of runs to replay (default: the bundled {DEFAULT_SAMPLES.name}/)")
    parser.add_argument("--keep", action="store_true", help="keep the temporary folders afterwards")
    parser.add_argument("--workers", type=int, default=1, help="analysis worker processes (default 1)")
    parser.add_argument("--operator", default=None, help="name written beside decisions (default: login name)")


def run(args: argparse.Namespace) -> int:
    import shutil

    from processing.errors import ConfigError
    from processing.instrument_replay import InstrumentReplay, sample_files
    from processing.station.config import StationConfig

    samples = Path(args.samples) if args.samples else DEFAULT_SAMPLES
    sources = sample_files(samples)
    if not sources:
        raise ConfigError(str(samples), "samples", "no spectrum files to replay (regenerate the sample runs first)")
    if args.interval < 0:
        raise ConfigError(None, "--interval", "must not be negative")
    root = Path(tempfile.mkdtemp(prefix="bandwatch-demo-"))
    export, data = root / "export", root / "data"
    export.mkdir()
    config = StationConfig(
        export_folder=export, data_folder=data, settle_seconds=0.4, rescan_seconds=1.0,
        workers=max(1, args.workers), operator=args.operator or "",
    ).with_overrides()
    replay = InstrumentReplay(sources, export, interval_seconds=args.interval, first_delay_seconds=1.0)
    plain = args.plain or not (sys.stdin.isatty() and sys.stdout.isatty())
    once = args.once
    if not args.plain and plain:
        # Without a terminal nobody can press ctrl+q: print events and stop when all are done.
        print("bandwatch: no terminal; printing events until every run is handled (as --plain --once)",
              file=sys.stderr)
        once = True
    print(f"demo: export folder {export}\ndemo: data folder   {data}", file=sys.stderr if not plain else sys.stdout)
    previous = _on_hangup(_interrupt)  # a closed terminal (SIGHUP) or a kill (SIGTERM) still cleans up
    try:
        if plain:
            code = _run_plain(config, replay, len(sources), once, args.exit_after)
        else:
            code = _run_interface(config, replay, len(sources), once, args.exit_after, args.operator)
        if once or plain:
            _print_runs(data)
        return code
    finally:
        try:
            replay.stop()
        finally:  # the folders go even if stopping the replay fails
            _restore(previous)
            if args.keep:
                print(f"demo: kept {root}", file=sys.stderr)
            else:
                shutil.rmtree(root, ignore_errors=True)


HANGUP_SIGNALS = (signal.SIGHUP, signal.SIGTERM)


SignalHandler = Callable[[int, FrameType | None], object] | int | None  # what signal.signal takes and gives


def _interrupt(signum: int, frame: FrameType | None) -> None:
    """As Ctrl-C: the demo's `finally` stops the station and removes its temporary folders."""
    raise KeyboardInterrupt


def _on_hangup(handler: Callable[[int, FrameType | None], object]) -> dict[int, SignalHandler]:
    """Install `handler` for SIGHUP and SIGTERM; the handlers they had before."""
    return {number: signal.signal(number, handler) for number in HANGUP_SIGNALS}


def _restore(previous: dict[int, SignalHandler]) -> None:
    for number, handler in previous.items():
        signal.signal(number, handler)


class _Countdown:
    """Counts finished runs (processed, unreadable or failed) and sets `done` at the target."""

    def __init__(self, target: int) -> None:
        self.target = target
        self.finished_paths: set[str] = set()
        self.done = threading.Event()

    def see(self, event: StationEvent) -> None:
        from processing.station.events import RunFailed, RunProcessed

        if isinstance(event, (RunProcessed, RunFailed)):
            self.finished_paths.add(event.path)
            if len(self.finished_paths) >= self.target:
                self.done.set()


def _run_plain(config: StationConfig, replay: InstrumentReplay, count: int, once: bool, exit_after: float | None) -> int:
    from processing.station.events import plain_line
    from processing.station.station import Station

    countdown = _Countdown(count)

    def on_event(event: StationEvent) -> None:
        print(plain_line(event), flush=True)
        countdown.see(event)

    station = Station(config, on_event=on_event)
    station.start()
    deadline = time.monotonic() + exit_after if exit_after is not None else None
    try:
        replay.start()  # inside: a hang-up while it starts still stops the station
        while not countdown.done.wait(0.1):
            if once and _all_handled(replay, station):
                break
            if deadline is not None and time.monotonic() >= deadline:
                break
    except KeyboardInterrupt:
        pass
    finally:
        replay.stop()
        station.stop()
    if once and not countdown.done.is_set():
        print(f"demo: only {len(countdown.finished_paths)} of {count} runs finished in time", file=sys.stderr)
        return 1
    return 0


def _run_interface(
    config: StationConfig, replay: InstrumentReplay, count: int, once: bool, exit_after: float | None, operator: str | None
) -> int:
    from processing.station.station import Station
    from tui.app import BandwatchApp

    countdown = _Countdown(count)
    stations: list[Station] = []

    def make_station(on_event: EventCallback) -> Station:
        def forward(event: StationEvent) -> None:
            on_event(event)
            countdown.see(event)

        station = Station(config, on_event=forward)
        stations.append(station)
        replay.start()
        return station

    app = BandwatchApp(
        config.data_folder,
        config.export_folder,
        station_factory=make_station,
        operator=operator,
        exit_after_seconds=exit_after,
        config=config,
    )
    if once:
        # A separate thread, so the station's threads never wait on the interface's loop.
        threading.Thread(target=_exit_when_done, args=(app, countdown, replay, stations), daemon=True).start()
    # A closed terminal: leave the interface as `ctrl+q` does (the station stops on the way out).
    _on_hangup(lambda signum, frame: app.exit(1))
    try:
        app.run()
    finally:
        for station in stations:
            station.stop()  # already stopped when the interface closed normally
    if once and not countdown.done.is_set():
        return 1
    return 0


def _all_handled(replay: InstrumentReplay, station: Station) -> bool:
    """The instrument wrote everything and the station has nothing left pending or running."""
    if not (replay.finished and station.wait_idle(timeout=2.0)):
        return False
    time.sleep(1.5)  # past the settle time and a rescan: a last file would show up by now
    return bool(station.idle)


def _exit_when_done(app: BandwatchApp, countdown: _Countdown, replay: InstrumentReplay, stations: list[Station]) -> None:
    """Leave the interface shortly after the last sample run was handled (--once)."""
    while not countdown.done.wait(0.2):
        if stations and _all_handled(replay, stations[0]):
            break
    time.sleep(1.5)  # let the run list show the last run
    try:
        app.call_from_thread(app.exit, 0)
    except RuntimeError:
        pass  # the interface already closed


def _print_runs(data: Path) -> None:
    """The ledger's runs, oldest first, one line each (for headless checks)."""
    from processing.station.ledger import list_runs, open_ledger

    conn = open_ledger(data)
    try:
        runs = list_runs(conn, with_result=False)
    finally:
        conn.close()
    print(f"demo: {len(runs)} run(s) in the ledger")
    for run in reversed(runs):
        verdict = (run.verdict or run.status).upper()
        print(f"  run {run.run_id:>3}  {run.name:<32} {verdict:<10} {','.join(run.species) or '-'}")
