"""Figures for the lab notebook (SVG or PNG): the spectrum with its assignment markers, the
residuals of each band, and a trend of the main band's origin over the runs.

Drawn with matplotlib, an optional extra (`pip install 'bandwatch[figures]'`): the station
never needs it, and without it `FiguresUnavailable` says how to get it. Only matplotlib's
object interface is used (no pyplot, no global state), so figures can be written from a
worker thread. Text stays text in an SVG (searchable, editable); a PNG carries the run's title
and labels in its metadata.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from processing.errors import BandwatchError
from processing.local_time import local
from processing.result_text import assignment_label, branch_label, main_reasons, reasons_line
from processing.results import RunResult

FIGURE_FORMATS = (".svg", ".png")
INSTALL_HINT = "pip install 'bandwatch[figures]'"
MARKERS = ("v", "^", "<", ">", "D", "s")  # one per isotopologue, told apart by shape as well as colour


class FiguresUnavailable(BandwatchError):
    """matplotlib is not installed."""


@dataclass(frozen=True)
class TrendValue:
    """One run's value of the trended quantity."""

    at: str  # the run's time stamp (UTC, as stored)
    value: float
    sigma: float | None
    flagged: bool = False
    failed: bool = False
    current: bool = False  # the run the figure is of


@dataclass(frozen=True)
class FigureInput:
    """Everything a run's figure shows; `x`/`y` None when the spectrum cannot be drawn (a line
    list, a file changed since): the lines are then drawn as sticks at their heights."""

    title: str
    result: RunResult
    x: np.ndarray | None = None
    y: np.ndarray | None = None
    spectrum_note: str | None = None
    trend_label: str = ""
    trend: Sequence[TrendValue] = ()
    trend_reference: float | None = None


def figure_format(path: str | Path) -> str:
    """"svg" or "png" from the file name; BandwatchError naming the file otherwise."""
    suffix = Path(path).suffix.lower()
    if suffix not in FIGURE_FORMATS:
        raise BandwatchError(f"{path}: a figure is written as .svg or .png, not {suffix or 'a file without an extension'}")
    return suffix[1:]


def _matplotlib():  # type: ignore[no-untyped-def]
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        raise FiguresUnavailable(f"figures need matplotlib, which is not installed here: {INSTALL_HINT}") from None
    return Figure, FigureCanvasAgg


def figure_labels(result: RunResult) -> list[str]:
    """The assignment labels a figure of `result` shows ("H35Cl 1-0 R(3)")."""
    return [assignment_label(line.assigned) for line in result.lines if line.assigned is not None]


def write_figure(path: str | Path, figure_input: FigureInput) -> Path:
    """Write the figure to `path` (.svg or .png); returns the path."""
    kind = figure_format(path)
    Figure, FigureCanvasAgg = _matplotlib()
    from matplotlib import rc_context

    with rc_context({"svg.fonttype": "none", "font.size": 8}):
        figure = Figure(figsize=(11.0, 8.5), layout="constrained")
        FigureCanvasAgg(figure)
        grid = figure.add_gridspec(3, 1, height_ratios=(3.0, 1.5, 1.5))
        _spectrum(figure.add_subplot(grid[0]), figure_input)
        _residuals(figure.add_subplot(grid[1]), figure_input.result)
        _trend(figure.add_subplot(grid[2]), figure_input)
        figure.suptitle(figure_input.title, fontsize=10)
        target = Path(path)
        labels = figure_labels(figure_input.result)
        # PNG: tEXt chunks; SVG: <title> and dc:description (its text is text in the drawing too)
        metadata = {"Title": figure_input.title, "Description": "; ".join(labels)}
        figure.savefig(target, format=kind, dpi=150, metadata=metadata)
    return target


def _isotopologues(result: RunResult) -> list[str]:
    counts: dict[str, int] = {}
    for line in result.lines:
        if line.assigned is not None:
            counts[line.assigned.isotopologue] = counts.get(line.assigned.isotopologue, 0) + 1
    return sorted(counts, key=lambda iso: (-counts[iso], iso))


