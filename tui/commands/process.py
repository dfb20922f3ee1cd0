"""`bandwatch process FILE...`: read and analyse files, print tables or JSON Lines."""
from __future__ import annotations

import argparse
import json
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

    species = tuple(s.strip() for s in args.species.split(",") if s.strip())
    settings = ProcessSettings(species=species)
    any_unreadable = False
    for path in args.files:
        result = process_file(path, settings)
        any_unreadable |= result.status != "processed"
        if args.json:
            sys.stdout.write(json.dumps(result.to_dict()) + "\n")
        else:
            from tui.report_text import render_result

            sys.stdout.write(render_result(result) + "\n")
        if result.status != "processed":
            print(f"bandwatch: {result.error}", file=sys.stderr)
    return 1 if any_unreadable else 0
