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
    "report": "report",
    "reprocess": "reprocess",
    "init": "init",
}


def build_parser(argv: list[str] | None = None) -> argparse.ArgumentParser:
    """The command line's parser. Given the arguments, and they name a command, only that
    command's module is imported and its parser built (the others cost every command ~13 ms of
    start-up); otherwise every command's, for help and for the message on a wrong one."""
    parser = argparse.ArgumentParser(
        prog="bandwatch",
        description="Turn gas-phase FTIR spectra of diatomic molecules into assigned lines, "
        "fitted constants and a run verdict.",
    )
    parser.add_argument("--version", action=_VersionAction, nargs=0, help="show the installed version and exit")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    named = _command_named(argv)
    for name, module_name in COMMANDS.items():
        if named is not None and name != named:
            continue
        module = importlib.import_module(f"tui.commands.{module_name}")
        sub = subparsers.add_parser(name, help=module.HELP, description=module.HELP)
        module.add_arguments(sub)
        sub.set_defaults(_run=module.run)
    return parser


def _command_named(argv: list[str] | None) -> str | None:
    """The command the arguments name (their first word, when it is one), or None."""
    if argv is None:
        return None
    first = argv[0] if argv else None
    return first if first in COMMANDS else None


class _VersionAction(argparse.Action):
    """`--version`, looked up only when asked (importlib.metadata costs every other command
    ~20 ms of start-up)."""

    def __call__(self, parser: argparse.ArgumentParser, namespace: argparse.Namespace, values: object,
                 option_string: str | None = None) -> None:
        print(f"bandwatch {installed_version()}")
        parser.exit()


def installed_version() -> str:
    """The installed package's version (pyproject.toml), or "unknown" when run from a tree
    that was never installed."""
    from processing.provenance import package_version

    found = package_version()
    return "unknown (not installed)" if found == "0+unknown" else found


NO_FOLDER_HINT = (
    "No export folder is configured yet. To set up this station:\n"
    "  bandwatch init --export /path/to/ftir-export   # writes {path}\n"
    "then `bandwatch` opens the interface on that folder. Or watch a folder now:\n"
    "  bandwatch watch /path/to/ftir-export\n"
    "Try it first on simulated data: bandwatch demo"
)


def main(argv: list[str] | None = None) -> int:
    arguments = sys.argv[1:] if argv is None else argv
    parser = build_parser(arguments)
    args = parser.parse_args(arguments)
    from processing.errors import BandwatchError

    try:
        if getattr(args, "_run", None) is None:
            # No command: open the interface on the configured export folder, else show help
            # and how to configure one.
            from processing.station.config import default_config_path, station_config

            configured = station_config(None).export_folder is not None
            watch = _configured_watch(parser) if configured else None
            if watch is None:
                parser.print_help()
                print()
                if not configured:
                    print(NO_FOLDER_HINT.format(path=default_config_path()))
                else:
                    print("bandwatch: no terminal here for the interface; `bandwatch watch --plain` prints events")
                return 0
            args = watch
        return int(args._run(args) or 0)
    except BandwatchError as error:
        return _one_line(str(error))
    except _sqlite_error() as error:  # a ledger problem met outside the ledger's own checks
        return _one_line(f"ledger: {error} (see `bandwatch ledger list` and the data folder)")
    except OSError as error:  # e.g. a data folder on a full or read-only disk
        where = f"{error.filename}: " if error.filename else ""
        return _one_line(f"{where}{error.strerror or error}")
    except KeyboardInterrupt:
        return 130


def _sqlite_error() -> type[Exception]:
    """sqlite3.Error once a command has imported sqlite3 (only then can one be raised); not
    imported here, as it costs `bandwatch process` ~4 ms of start-up."""
    sqlite3 = sys.modules.get("sqlite3")
    return sqlite3.Error if sqlite3 is not None else _NeverRaised


class _NeverRaised(Exception):
    """Stands in for sqlite3.Error before sqlite3 is imported."""


def _one_line(message: str) -> int:
    """Print a problem as the one line `bandwatch: ...` (escaped: it may quote a file) and
    return the exit status 1."""
    from processing.safe_text import safe_text

    print(f"bandwatch: {safe_text(message)}", file=sys.stderr)
    return 1


def _configured_watch(parser: argparse.ArgumentParser) -> argparse.Namespace | None:
    """`bandwatch watch` arguments when a configuration names an export folder and a terminal is there."""
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        return None
    return parser.parse_args(["watch"])


if __name__ == "__main__":
    sys.exit(main())
