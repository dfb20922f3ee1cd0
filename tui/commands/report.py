"""`bandwatch report RUN [--figure out.svg|png]`: a run's report files, and its figure for a notebook."""
from __future__ import annotations

import argparse
import sys

from tui.commands.watch import add_station_arguments

HELP = "write a run's report (DATA/reports/...) and, with --figure, its figure (SVG or PNG)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_station_arguments(parser)
    parser.add_argument("run_id", type=int, metavar="RUN", help="the run's number (bandwatch ledger list)")
    parser.add_argument("--figure", default=None, metavar="PATH",
                        help="also write the spectrum with its assignments, the residuals of each band and the "
                        "trend of its band origin, as PATH.svg or PATH.png (needs pip install 'bandwatch[figures]')")


def run(args: argparse.Namespace) -> int:
    from processing.errors import BandwatchError
    from processing.figures import figure_format
    from processing.station.config import station_config
    from processing.station.reports import export_run_report, write_run_figure

    config = station_config(args.config, args.data, args.ledger)
    data_dir = config.data_folder.expanduser()
    if args.figure is not None:
        figure_format(args.figure)  # a wrong extension is refused before anything is written
    folder, problem = export_run_report(data_dir, args.run_id, config.ledger_location)
    if problem:
        print(f"bandwatch: {problem}", file=sys.stderr)
        return 1
    print(f"report written: {folder}")
    if args.figure is None:
        return 0
    try:
        written = write_run_figure(data_dir, args.run_id, args.figure, config.export_folder, config.ledger_location)
    except BandwatchError as error:
        print(f"bandwatch: figure not written: {error}", file=sys.stderr)
        return 1
    print(f"figure written: {written}")
    return 0
