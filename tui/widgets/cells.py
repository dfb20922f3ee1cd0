"""Cell text for tables: words and symbols for status (never colour alone), right-justified numbers.

Numbers are formatted here, before they enter a DataTable (its default formatter would round
floats to two decimals), as right-justified `rich.text.Text`, which also keeps square brackets
in file names from being read as markup.
"""
from __future__ import annotations

import math
from typing import Any

from rich.text import Text

from processing.estimate import Estimate
from processing.safe_text import safe_text

VERDICT_LABELS: dict[str | None, tuple[str, str]] = {
    "pass": ("✔ PASS", "green"),
    "warn": ("! WARN", "yellow"),
    "fail": ("✘ FAIL", "bold red"),
}
# The run statuses in the words the command line uses (`unreadable`, `failed`), and the two
# states of a file the station is still on: being analysed, or waiting for the rest of it.
STATUS_LABELS: dict[str, tuple[str, str]] = {
    "unreadable": ("✘ UNREADABLE", "bold red"),
    "failed": ("✘ FAILED", "bold red"),
    "busy": ("… WORKING", "cyan"),
    "waiting": ("… WAITING", "cyan"),
    "problem": ("✘ PROBLEM", "bold red"),
}
DECISION_LABELS: dict[str | None, tuple[str, str]] = {
    "accept": ("accepted", "green"),
    "flag": ("FLAGGED", "bold yellow"),
    "replaced": ("replaced", "dim italic"),  # no decision, and a newer version of the file exists
    None: ("pending", "dim"),
}
CHECK_LABELS: dict[str, tuple[str, str]] = {
    "pass": ("✔ pass", "green"),
    "warn": ("! WARN", "yellow"),
    "fail": ("✘ FAIL", "bold red"),
    "not_assessed": ("– n/a", "dim"),  # the check could not be made (not a pass)
}


def verdict_text(status: str, verdict: str | None) -> Text:
    """The run's verdict as a word with a symbol; unreadable or failed runs say so."""
    if status in STATUS_LABELS:
        label, style = STATUS_LABELS[status]
    else:
        label, style = VERDICT_LABELS.get(verdict, (f"· {verdict or 'none'}", "dim"))
    return Text(label, style=style)


def decision_text(decision: str | None, superseded: bool = False) -> Text:
    """The decision as a word; an undecided run that a newer version replaced says "replaced"."""
    if decision is None and superseded:
        decision = "replaced"
    label, style = DECISION_LABELS.get(decision, (str(decision), ""))
    return Text(label, style=style)


def check_text(status: str) -> Text:
    label, style = CHECK_LABELS.get(status, (status.upper(), ""))
    return Text(label, style=style)


def plain(value: Any) -> Text:
    """Any value as literal text: no markup, and control characters escaped (file names and
    header values can hold terminal escape sequences)."""
    return Text("" if value is None else safe_text(value))


def number(value: float | None, decimals: int, style: str = "") -> Text:
    """A right-justified number with fixed decimals; "—" when absent."""
    if value is None or not isinstance(value, (int, float)) or not math.isfinite(value):
        return Text("—", justify="right", style="dim")
    return Text(f"{value:.{decimals}f}", justify="right", style=style)


def decimals_for(sigma: float | None, default: int = 4) -> int:
    """Decimal places that show two significant digits of the uncertainty (at most 8)."""
    if sigma is None or not isinstance(sigma, (int, float)) or sigma <= 0 or not math.isfinite(sigma):
        return default
    return int(min(8, max(0, 1 - math.floor(math.log10(sigma)))))


def quantity_cells(estimate: Estimate | None) -> tuple[Text, Text]:
    """(value, ±sigma) cells of an estimate, at the uncertainty's precision."""
    if estimate is None or not isinstance(estimate.value, (int, float)) or not math.isfinite(estimate.value):
        return Text("—", justify="right", style="dim"), Text("", justify="right")
    sigma = estimate.sigma
    value = float(estimate.value)
    if value != 0 and abs(value) < 1e-2:
        # small quantities such as centrifugal distortion (~1e-4 cm-1) read best in e-notation
        value_cell = Text(f"{value:.4e}", justify="right")
        if isinstance(sigma, (int, float)) and math.isfinite(sigma):
            return value_cell, Text(f"±{sigma:.1e}", justify="right")
        return value_cell, Text("± n/d", justify="right", style="dim")
    places = decimals_for(sigma, default=_default_places(value))
    value_cell = number(value, places)
    if isinstance(sigma, (int, float)) and math.isfinite(sigma):
        return value_cell, Text(f"±{sigma:.{places}f}", justify="right")
    return value_cell, Text("± n/d", justify="right", style="dim")


def _default_places(value: float) -> int:
    magnitude = abs(value)
    if magnitude == 0 or magnitude >= 100:
        return 3
    return int(min(8, max(3, 3 - math.floor(math.log10(magnitude)))))


def scientific_or_fixed(value: float | None) -> Text:
    """Small quantities (e.g. D, ~1e-4 cm-1) in scientific notation, others fixed."""
    if value is None or not math.isfinite(value):
        return Text("—", justify="right", style="dim")
    if value != 0 and abs(value) < 1e-2:
        return Text(f"{value:.4e}", justify="right")
    return Text(f"{value:.5f}", justify="right")
