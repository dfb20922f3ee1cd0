"""A reprocess's tally: what was analysed, skipped, recorded and failed, verdicts old -> new.

Counters only grow by kind (verdicts, reasons, pairs of verdicts), and at most `EXAMPLES`
paths are kept per list, so a million files cost the same memory as a hundred.
"""
from __future__ import annotations

import time
from collections import Counter
from dataclasses import dataclass, field
from typing import Any

from processing.provenance import Provenance
from processing.reprocess.changes import QuantityShift

EXAMPLES = 1000  # changed runs, failures, ... kept by path in a summary
REASON_KINDS = 100  # distinct failure reasons counted apart; the rest together


@dataclass(frozen=True)
class Progress:
    """Where a reprocess stands, for a progress bar or a progress line."""

    done: int  # files finished: recorded, skipped, failed, not recorded
    total: int | None  # files selected, once counted (None while counting)
    analysed: int
    skipped: int
    failed: int  # failed runs and files not recorded
    seconds: float

    @property
    def rate(self) -> float:
        """Files finished per second so far."""
        return self.done / self.seconds if self.seconds > 0 else 0.0

    @property
    def eta_seconds(self) -> float | None:
        if self.total is None or self.rate <= 0:
            return None
        return max(0.0, (self.total - self.done) / self.rate)


@dataclass(frozen=True)
class VerdictChange:
    path: str
    old_run_id: int
    new_run_id: int
    old: str
    new: str


@dataclass(frozen=True)
class FileProblem:
    path: str
    reason: str
    run_id: int | None = None  # the failed run, when one was recorded


def outcome_label(status: str, verdict: str | None) -> str:
    """What a run concluded in one word: its verdict, else its status (unreadable, failed)."""
    return verdict if status == "processed" and verdict else status


@dataclass
class Tally:
    """Counts as a reprocess goes (one thread: the client's)."""

    provenance: Provenance
    mode: str
    started: float = field(default_factory=time.monotonic)
    total: int | None = None
    selected: int = 0  # candidates looked at so far
    analysed: int = 0
    recorded: int = 0
    skipped: int = 0
    unchanged: int = 0  # analysed, found identical to a version made the same way: not recorded
    failed: int = 0
    not_recorded: int = 0
    planned: int = 0  # a dry run's files that would be analysed
    by_outcome: Counter[str] = field(default_factory=Counter)
    reasons: Counter[str] = field(default_factory=Counter)
    verdict_changes: Counter[str] = field(default_factory=Counter)
    changed_runs: list[VerdictChange] = field(default_factory=list)
    failure_reasons: Counter[str] = field(default_factory=Counter)
    failures: list[FileProblem] = field(default_factory=list)
    lost: list[FileProblem] = field(default_factory=list)
    would_analyse: list[str] = field(default_factory=list)

    @property
    def done(self) -> int:
        return self.recorded + self.skipped + self.unchanged + self.not_recorded + self.planned

    def progress(self) -> Progress:
        return Progress(self.done, self.total, self.analysed, self.skipped + self.unchanged,
                        self.failed + self.not_recorded, time.monotonic() - self.started)

    def note_reason(self, reason: str) -> None:
        self.reasons[reason] += 1

    def note_failure(self, path: str, reason: str, run_id: int | None) -> None:
        self.failed += 1
        kind = reason if reason in self.failure_reasons or len(self.failure_reasons) < REASON_KINDS else "other reasons"
        self.failure_reasons[kind] += 1
        if len(self.failures) < EXAMPLES:
            self.failures.append(FileProblem(path, reason, run_id))

    def note_lost(self, path: str, reason: str) -> None:
        self.not_recorded += 1
        if len(self.lost) < EXAMPLES:
            self.lost.append(FileProblem(path, reason))

    def note_recorded(self, path: str, status: str, verdict: str | None, run_id: int,
                      previous: tuple[int, str, str | None] | None) -> None:
        """A new version recorded; `previous` is (run id, status, verdict) of the version before."""
        self.recorded += 1
        new = outcome_label(status, verdict)
        self.by_outcome[new] += 1
        if previous is None:
            return
        old = outcome_label(previous[1], previous[2])
        if old != new:
            self.verdict_changes[f"{old} -> {new}"] += 1
            if len(self.changed_runs) < EXAMPLES:
                self.changed_runs.append(VerdictChange(path, previous[0], run_id, old, new))

    def finish(self, *, interrupted: bool, stopped: str | None, shifts: list[QuantityShift]) -> ReprocessSummary:
        return ReprocessSummary(
            mode=self.mode, provenance=self.provenance, total=self.total, selected=self.selected,
            analysed=self.analysed, recorded=self.recorded, skipped=self.skipped, unchanged=self.unchanged,
            failed=self.failed, not_recorded=self.not_recorded, by_outcome=dict(self.by_outcome),
            reasons=dict(self.reasons), verdict_changes=dict(self.verdict_changes), changed_runs=tuple(self.changed_runs),
            failure_reasons=dict(self.failure_reasons), failures=tuple(self.failures), lost=tuple(self.lost),
            would_analyse=tuple(self.would_analyse), quantity_shifts=tuple(shifts), interrupted=interrupted,
            stopped=stopped, seconds=time.monotonic() - self.started,
        )


@dataclass(frozen=True)
class ReprocessSummary:
    """The end of a reprocess, for people (`tui.commands.reprocess`) and scripts (`to_dict`)."""

    mode: str  # "local" | "cluster" | "dry-run"
    provenance: Provenance
    total: int | None
    selected: int
    analysed: int
    recorded: int
    skipped: int
    unchanged: int
    failed: int
    not_recorded: int
    by_outcome: dict[str, int]
    reasons: dict[str, int]
    verdict_changes: dict[str, int]
    changed_runs: tuple[VerdictChange, ...]
    failure_reasons: dict[str, int]
    failures: tuple[FileProblem, ...]
    lost: tuple[FileProblem, ...]
    would_analyse: tuple[str, ...]
    quantity_shifts: tuple[QuantityShift, ...]
    interrupted: bool
    stopped: str | None
    seconds: float

    @property
    def complete(self) -> bool:
        """Every selected file was recorded or skipped, none failed."""
        return not (self.interrupted or self.stopped or self.failed or self.not_recorded)

    def to_dict(self) -> dict[str, Any]:
        return {
            "mode": self.mode,
            **self.provenance.to_dict(),
            "total": self.total,
            "selected": self.selected,
            "analysed": self.analysed,
            "recorded": self.recorded,
            "skipped": self.skipped,
            "unchanged": self.unchanged,
            "failed": self.failed,
            "not_recorded": self.not_recorded,
            "by_verdict": self.by_outcome,
            "why_analysed": self.reasons,
            "verdict_changes": self.verdict_changes,
            "changed_runs": [
                {"path": c.path, "old_run_id": c.old_run_id, "new_run_id": c.new_run_id, "old": c.old, "new": c.new}
                for c in self.changed_runs
            ],
            "failure_reasons": self.failure_reasons,
            "failures": [{"path": f.path, "reason": f.reason, "run_id": f.run_id} for f in self.failures],
            "not_recorded_files": [{"path": f.path, "reason": f.reason} for f in self.lost],
            "would_analyse": list(self.would_analyse),
            "what_changed": [shift.to_dict() for shift in self.quantity_shifts],
            "interrupted": self.interrupted,
            "stopped": self.stopped,
            "seconds": round(self.seconds, 3),
            "examples_limit": EXAMPLES,
        }
