"""Snapshots of the main screens at 80x24 and 120x40 with fixed data (times, paths, no blink).

Update after an intended change of the layout: `python -m pytest tests/tui/test_snapshots.py
--snapshot-update`, then look at the SVGs in tests/tui/__snapshots__/.
"""
from __future__ import annotations

import shutil
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any, Callable

import importlib.metadata

import pytest

from tui.app import BandwatchApp
from tui.screens.main_screen import MainScreen

from tui_support import make_lab, quiet

# The SVGs were drawn with these versions; another Textual or Rich draws other bytes, so the
# comparison is only meaningful with them (the Pilot tests check behaviour on any version).
DRAWN_WITH = {"textual": "8.2.8", "rich": "15.0.0"}
INSTALLED = {name: importlib.metadata.version(name) for name in DRAWN_WITH}
pytestmark = pytest.mark.skipif(
    INSTALLED != DRAWN_WITH, reason=f"snapshots drawn with {DRAWN_WITH}, installed {INSTALLED}"
)

# A fixed place, so the folder name in the title bar is the same in every run.
SNAPSHOT_ROOT = Path("/tmp/bandwatch-snapshot-lab")


@pytest.fixture(autouse=True)
def utc_clock(monkeypatch: pytest.MonkeyPatch) -> Iterator[None]:
    """Times are drawn in the local zone: UTC here, so the screens are the same everywhere."""
    monkeypatch.setenv("TZ", "UTC")
    time.tzset()
    yield
    monkeypatch.undo()
    time.tzset()


@pytest.fixture
def snapshot_app() -> BandwatchApp:
    shutil.rmtree(SNAPSHOT_ROOT, ignore_errors=True)
    lab = make_lab(SNAPSHOT_ROOT)
    return BandwatchApp(lab["data"], lab["export"], operator="tester", monochrome=False)


@pytest.fixture
def monochrome_app() -> BandwatchApp:
    """As a terminal without colour shows it (NO_COLOR, TERM=xterm-mono)."""
    shutil.rmtree(SNAPSHOT_ROOT, ignore_errors=True)
    lab = make_lab(SNAPSHOT_ROOT)
    return BandwatchApp(lab["data"], lab["export"], operator="tester", monochrome=True)


def keys(*pressed: str, selected: int | None = None) -> Callable[[Any], Any]:
    """run_before: wait for the ledger and file reads, press keys, wait again."""

    async def run_before(pilot: Any) -> None:
        await quiet(pilot)
        for key in pressed:
            await pilot.press(key)
            await quiet(pilot)
        if selected is not None:
            main = next(s for s in pilot.app.screen_stack if isinstance(s, MainScreen))
            table = main.query_one("RunList")
            assert main.selected_run_id == selected, (main.selected_run_id, table.cursor_row, table.scroll_y)
        for widget in pilot.app.screen.query("Input"):
            widget.cursor_blink = False

    return run_before


def test_main_screen_plot_80x24(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(80, 24), run_before=keys("j", selected=3))


def test_main_screen_plot_120x40(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(120, 40), run_before=keys("j", selected=3))


def test_lines_pane_80x24(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(80, 24), run_before=keys("j", "2", "j", "x"))


def test_constants_pane_120x40(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(120, 40), run_before=keys("j", "3"))


def test_checks_of_an_unreadable_file_80x24(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(80, 24), run_before=keys("4"))


def test_trend_screen_80x24(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(80, 24), run_before=keys("j", "t"))


def test_help_screen_80x24(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(80, 24), run_before=keys("question_mark"))


def test_flag_dialog_80x24(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(80, 24), run_before=keys("j", "f", "c", "e", "l", "l"))


def test_redo_dialog_80x24(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(80, 24), run_before=keys("j", "r"))


def test_main_screen_without_colour_80x24(snap_compare: Any, monochrome_app: BandwatchApp) -> None:
    assert snap_compare(monochrome_app, terminal_size=(80, 24), run_before=keys("j", selected=3))


def test_checks_without_colour_80x24(snap_compare: Any, monochrome_app: BandwatchApp) -> None:
    assert snap_compare(monochrome_app, terminal_size=(80, 24), run_before=keys("j", "j", "4", selected=2))


def test_lines_pane_120x40(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(120, 40), run_before=keys("j", "j", "2", selected=2))


def test_main_screen_60x20(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(60, 20), run_before=keys("j", selected=3))


def test_trend_screen_120x40(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(120, 40), run_before=keys("j", "t"))


def test_help_screen_scrolled_80x24(snap_compare: Any, snapshot_app: BandwatchApp) -> None:
    assert snap_compare(snapshot_app, terminal_size=(80, 24), run_before=keys("question_mark", *["j"] * 30))
