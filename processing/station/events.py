"""Small event dataclasses the station emits; `--plain` prints them, the app posts them.

Every event has `at` (UTC ISO time) and `plain()` -> one log line without the time stamp.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from processing.local_time import local_iso
from processing.safe_text import safe_text
from processing.station.ledger import now_iso


def _name(path: str) -> str:
    return Path(path).name


@dataclass(frozen=True)
class StationEvent:
    """Base of every station event."""

    at: str = field(default_factory=now_iso, kw_only=True)

    def plain(self) -> str:
        return type(self).__name__


@dataclass(frozen=True)
class StationStarted(StationEvent):
    export_folder: str
    data_folder: str
    observer: str  # "native" | "polling"
    workers: int

    def plain(self) -> str:
        return (
            f"started watching {self.export_folder} ({self.observer} events, {self.workers} workers)"
            f" data={self.data_folder}"
        )


@dataclass(frozen=True)
class StationStopped(StationEvent):
    def plain(self) -> str:
        return "stopped"


@dataclass(frozen=True)
class CatchUpFound(StationEvent):
    """Files already in the folder at start that the ledger has not seen."""

    count: int

    def plain(self) -> str:
        return f"catch-up {self.count} file(s) not yet in the ledger"


@dataclass(frozen=True)
class ClaimResumed(StationEvent):
    """A file left in progress by a station that stopped abruptly; it is redone."""

    path: str

    def plain(self) -> str:
        return f"resumed {_name(self.path)} (left in progress by an earlier station)"


@dataclass(frozen=True)
class FileSeen(StationEvent):
    path: str

    def plain(self) -> str:
        return f"seen {_name(self.path)}"


@dataclass(frozen=True)
class FileVanished(StationEvent):
    """A file deleted before it settled; nothing is recorded for it."""

    path: str

    def plain(self) -> str:
        return f"vanished {_name(self.path)} (deleted before it settled; not recorded)"


@dataclass(frozen=True)
class FileSettled(StationEvent):
    path: str
    sha256: str | None
    size_bytes: int

    def plain(self) -> str:
        return f"settled {_name(self.path)} {self.size_bytes} bytes"


@dataclass(frozen=True)
class FileWaiting(StationEvent):
    """A file that is not yet whole (no ##END= yet, a cut-off last line): the station waits
    for the rest, at most `give_up_after_seconds`."""

    path: str
    reason: str
    give_up_after_seconds: float
    taken_then: bool = False

    def plain(self) -> str:
        then = "taken as it is" if self.taken_then else "recorded unreadable"
        return (f"waiting for {_name(self.path)} to finish ({self.reason}); "
                f"{then} after {self.give_up_after_seconds:g} s")


@dataclass(frozen=True)
class FileUnchanged(StationEvent):
    """A settled file the ledger already holds with the same content."""

    path: str
    run_id: int

    def plain(self) -> str:
        return f"unchanged {_name(self.path)} (run {self.run_id})"


@dataclass(frozen=True)
class RunProcessed(StationEvent):
    """A run recorded with status "processed" or "unreadable"."""

    run_id: int
    version: int
    path: str
    status: str
    verdict: str | None
    species: tuple[str, ...]
    error: str | None = None
    report_folder: str | None = None
    reasons: tuple[str, ...] = ()  # the verdict's main reasons (`result_text.main_reasons`)

    def plain(self) -> str:
        if self.status == "processed":
            species = ",".join(self.species) or "-"
            reasons = f" reasons={' · '.join(self.reasons)}" if self.reasons else ""
            return (
                f"processed run {self.run_id} v{self.version} {_name(self.path)}"
                f" verdict={self.verdict or '-'} species={species}{reasons}"
            )
        return f"{self.status} run {self.run_id} v{self.version} {_name(self.path)} error={self.error}"


@dataclass(frozen=True)
class RunFailed(StationEvent):
    """A run recorded as "failed": the worker crashed, hung or ran out of memory."""

    run_id: int
    version: int
    path: str
    reason: str

    def plain(self) -> str:
        return f"failed run {self.run_id} v{self.version} {_name(self.path)} reason={self.reason}"


@dataclass(frozen=True)
class StationProblem(StationEvent):
    """Something went wrong in the station itself (it carries on); `paths` are the files it
    concerns (their runs are not recorded yet)."""

    message: str
    paths: tuple[str, ...] = ()

    def plain(self) -> str:
        return f"problem {self.message}"


@dataclass(frozen=True)
class RunSpooled(StationEvent):
    """An outcome kept in the local spool because the ledger server is unreachable; it is
    recorded (and announced as processed or failed) when the server answers again."""

    path: str
    status: str
    waiting: int  # outcomes in the spool, this one included

    def plain(self) -> str:
        return f"spooled {_name(self.path)} status={self.status} (ledger offline; {self.waiting} waiting)"


@dataclass(frozen=True)
class LedgerOffline(StationEvent):
    """The ledger server cannot be reached: the station goes on, keeping outcomes in its spool."""

    ledger: str  # the server, without a password
    reason: str

    def plain(self) -> str:
        return f"ledger offline: {self.reason}; the station goes on and keeps outcomes in its local spool"


@dataclass(frozen=True)
class LedgerOnline(StationEvent):
    """The ledger server answers again; the spooled outcomes have been recorded."""

    ledger: str
    replayed: int

    def plain(self) -> str:
        return f"ledger online: {self.ledger} ({self.replayed} spooled outcome(s) recorded)"


def plain_line(event: StationEvent) -> str:
    """`2026-12-02T15:03:11+01:00 processed run 12 v1 sample.csv verdict=pass species=H35Cl`:
    the local time (TZ honoured) with its offset from UTC; one line whatever a file name holds
    (control characters escaped, see `safe_text`)."""
    return f"{local_iso(event.at)} {safe_text(event.plain())}"
