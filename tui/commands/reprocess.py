"""`bandwatch reprocess`: stored runs again with today's analysis, on this PC or a Dask cluster."""
from __future__ import annotations

import argparse
import math
import signal
import sys
import threading
import time
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any

from processing import strict_json
from processing.safe_text import safe_text
from tui.commands.watch import add_station_arguments

if TYPE_CHECKING:
    from processing.reprocess.outcome import Backend
    from processing.reprocess.summary import Progress, ReprocessSummary
    from processing.station.config import StationConfig

HELP = "analyse stored runs again with today's analysis (this PC or a Dask cluster); each a new version"
SHOWN_EXAMPLES = 20  # changed runs and failures listed by name in the text summary


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("paths", nargs="*", metavar="PATH",
                        help="folders (with their subfolders), globs ('/archive/**/*.jdx', quoted) or files")
    parser.add_argument("--ledger-runs", default=None, metavar="QUERY",
                        help="files of runs in the ledger: `all`, or terms such as from=2024-01-01 to=2024-06-30 "
                        "verdict=fail|warn status=failed path='/data/ftir-2/*' species=HCl instrument=NAME")
    add_station_arguments(parser)
    parser.add_argument("--workers", type=int, default=None, help="worker processes on this PC (default: every core)")
    parser.add_argument("--cluster", nargs="?", const="", default=None, metavar="ADDRESS",
                        help="analyse on a Dask cluster: the scheduler's address (tcp://host:8786); alone, the "
                        "configuration's [cluster] address (needs pip install 'bandwatch[cluster]')")
    parser.add_argument("--dry-run", action="store_true", help="say what would be analysed and why; analyse and write nothing")
    parser.add_argument("--plain", action="store_true", help="a progress line every --every files instead of a bar")
    parser.add_argument("--every", type=int, default=100, metavar="N", help="files per progress line with --plain (default 100)")
    parser.add_argument("--json", action="store_true", help="the summary as one JSON object on standard output")
    parser.add_argument("--reports", action="store_true",
                        help="also write each new version's report files in DATA/reports/ (default: ledger only)")
    parser.add_argument("--timeout", type=float, default=None, metavar="SECONDS",
                        help="longest analysis of one file (default: the configuration's, 60)")
    parser.add_argument("--memory-mb", type=int, default=None, metavar="MB",
                        help="memory limit of each analysis process (default: the configuration's, 2048)")


def run(args: argparse.Namespace) -> int:
    from processing.regular_files import ReadPolicy
    from processing.reprocess.job import JobOptions, ReprocessJob, reprocess_lock
    from processing.reprocess.selection import LedgerSelection, PathSelection, SelectionError, parse_query
    from processing.station import ledger
    from processing.station.config import station_config, station_settings

    if args.cluster and "://" not in args.cluster:
        raise SelectionError(f"--cluster takes a scheduler address such as tcp://host:8786, not {args.cluster!r} "
                             "(put folders and files before --cluster)")
    if not args.paths and args.ledger_runs is None:
        raise SelectionError("reprocess: name folders, globs or files, or --ledger-runs QUERY (e.g. `all`)")
    if args.workers is not None and not 1 <= args.workers <= 256:
        raise SelectionError("--workers must be between 1 and 256")
    if args.every < 1:
        raise SelectionError("--every must be at least 1")
    config = station_config(args.config, args.data, args.ledger).with_overrides(timeout_seconds=args.timeout, memory_limit_mb=args.memory_mb)
    data_dir = Path(config.data_folder).expanduser().resolve()
    where = config.ledger_url or data_dir  # the station's ledger: a server, or the data folder's file
    settings = station_settings(config, ReadPolicy(forbidden=(str(data_dir),)))
    paths = (
        PathSelection(tuple(args.paths), config.include, config.excluded_patterns, config.instrument)
        if args.paths else None
    )
    if paths is not None:
        paths.check()
    query = parse_query(args.ledger_runs) if args.ledger_runs is not None else None

    stop = threading.Event()
    out = sys.stderr if args.json else sys.stdout
    display = _Display(out, plain=args.plain or not out.isatty(), every=args.every)
    if args.dry_run:
        conn = _read_only_ledger(where, needed=query is not None)
    else:
        conn = ledger.open_ledger(where)
        if not ledger.is_server_url(where):
            # as the station does with its file: runs from before instruments are this instrument's
            # (else the files named here would be recorded again under a second key)
            ledger.adopt_unnamed_runs(conn, config.instrument)
    try:
        def candidates() -> Any:
            if paths is not None:
                yield from paths.candidates()
            if query is not None and conn is not None:
                yield from LedgerSelection(query).candidates(conn)

        def count(done: threading.Event) -> int:
            total = paths.count(done) if paths is not None else 0
            if paths is not None and done.is_set():
                return total
            if query is not None:
                counter = ledger.open_ledger(where, read_only=True)
                try:
                    total += LedgerSelection(query).count(counter)
                finally:
                    counter.close()
            return total

        options = JobOptions(data_dir, settings, write_reports=args.reports, ledger_location=where)
        with _stopping_on_signals(stop):
            if args.dry_run:
                job = ReprocessJob(conn, options, None, stop=stop, on_progress=display.progress, on_problem=display.problem)
                summary = job.run(candidates(), count)
            else:
                with reprocess_lock(data_dir):
                    backend = _backend(args, config)
                    try:
                        job = ReprocessJob(conn, options, backend, stop=stop, on_progress=display.progress, on_problem=display.problem)
                        summary = job.run(candidates(), count)
                    finally:
                        backend.close()
    finally:
        display.close()
        if conn is not None:
            conn.close()
    if args.json:
        sys.stdout.write(strict_json.dumps(summary.to_dict()) + "\n")
    else:
        write_summary(sys.stdout, summary)
    if summary.interrupted:
        print("bandwatch: interrupted; run the same command again to finish (recorded files are skipped)", file=sys.stderr)
        return 130
    if summary.stopped is not None:
        print(f"bandwatch: stopped: {safe_text(summary.stopped)}", file=sys.stderr)
        return 1
    return 0 if summary.complete else 1


