"""Messages the app's workers and the station post to the screens (small dataclasses only).

Workers never touch widgets: they read files or the ledger in a thread and post one of these;
handlers on the screens own all UI state.
"""
from __future__ import annotations

import numpy as np
from textual.message import Message

from processing.station.events import StationEvent
from processing.station.ledger import DecisionEvent, RunRecord, TrendPoint


class StationEventReceived(Message):
    """Something happened in the station (file seen, settled, run processed or failed, ...)."""

    def __init__(self, event: StationEvent) -> None:
        super().__init__()
        self.event = event


class RunsLoaded(Message):
    """A fresh read of the ledger's run list (newest first)."""

    def __init__(self, runs: list[RunRecord], instruments: tuple[str, ...] = ()) -> None:
        super().__init__()
        self.runs = runs
        self.instruments = instruments  # every instrument with runs in the ledger


class RunDetailLoaded(Message):
    """One run with its full result (the run list itself is read without results)."""

    def __init__(self, run: RunRecord) -> None:
        super().__init__()
        self.run = run


class SpectrumLoaded(Message):
    """The arrays of one run's file, re-read read-only for the plot (only the version the run
    analysed: `problem` says so when the file changed since)."""

    def __init__(self, run_id: int, x: np.ndarray | None, y: np.ndarray | None, problem: str | None) -> None:
        super().__init__()
        self.run_id = run_id
        self.x = x
        self.y = y
        self.problem = problem


class DecisionRecorded(Message):
    """An accept, flag or undo was appended to the ledger (or refused, with the reason)."""

    def __init__(self, run_id: int, action: str, problem: str | None = None, over: DecisionEvent | None = None) -> None:
        super().__init__()
        self.run_id = run_id
        self.action = action
        self.problem = problem
        self.over = over  # another person's decision this one was confirmed over (both on record)


class ReprocessFinished(Message):
    """A run was reprocessed with changed settings; `new_run_id` is the new version."""

    def __init__(self, run_id: int, new_run_id: int | None, problem: str | None = None) -> None:
        super().__init__()
        self.run_id = run_id
        self.new_run_id = new_run_id
        self.problem = problem


class ReportExported(Message):
    """A run's report was written to `path` (or could not be, with the reason)."""

    def __init__(self, run_id: int, path: str | None, problem: str | None = None, figure: str | None = None) -> None:
        super().__init__()
        self.run_id = run_id
        self.path = path
        self.problem = problem
        self.figure = figure  # the figure's path, or why it was not drawn


class HistoryLoaded(Message):
    """One fitted quantity over the ledger's runs, oldest first."""

    def __init__(self, isotopologue: str, quantity: str, points: list[TrendPoint]) -> None:
        super().__init__()
        self.isotopologue = isotopologue
        self.quantity = quantity
        self.points = points


class LedgerChanged(Message):
    """The ledger's change feed moved on: `run_ids` changed (a decision, a new version) since
    the last read; `first` is the feed's start, which only learns where the journal stands (a
    feed started again after trouble is not `first`: the list is read again)."""

    def __init__(self, run_ids: list[int], first: bool = False) -> None:
        super().__init__()
        self.run_ids = run_ids
        self.first = first


class DecisionConflict(Message):
    """Nothing was recorded: another person's decision (`over`) is in effect on the run; the
    operator is asked before deciding over it."""

    def __init__(self, run_id: int, action: str, reason: str, over: DecisionEvent) -> None:
        super().__init__()
        self.run_id = run_id
        self.action = action
        self.reason = reason
        self.over = over
