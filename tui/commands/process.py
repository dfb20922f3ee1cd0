"""`bandwatch process FILE...`: read and analyse files, print tables or JSON Lines."""
from __future__ import annotations

import argparse
import sys

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


def run(args: argparse.Namespace) -> int:
    from processing.pipeline import ProcessSettings, process_file
    from processing.result_text import render_result
    from processing.results import RunResult, to_json
    from processing.safe_text import safe_text

    species = tuple(s.strip() for s in args.species.split(",") if s.strip())
    settings = ProcessSettings(species=species)
    any_unreadable = False
    for path in args.files:
        try:
            result = process_file(path, settings)
        except MemoryError:  # the machine's limit, not the file's fault: a failed run
            result = RunResult(file=path, status="failed", error=f"{path}: out of memory while analysing")
        any_unreadable |= result.status != "processed"
        sys.stdout.write((to_json(result) if args.json else render_result(result)) + "\n")
        if result.status != "processed":
            print(f"bandwatch: {safe_text(result.error)}", file=sys.stderr)
    return 1 if any_unreadable else 0
