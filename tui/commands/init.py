"""`bandwatch init [PATH]`: write a commented station configuration to edit."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

HELP = "write a commented station configuration file (TOML) to edit"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("path", nargs="?", default=None, metavar="PATH",
                        help="where to write it (default: $BANDWATCH_CONFIG or ~/.config/bandwatch/station.toml)")
    parser.add_argument("--export", default=None, metavar="DIR", help="export folder to put in the file")
    parser.add_argument("--data", default=None, metavar="DIR", help="data folder to put in the file")
    parser.add_argument("--operator", default=None, help="operator name to put in the file")
    parser.add_argument("--force", action="store_true", help="overwrite an existing file")


def run(args: argparse.Namespace) -> int:
    from processing.station.config import default_config_path, load_config, render_template

    target = Path(args.path).expanduser() if args.path else default_config_path()
    if target.exists() and not args.force:
        print(f"bandwatch: {target}: already exists (use --force to overwrite)", file=sys.stderr)
        return 1
    export = str(Path(args.export).expanduser().resolve()) if args.export else "/path/to/export"
    data = str(Path(args.data).expanduser().resolve()) if args.data else None
    text = render_template(export, data, args.operator or "")
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_text(text, encoding="utf-8")
    except OSError as error:
        print(f"bandwatch: {target}: cannot write ({error.strerror or error})", file=sys.stderr)
        return 1
    load_config(target)  # the file we wrote must read back
    print(f"wrote {target}")
    return 0
