"""The `bandwatch` command line: one subcommand per module in `tui/commands/`.

Each command module offers `HELP: str`, `add_arguments(parser)` and `run(args) -> int`, and
keeps heavy imports (numpy, scipy, textual) inside `run`, so `bandwatch process` starts fast.
"""
from __future__ import annotations

import argparse
import importlib
import sys

# subcommand -> module under tui.commands
COMMANDS: dict[str, str] = {
    "process": "process",
    "simulate": "simulate",
    "demo": "demo",
    "watch": "watch",
    "ledger": "ledger",
    "init": "init",
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="bandwatch",
        description="Turn gas-phase FTIR spectra of diatomic molecules into assigned lines, "
        "fitted constants and a run verdict.",
    )
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, module_name in COMMANDS.items():
        module = importlib.import_module(f"tui.commands.{module_name}")
        sub = subparsers.add_parser(name, help=module.HELP, description=module.HELP)
        module.add_arguments(sub)
        sub.set_defaults(_run=module.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    from processing.errors import BandwatchError

    if getattr(args, "_run", None) is None:
        # No command: open the interface on the configured export folder, else show help.
        try:
            args = _configured_watch(parser)
        except BandwatchError as error:
            print(f"bandwatch: {error}", file=sys.stderr)
            return 1
        if args is None:
            parser.print_help()
            return 0

    try:
        return int(args._run(args) or 0)
    except BandwatchError as error:
        print(f"bandwatch: {error}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 130


def _configured_watch(parser: argparse.ArgumentParser) -> argparse.Namespace | None:
    """`bandwatch watch` arguments when a configuration names an export folder and a terminal is there."""
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        return None
    from processing.station.config import station_config

    if station_config(None).export_folder is None:
        return None
    return parser.parse_args(["watch"])


if __name__ == "__main__":
    sys.exit(main())