def _spectrum(axes, data: FigureInput) -> None:  # type: ignore[no-untyped-def]
    result = data.result
    lines = result.lines
    if data.x is not None and data.y is not None:
        axes.plot(data.x, data.y, color="0.2", linewidth=0.6)
        top = float(np.max(data.y)) if data.y.size else 1.0
    else:
        for line in lines:
            axes.vlines(float(line.position.value), 0.0, line.height, color="0.4", linewidth=0.8)
        top = max((line.height for line in lines), default=1.0)
        axes.text(0.01, 0.97, data.spectrum_note or "no spectrum to draw: lines at their heights",
                  transform=axes.transAxes, va="top", fontsize=7, color="0.3")
    isotopologues = _isotopologues(result)
    marks_at = top * 1.04
    for index, iso in enumerate(isotopologues):
        mine = [line for line in lines if line.assigned is not None and line.assigned.isotopologue == iso]
        xs = [float(line.position.value) for line in mine]
        colour = f"C{index % 10}"
        axes.scatter(xs, [marks_at] * len(xs), marker=MARKERS[index % len(MARKERS)], color=colour, s=14, label=iso)
        for line in mine:
            assigned = line.assigned
            assert assigned is not None
            axes.annotate(branch_label(assigned), (float(line.position.value), marks_at),
                          xytext=(0, 4 + 22 * (index % 2)), textcoords="offset points",
                          rotation=90, fontsize=5.5, ha="center", va="bottom", color=colour)
    unassigned = [float(line.position.value) for line in lines if line.assigned is None]
    if unassigned:
        axes.scatter(unassigned, [marks_at] * len(unassigned), marker="$?$", color="0.45", s=16, label="unassigned")
    saturated = [float(line.position.value) for line in lines if line.saturated]
    if saturated:
        axes.scatter(saturated, [top * 0.98] * len(saturated), marker="_", color="k", s=40, label="saturated")
    axes.set_ylim(top=top * 1.35 + 1e-9)
    axes.invert_xaxis()  # wavenumber falling to the right, as FTIR spectra are shown
    axes.set_xlabel("wavenumber / cm-1")
    axes.set_ylabel("absorbance (decadic)")
    if isotopologues or unassigned:
        axes.legend(loc="upper left", fontsize=7, ncols=min(6, len(isotopologues) + 2))


def _residuals(axes, result: RunResult) -> None:  # type: ignore[no-untyped-def]
    """obs-calc against m (P: -J'', R: J''+1) for each band, with the lines' standard errors."""
    from processing.levels import m_from_branch

    drawn = False
    for index, band in enumerate(result.bands):
        mine = [line for line in result.lines if line.assigned is not None
                and (line.assigned.isotopologue, line.assigned.v_upper, line.assigned.v_lower)
                == (band.isotopologue, band.v_upper, band.v_lower)]
        if not mine:
            continue
        m = [int(m_from_branch(line.assigned.branch, line.assigned.J_lower)) for line in mine if line.assigned is not None]
        residual = [line.assigned.residual for line in mine if line.assigned is not None]
        sigma = [line.position.sigma or 0.0 for line in mine]
        axes.errorbar(m, residual, yerr=sigma, fmt=MARKERS[index % len(MARKERS)], markersize=3, linewidth=0.6,
                      color=f"C{index % 10}", label=f"{band.label} (rms {band.rms:.4f} cm-1)")
        drawn = True
    axes.axhline(0.0, color="0.5", linewidth=0.6)
    axes.set_xlabel("m (P branch: -J'', R branch: J''+1)")
    axes.set_ylabel("obs - calc / cm-1")
    if drawn:
        axes.legend(loc="upper right", fontsize=7)
    else:
        axes.text(0.5, 0.5, "no band fitted", transform=axes.transAxes, ha="center", va="center")


def _trend(axes, data: FigureInput) -> None:  # type: ignore[no-untyped-def]
    """The trended quantity over runs: good runs filled, flagged hollow, failed crossed."""
    points = [(local(point.at), point) for point in data.trend]
    points = [(moment, point) for moment, point in points if moment is not None]
    if not points:
        axes.text(0.5, 0.5, "no trend: no earlier run of this band in the ledger", transform=axes.transAxes,
                  ha="center", va="center")
        axes.set_axis_off()
        return
    groups = (
        ("good", lambda p: not p.flagged and not p.failed, {"fmt": "o"}),
        ("flagged", lambda p: p.flagged and not p.failed, {"fmt": "o", "markerfacecolor": "none"}),
        ("verdict FAIL", lambda p: p.failed, {"fmt": "x"}),
    )
    for label, chosen, style in groups:
        mine = [(moment, point) for moment, point in points if chosen(point)]
        if mine:
            axes.errorbar([m for m, _ in mine], [p.value for _, p in mine], yerr=[p.sigma or 0.0 for _, p in mine],
                          color="C0", markersize=4, linewidth=0.6, label=f"{label} ({len(mine)})", **style)
    current = [(moment, point) for moment, point in points if point.current]
    if current:
        axes.scatter([m for m, _ in current], [p.value for _, p in current], s=90, facecolors="none",
                     edgecolors="C3", label="this run")
    if data.trend_reference is not None:
        axes.axhline(data.trend_reference, color="0.4", linestyle="--", linewidth=0.8,
                     label=f"reference {data.trend_reference:.8g}")
    axes.ticklabel_format(axis="y", useOffset=False)
    axes.set_ylabel(data.trend_label)
    axes.set_xlabel(f"time ({points[0][0].tzname()})")
    axes.legend(loc="best", fontsize=7)


def figure_title(run_id: int, version: int, name: str, result: RunResult) -> str:
    """`0905_hcl_cell.jdx · run 3 v1 · verdict WARN: calibration +0.24 cm-1 · ...`."""
    reasons = reasons_line(main_reasons(result))
    verdict = (result.verdict or result.status).upper()
    return f"{name} · run {run_id} v{version} · verdict {verdict}" + (f": {reasons}" if reasons else "")
