"""The ledger's errors, shared by both backends (one line each, with what to do)."""
from __future__ import annotations

from processing.errors import BandwatchError


class LedgerError(BandwatchError):
    """A ledger that cannot be used as it stands (e.g. written by a newer bandwatch)."""


class LedgerUnavailable(LedgerError):
    """The ledger server cannot be reached now (down, restarting, network): try again later.
    A station keeps its outcomes in its local spool meanwhile."""


class LedgerRefused(LedgerError):
    """The ledger refused the action for good: this database role may not do it, or a rule
    of the ledger forbids it (decisions are append-only)."""
