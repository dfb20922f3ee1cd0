"""The core/UI wall: no module under processing/ may pull in textual, rich or tui."""
from __future__ import annotations

import pkgutil
import subprocess
import sys

import processing

PROCESSING_MODULES = sorted(
    module.name for module in pkgutil.walk_packages(processing.__path__, prefix="processing.")
)


def test_there_are_processing_modules_to_check() -> None:
    assert "processing.spectrum" in PROCESSING_MODULES
    assert "processing.readers.registry" in PROCESSING_MODULES


def test_processing_modules_import_no_interface_code() -> None:
    # One fresh interpreter imports every module, then reports what got loaded.
    code = (
        "import importlib, sys\n"
        f"for name in {PROCESSING_MODULES!r}:\n"
        "    importlib.import_module(name)\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('textual', 'rich', 'tui'))\n"
        "print(','.join(bad))\n"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert result.stdout.strip() == ""


def _printed_after_parser(arguments: list[str] | None, then: str) -> str:
    """What a fresh interpreter prints (`then`, Python) after building the command line's parser."""
    code = f"import sys\nfrom tui.cli import build_parser\nbuild_parser({arguments!r})\n{then}\n"
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.strip()


def test_process_command_path_does_not_import_textual() -> None:
    assert _printed_after_parser(None, "import tui.commands.process\nprint('textual' in sys.modules)") == "False"


def test_import_linter_contract_holds() -> None:
    # The same wall stated statically in pyproject.toml ([tool.importlinter]).
    import shutil
    from pathlib import Path

    linter = shutil.which("lint-imports", path=str(Path(sys.executable).parent)) or shutil.which("lint-imports")
    assert linter, "import-linter is part of the test extra"
    root = Path(__file__).resolve().parents[1]
    result = subprocess.run([linter], capture_output=True, text=True, cwd=root)
    assert result.returncode == 0, result.stdout + result.stderr
    assert "1 kept, 0 broken" in result.stdout


def test_a_command_imports_only_its_own_module_and_help_lists_every_command() -> None:
    """`bandwatch process FILE` builds only the process command's parser (start-up); the top
    level's help and the message on an unknown command still name every command."""
    import contextlib
    import io

    from tui.cli import COMMANDS, build_parser

    loaded = "print(','.join(sorted(m for m in sys.modules if m.startswith('tui.commands.'))))"
    assert _printed_after_parser(["process", "x.csv"], loaded) == "tui.commands.process"
    text = io.StringIO()
    with contextlib.redirect_stdout(text):
        build_parser([]).print_help()
    assert all(name in text.getvalue() for name in COMMANDS)
    message = io.StringIO()
    with contextlib.redirect_stderr(message), contextlib.suppress(SystemExit):
        build_parser(["nosuch"]).parse_args(["nosuch"])
    assert all(repr(name) in message.getvalue() for name in COMMANDS)


def test_process_command_does_not_import_sqlite3_and_a_ledger_error_is_still_one_line(monkeypatch, capsys) -> None:
    """sqlite3 is left to the commands that use it (~4 ms of `bandwatch process` start-up); an
    sqlite3 error a command meets still ends as one line, not a traceback."""
    import sqlite3

    import tui.commands.ledger
    from tui.cli import main

    assert _printed_after_parser(["process", "x.csv"], "import tui.commands.process\nprint('sqlite3' in sys.modules)") == "False"

    def broken(args):
        raise sqlite3.OperationalError("database disk image is malformed")

    monkeypatch.setattr(tui.commands.ledger, "run", broken)
    assert main(["ledger", "list"]) == 1
    lines = capsys.readouterr().err.strip().splitlines()
    assert lines == ["bandwatch: ledger: database disk image is malformed (see `bandwatch ledger list` and the data folder)"]


def test_process_imports_no_masked_arrays() -> None:
    """numpy's median, percentile and unique import numpy.ma (~10 ms of start-up, with the
    inspection it does at import); a whole `bandwatch process` of a JCAMP-DX and of a CSV
    file does without them (processing.order_stats)."""
    from pathlib import Path

    runs = Path(__file__).resolve().parents[1] / "sample_runs"
    code = ("import contextlib, io, sys\nfrom tui.cli import main\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            f"    main(['process', {str(runs / '0905_hcl_cell.jdx')!r}, {str(runs / '1545_dcl_hcl_mix_export.csv')!r}])\n"
            "print('numpy.ma' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip().splitlines()[-1] == "False"
