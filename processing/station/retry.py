"""Ledger writes that failed for a passing reason, tried again with backoff until they succeed.

A ledger locked by another writer for longer than the busy timeout, or a disk that was full
for a moment, must not lose the files that arrived meanwhile. The station loop keeps such
work in a `RetryQueue` (keyed by file, so a newer version replaces an older one) and tries it
again after 0.5, 1, 2, ... up to 30 s; the recorder thread retries in place with the same
`Backoff`. Problems are reported at the 1st, 2nd, 4th, 8th ... failure, not at every try.
"""
from __future__ import annotations

import sqlite3
import time
from collections.abc import Callable
from dataclasses import dataclass, field

from processing.station.ledger import LedgerError, ledger_problem

FIRST_DELAY_SECONDS = 0.5
LONGEST_DELAY_SECONDS = 30.0
# What a retry can cure: SQLite errors (locked, busy, full, I/O), a ledger that cannot be
# opened right now, and file-system errors (a full disk when writing reports).
LEDGER_TROUBLE: tuple[type[BaseException], ...] = (sqlite3.Error, LedgerError, OSError)


@dataclass
class Backoff:
    """Delays 0.5, 1, 2, ... 30 s; `worth_saying` is True at failures 1, 2, 4, 8, ..."""

    first: float = FIRST_DELAY_SECONDS
    longest: float = LONGEST_DELAY_SECONDS
    failures: int = 0
    delay: float = 0.0

    def failed(self) -> float:
        """Count one more failure; the delay before the next try."""
        self.failures += 1
        self.delay = min(self.longest, self.first * 2 ** (self.failures - 1))
        return self.delay

    @property
    def worth_saying(self) -> bool:
        return self.failures & (self.failures - 1) == 0


def describe(error: BaseException, where: str) -> str:
    """A ledger or disk error as a short phrase for a problem line."""
    if isinstance(error, sqlite3.Error):
        return str(ledger_problem(where, error))
    if isinstance(error, OSError):
        return f"{error.strerror or error}"
    return str(error)


@dataclass
class _Entry:
    what: str
    action: Callable[[], None]
    due: float
    backoff: Backoff = field(default_factory=Backoff)
    first_failure: float = 0.0


class RetryQueue:
    """Work that failed with `LEDGER_TROUBLE`, by key; single-threaded (the station loop)."""

    def __init__(self, clock: Callable[[], float] = time.monotonic) -> None:
        self.clock = clock
        self._entries: dict[str, _Entry] = {}

    def __len__(self) -> int:
        return len(self._entries)

    def __contains__(self, key: str) -> bool:
        return key in self._entries

    def keys(self) -> list[str]:
        return list(self._entries)

    @property
    def oldest_failure(self) -> float | None:
        """When the longest-failing entry first failed (clock seconds), or None."""
        return min((entry.first_failure for entry in self._entries.values()), default=None)

    def attempt(
        self, key: str, what: str, action: Callable[[], None], on_failure: Callable[[str, str, BaseException, Backoff], None]
    ) -> bool:
        """Run `action` now; on LEDGER_TROUBLE keep it (replacing older work for `key`) for a
        later try and call `on_failure(key, what, error, backoff)`. True when it succeeded."""
        try:
            action()
        except LEDGER_TROUBLE as error:
            entry = self._entries.get(key)
            if entry is None:
                entry = _Entry(what, action, 0.0, first_failure=self.clock())
                self._entries[key] = entry
            entry.what, entry.action = what, action
            entry.due = self.clock() + entry.backoff.failed()
            on_failure(key, what, error, entry.backoff)
            return False
        self._entries.pop(key, None)
        return True

    def run_due(self, on_failure: Callable[[str, str, BaseException, Backoff], None]) -> int:
        """Try every entry whose time has come; returns how many succeeded."""
        now = self.clock()
        done = 0
        for key, entry in list(self._entries.items()):
            if entry.due <= now:
                done += self.attempt(key, entry.what, entry.action, on_failure)
        return done
