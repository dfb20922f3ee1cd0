"""What was recorded elsewhere: the ledger's change journal, followed from now on.

    feed = ChangeFeed(where)          # a data folder or a postgresql:// URL
    run_ids = feed.wait(1.0)          # runs whose decision or versions changed (maybe [])
    feed.close()

Every poll is `ledger.changes_after(cursor)`. On a server the feed also LISTENs to the change
channel, so a decision made at another desk wakes it at once instead of at the next poll; on
the SQLite file it polls every `poll_seconds`. Either way a change shows within one poll.
"""
from __future__ import annotations

import time
from pathlib import Path

from processing.station import ledger
from processing.station.ledger_postgres import ChangeListener, is_server_url

POLL_SECONDS = 0.5


class ChangeFeed:
    """Follows one ledger's changes from the moment it is made; one thread uses it."""

    def __init__(self, where: str | Path, *, poll_seconds: float = POLL_SECONDS) -> None:
        self.where = where
        self.poll_seconds = poll_seconds
        self.conn = ledger.open_ledger(where, read_only=True)
        self.listener: ChangeListener | None = ChangeListener(str(where)) if is_server_url(where) else None
        self.cursor = ledger.change_cursor(self.conn)

    def poll(self) -> list[int]:
        """Run ids changed since the last poll (at once, no waiting)."""
        self.cursor, run_ids = ledger.changes_after(self.conn, self.cursor)
        return run_ids

    def wait(self, timeout: float) -> list[int]:
        """Run ids changed since the last call, waiting up to `timeout` seconds for one."""
        deadline = time.monotonic() + timeout
        while True:
            changed = self.poll()
            remaining = deadline - time.monotonic()
            if changed or remaining <= 0:
                return changed
            pause = min(self.poll_seconds, remaining)
            if self.listener is not None:
                self.listener.wait(pause)  # returns early when a change is announced
            else:
                time.sleep(pause)

    def close(self) -> None:
        if self.listener is not None:
            self.listener.close()
        self.conn.close()

    def __enter__(self) -> ChangeFeed:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
