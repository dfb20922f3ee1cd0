"""The braille drawing of spectra and trends, checked cell by cell (no terminal needed)."""
from __future__ import annotations

import numpy as np

from tui.widgets.spectrum_plot import BRAILLE_BASE, GUTTER, PlotLine, braille_rows, draw_spectrum
from tui.widgets.trend_plot import TrendRun, draw_trend


def test_braille_dots_follow_the_unicode_layout() -> None:
    # Unicode braille block: dots 1-2-3-7 down the left column, 4-5-6-8 down the right
    # (Unicode Standard, Braille Patterns U+2800-U+28FF).
    full_left = braille_rows(np.array([0, 9]), np.array([3, -1]), 4)
    assert full_left == [chr(BRAILLE_BASE + 0x01 + 0x02 + 0x04 + 0x40)]  # ⡇
    top_right = braille_rows(np.array([9, 0]), np.array([-1, 0]), 4)
    assert top_right == [chr(BRAILLE_BASE + 0x08)]


def peak_spectrum(centre: float) -> tuple[np.ndarray, np.ndarray]:
    x = np.linspace(2000.0, 3000.0, 1001)
    y = np.exp(-(((x - centre) / 3.0) ** 2))
    return x, y


def plot_column_of_peak(rows: list[str]) -> int:
    """The character column (inside the plot) whose top row holds the peak's dots."""
    top = rows[0][GUTTER:]
    lit = [i for i, ch in enumerate(top) if ch != chr(BRAILLE_BASE)]
    assert lit, "the peak should reach the top row"
    return lit[0]


def test_high_to_low_axis_puts_high_wavenumber_on_the_left() -> None:
    # IR spectra are usually drawn with wavenumber falling to the right (common practice).
    x, y = peak_spectrum(2900.0)
    width, height = 57, 8  # 50 plot columns: each column spans 20 cm-1
    descending = [t.plain for t in draw_spectrum(x, y, [], (2000.0, 3000.0), width, height, high_to_low=True)]
    ascending = [t.plain for t in draw_spectrum(x, y, [], (2000.0, 3000.0), width, height, high_to_low=False)]
    # 2900 cm-1 is 100 cm-1 from the high end: column 5 of 50 when falling, column 45 when rising
    assert plot_column_of_peak(descending) in (4, 5)
    assert plot_column_of_peak(ascending) in (44, 45)
    assert descending[-1].split()[1:] == ["3000", "2500", "2000"]
    assert ascending[-1].split()[1:] == ["2000", "2500", "3000"]


def test_markers_tell_isotopologue_and_branch_apart_by_character() -> None:
    x, y = peak_spectrum(2500.0)
    lines = [
        PlotLine(2900.0, "H35Cl", "R"),
        PlotLine(2100.0, "H35Cl", "P"),
        PlotLine(2898.0 - 20.0, "H37Cl", "R"),
        PlotLine(2600.0, None, None),
        PlotLine(2300.0, "H35Cl", "P", excluded=True),
    ]
    rows = [t.plain for t in draw_spectrum(x, y, lines, (2000.0, 3000.0), 57, 12)]
    assert rows[0].startswith("H35Cl")
    assert rows[1].startswith("H37Cl")
    assert rows[2].startswith("unasg")
    first = rows[0][GUTTER:]
    assert first.index("R") < first.index("x") < first.index("P")  # falling axis: R (high) left
    assert "r" in rows[1] and "R" not in rows[1][GUTTER:]
    assert rows[2][GUTTER:].strip() == "?"


def test_zoomed_window_hides_lines_outside_it() -> None:
    x, y = peak_spectrum(2500.0)
    lines = [PlotLine(2900.0, "H35Cl", "R"), PlotLine(2450.0, "H35Cl", "P")]
    rows = [t.plain for t in draw_spectrum(x, y, lines, (2400.0, 2600.0), 57, 8)]
    assert rows[0][GUTTER:].strip() == "P"
    assert rows[-1].split()[1:] == ["2600", "2500", "2400"]


def test_trend_draws_one_bar_per_run_with_its_sigma() -> None:
    runs = [TrendRun(1.0, 0.1), TrendRun(2.0, 0.1), TrendRun(3.0, None)]
    rows = [t.plain for t in draw_trend(runs, 30, 6)]
    plot = rows[:-2]  # then the marker row and the time row
    # the axis spans the lowest value minus its sigma to the highest plus its (absent) sigma
    assert plot[0].startswith("3.00│") and plot[-1].startswith("0.90│")
    # the newest value (highest) is drawn in the last columns, top row
    assert plot[0].rstrip().rstrip(chr(BRAILLE_BASE))[-1] != "│"
    assert plot[-1].split("│")[1][0] != chr(BRAILLE_BASE)  # the oldest (lowest) bottom-left


def test_trend_has_a_reference_line_times_and_tells_flagged_and_failed_runs_apart() -> None:
    runs = [
        TrendRun(2885.980, 0.001, "2026-03-05T09:15:00.000Z"),
        TrendRun(2885.984, 0.001, "2026-03-05T10:40:00.000Z", flagged=True),
        TrendRun(2885.991, 0.001, "2026-03-05T12:05:00.000Z", failed=True),
    ]
    rows = [t.plain for t in draw_trend(runs, 40, 8, reference=2885.9750)]
    plot, marks, times = rows[:-2], rows[-2], rows[-1]
    # the reference (below every run) widens the axis down to it and is drawn as a dotted
    # line: every other cell of its row lit where no run is
    assert plot[-1].startswith("2885.9750│")
    dotted = plot[-1].split("│")[1]
    assert sum(cell != chr(BRAILLE_BASE) for cell in dotted[4::2]) >= len(dotted[4::2]) - 2
    # the flagged run marked F, the failed one ✘, under their bars
    assert marks.split() == ["F", "✘"]
    # local times of the first, middle and last runs (TZ is the test machine's: the labels
    # are what processing.local_time makes of the stamps)
    from processing.local_time import clock

    for stamp in ("2026-03-05T09:15:00.000Z", "2026-03-05T10:40:00.000Z", "2026-03-05T12:05:00.000Z"):
        assert clock(stamp)[:5] in times
    # a good run is a bar two dots wide (both dot columns of its cell), a flagged one one dot
    first = plot[-2].split("│")[1]
    assert ord(first[0]) - BRAILLE_BASE & 0x38 and ord(first[0]) - BRAILLE_BASE & 0x07