def _read_only_ledger(where: str | Path, needed: bool) -> Any:
    """A dry run reads the ledger if there is one (no file yet: every file is new)."""
    from processing.station import ledger

    if not ledger.is_server_url(where) and not ledger.ledger_path(where).exists() and not needed:
        return None
    return ledger.open_ledger(where, read_only=True)


def _backend(args: argparse.Namespace, config: StationConfig) -> Backend:
    from processing.errors import ConfigError

    if args.cluster is None:
        from processing.reprocess.local import LocalBackend, all_cores

        return LocalBackend(args.workers or all_cores(), config.process_function, config.timeout_seconds, config.memory_limit_mb)
    from processing.reprocess.cluster import ClusterBackend, connect, require_dask
    from processing.reprocess.guarded import PoolSpec

    require_dask()
    address = args.cluster or config.cluster_address
    if not address:
        raise ConfigError(config.source, "cluster.address", "--cluster without an address needs [cluster] address = \"tcp://host:8786\" in the configuration")
    client = connect(address)
    spec = PoolSpec(1, config.process_function, config.timeout_seconds, config.memory_limit_mb)
    return ClusterBackend(client, spec, owns_client=True)


class _stopping_on_signals:
    """Ctrl-C (or SIGTERM) sets `stop`: the job stops taking files and records what came back;
    a second Ctrl-C stops at once."""

    def __init__(self, stop: threading.Event) -> None:
        self.stop = stop
        self.previous: dict[int, Any] = {}

    def _handler(self, signum: int, frame: object) -> None:
        if self.stop.is_set():
            raise KeyboardInterrupt
        self.stop.set()

    def __enter__(self) -> None:
        if threading.current_thread() is threading.main_thread():
            for number in (signal.SIGINT, signal.SIGTERM):
                self.previous[number] = signal.signal(number, self._handler)

    def __exit__(self, *exc: object) -> None:
        for number, handler in self.previous.items():
            signal.signal(number, handler)


# ---------------------------------------------------------------- progress


