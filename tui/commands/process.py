"""`bandwatch process FILE...`: read and analyse files, print tables or JSON Lines."""
from __future__ import annotations

import argparse
import sys
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from processing.pipeline import ProcessSettings

HELP = "analyse spectrum files and print what was found (tables, or --json lines)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("files", nargs="+", metavar="FILE", help="spectrum or line-list files")
    parser.add_argument(
        "--species",
        default="",
        help="comma-separated molecules or isotopologues expected (e.g. HCl,DCl or H35Cl); "
        "default: detect",
    )
    parser.add_argument("--json", action="store_true", help="one JSON object per file, one per line")
    parser.add_argument("--config", default=None, metavar="FILE",
                        help="a station configuration: analyse with its expected species and [checks] "
                        "thresholds, as that station does (reproduces its verdict); --species overrides its species")


def table_width() -> int | None:
    """The terminal's width for the tables (COLUMNS honoured); None when the output is not a
    terminal and COLUMNS is not set (a file or a pipe gets the tables whole)."""
    import os
    import shutil

    if sys.stdout.isatty() or os.environ.get("COLUMNS"):
        return max(40, shutil.get_terminal_size().columns)
    return None


def settings_for(args: argparse.Namespace) -> ProcessSettings:
    """Default settings, or the station's (species and check thresholds) with --config."""
    from processing.pipeline import ProcessSettings

    species = tuple(s.strip() for s in args.species.split(",") if s.strip())
    if args.config is None:
        return ProcessSettings(species=species)
    from dataclasses import replace

    from processing.station.config import load_config, station_settings

    settings = station_settings(load_config(args.config))
    return replace(settings, species=species) if species else settings


def run(args: argparse.Namespace) -> int:
    from processing.pipeline import process_file
    from processing.result_text import render_result
    from processing.results import RunResult, to_json
    from processing.safe_text import safe_text

    settings = settings_for(args)
    width = None if args.json else table_width()
    any_unreadable = False
    for path in args.files:
        try:
            result = process_file(path, settings)
        except MemoryError:  # the machine's limit, not the file's fault: a failed run
            result = RunResult(file=path, status="failed", error=f"{path}: out of memory while analysing")
        any_unreadable |= result.status != "processed"
        sys.stdout.write((to_json(result) if args.json else render_result(result, width)) + "\n")
        if result.status != "processed":
            print(f"bandwatch: {safe_text(result.error)}", file=sys.stderr)
    return 1 if any_unreadable else 0