def _duration(seconds: float | None) -> str:
    if seconds is None or not math.isfinite(seconds):
        return "?"
    seconds = int(round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, seconds = divmod(rest, 60)
    return f"{hours}h{minutes:02d}m" if hours else f"{minutes}m{seconds:02d}s" if minutes else f"{seconds}s"


def progress_line(progress: Progress) -> str:
    """One line: done/total, analysed, skipped, failed, rate, time left."""
    total = "?" if progress.total is None else str(progress.total)
    return (
        f"reprocess: {progress.done}/{total} files (analysed {progress.analysed}, skipped {progress.skipped}, "
        f"failed {progress.failed}) {progress.rate:.1f} files/s, left {_duration(progress.eta_seconds)}"
    )


def bar_text(progress: Progress) -> str:
    """Beside the bar: done/total, rate, time left, skipped and failed files (words, not colours)."""
    total = "?" if progress.total is None else str(progress.total)
    return (f"{progress.done}/{total} {progress.rate:.1f} files/s left {_duration(progress.eta_seconds)} "
            f"skip {progress.skipped} fail {progress.failed}")


class _Display:
    """A progress bar on a terminal (rich), else a line every `every` files."""

    def __init__(self, out: IO[str], plain: bool, every: int) -> None:
        self.out = out
        self.plain = plain
        self.every = every
        self._next_line = every
        self._bar: Any = None
        self._task: Any = None
        self._last_draw = 0.0
        if not plain:
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TextColumn

            # fits 80 columns with a million files: bar, done/total, rate, time left, skipped, failed
            self._bar = Progress(BarColumn(bar_width=12), TextColumn("{task.fields[line]}"), console=Console(file=out))
            self._task = self._bar.add_task("reprocess", total=None, line="counting files ...")
            self._bar.start()

    def progress(self, progress: Progress) -> None:
        if self._bar is not None:
            now = time.monotonic()
            if now - self._last_draw < 0.1 and progress.done != progress.total:
                return
            self._last_draw = now
            self._bar.update(self._task, completed=progress.done, total=progress.total, line=bar_text(progress))
            return
        if progress.done >= self._next_line:
            self.out.write(progress_line(progress) + "\n")
            self.out.flush()
            self._next_line = (progress.done // self.every + 1) * self.every

    def problem(self, message: str) -> None:
        line = f"bandwatch: {safe_text(message)}"
        if self._bar is not None:
            self._bar.console.print(line, markup=False, highlight=False)
        else:
            print(line, file=sys.stderr)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()


# ---------------------------------------------------------------- summary


def write_summary(out: IO[str], summary: ReprocessSummary) -> None:
    """The summary for people: counts, verdicts old -> new, failures, what changed."""
    made = summary.provenance
    w = out.write
    if summary.mode == "dry-run":
        would = sum(summary.reasons.values())
        w(f"dry run: {summary.selected} files selected; would analyse {would}, skip {summary.skipped} "
          f"(made with this analysis {made.analysis_version}, library {made.library_hash}, settings {made.settings_hash}); "
          "nothing analysed or written\n")
        _counts(out, "why", summary.reasons)
        for path in summary.would_analyse:
            w(f"  {safe_text(path)}\n")
        if would > len(summary.would_analyse):
            w(f"  ... and {would - len(summary.would_analyse)} more\n")
        return
    not_recorded = f", {summary.not_recorded} not recorded" if summary.not_recorded else ""
    w(f"reprocess ({summary.mode}): {summary.selected} files in {_duration(summary.seconds)}: {summary.recorded} recorded, "
      f"{summary.skipped + summary.unchanged} skipped, {summary.failed} failed{not_recorded}\n")
    w(f"  made with analysis {made.analysis_version}\n  library {made.library_hash}, settings {made.settings_hash}\n")
    _counts(out, "by verdict", summary.by_outcome)
    _counts(out, "why analysed", summary.reasons)
    if summary.verdict_changes:
        _counts(out, f"verdict changed ({sum(summary.verdict_changes.values())} runs)", summary.verdict_changes)
        for change in summary.changed_runs[:SHOWN_EXAMPLES]:
            w(f"    run {change.old_run_id} -> {change.new_run_id}  {change.old} -> {change.new}  {safe_text(change.path)}\n")
        _more(out, sum(summary.verdict_changes.values()), SHOWN_EXAMPLES)
    else:
        w("  verdict changed: none\n")
    if summary.failed:
        _counts(out, f"failures ({summary.failed})", summary.failure_reasons)
        for problem in summary.failures[:SHOWN_EXAMPLES]:
            w(f"    run {problem.run_id}  {safe_text(problem.path)}: {safe_text(problem.reason)}\n")
        _more(out, summary.failed, SHOWN_EXAMPLES)
    if summary.lost:
        w(f"  not recorded ({summary.not_recorded}; taken again at the next reprocess):\n")
        for problem in summary.lost[:SHOWN_EXAMPLES]:
            w(f"    {safe_text(problem.path)}: {safe_text(problem.reason)}\n")
        _more(out, summary.not_recorded, SHOWN_EXAMPLES)
    write_changes(out, summary)


def write_changes(out: IO[str], summary: ReprocessSummary) -> None:
    """The 'what changed' table: per quantity, new - old across the reprocessed archive."""
    if not summary.quantity_shifts:
        out.write("  what changed: nothing to compare yet (no earlier version was reprocessed)\n")
        return
    out.write("  what changed, new - old over the files reprocessed with this analysis\n"
              "  (median and quartiles; one clean shift = a correction, a spread = a change):\n")
    rows = [("species", "band", "quantity", "n", "median", "25%", "75%", "unit")]
    for shift in summary.quantity_shifts:
        rows.append((shift.isotopologue, shift.band or "-", shift.quantity, str(shift.count), _shift(shift.median),
                     _shift(shift.lower_quartile), _shift(shift.upper_quartile), shift.unit))
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    for row in rows:  # at most 80 columns with a million files
        out.write("  " + "  ".join(cell.rjust(width) if 3 <= i <= 6 else cell.ljust(width)
                                     for i, (cell, width) in enumerate(zip(row, widths))).rstrip() + "\n")


def _shift(value: float) -> str:
    """A difference in 3 significant digits with its sign; none at all is 0."""
    return "0" if value == 0 else f"{value:+.3g}"


def _counts(out: IO[str], title: str, counts: dict[str, int]) -> None:
    if not counts:
        return
    ordered = sorted(counts.items(), key=lambda item: (-item[1], item[0]))
    out.write(f"  {title}: " + ", ".join(f"{safe_text(name)} {number}" for name, number in ordered) + "\n")


def _more(out: IO[str], total: int, shown: int) -> None:
    if total > shown:
        out.write(f"    ... and {total - shown} more (--json lists up to 1000)\n")
