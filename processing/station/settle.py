"""Decide when a file is finished being written: stable size and time stamp, complete content.

A file is settled when its size and modification time have not changed for `settle_seconds`
and its reader says the bytes are a whole file (`processing.readers.incomplete`: a JCAMP-DX
file carries one ##END= per ##TITLE=, a text file's last line does not look cut off). A file
still incomplete after `max_wait_seconds` is given up as unreadable or taken as it is, as its
reader says (JCAMP-DX: given up; text: taken). The limit: a writer that
pauses longer than `settle_seconds` just after a whole line is indistinguishable from a
finished file (each pause gives a new version of the run); give such writers a longer
settle time.
A file deleted before it settles is reported as vanished and forgotten. Only regular files
inside the export folder are read (`regular_files`); anything else is refused with a reason.
"""
from __future__ import annotations

import hashlib
import os
from stat import S_ISLNK
import time
from collections.abc import Callable
from dataclasses import dataclass

from processing.errors import SpectrumFileError
from processing.readers.registry import ENDS_BYTES, incomplete, looks_whole_by_ends
from processing.regular_files import ReadPolicy, check_place, read_ends, read_regular

@dataclass(frozen=True)
class SettledFile:
    """Ready to analyse; `sha256` is None when not worked out here (a complete file: the worker
    hashes what it analyses) or the file could not be read here."""

    path: str
    sha256: str | None
    size_bytes: int
    mtime_ns: int
    read_problem: str | None = None


@dataclass(frozen=True)
class IncompleteFile:
    """Still incomplete after the longest wait: recorded as unreadable with `reason`."""

    path: str
    sha256: str | None
    reason: str
    size_bytes: int | None = None
    mtime_ns: int | None = None


@dataclass(frozen=True)
class WaitingFile:
    """Found not yet whole (`reason`): the station waits for the rest, at most
    `give_up_after_seconds` from when it was first seen, then takes it as it is or records it
    unreadable (`taken_then`). Said once per wait (the file stays pending)."""

    path: str
    reason: str
    give_up_after_seconds: float
    taken_then: bool


@dataclass(frozen=True)
class RefusedFile:
    """Not read at all (not a regular file, a link out of the export folder, over the size
    limit, unreadable): recorded as unreadable with `reason`, never handed to a worker."""

    path: str
    reason: str
    size_bytes: int | None = None
    mtime_ns: int | None = None


@dataclass(frozen=True)
class VanishedFile:
    path: str


SettleOutcome = SettledFile | IncompleteFile | RefusedFile | VanishedFile | WaitingFile


@dataclass
class _Pending:
    size: int
    mtime_ns: int
    stable_since: float
    first_seen: float
    incomplete_stat: tuple[int, int] | None = None  # stat when found incomplete (no re-read)
    incomplete_sha: str | None = None
    incomplete_why: str | None = None
    take_when_waited_out: bool = False


class Settler:
    """Tracks files that changed until they settle; single-threaded (the station loop)."""

    def __init__(
        self,
        settle_seconds: float,
        max_wait_seconds: float,
        max_bytes: int,
        clock: Callable[[], float] = time.monotonic,
        policy: ReadPolicy | None = None,
    ) -> None:
        self.policy = policy or ReadPolicy()
        self.settle_seconds = settle_seconds
        self.max_wait_seconds = max_wait_seconds
        self.max_bytes = max_bytes
        self.clock = clock
        self.pending: dict[str, _Pending] = {}
        self.known: dict[str, tuple[int, int]] = {}  # path -> (size, mtime_ns) last settled
        self._linked_folders: dict[str, bool] = {}

    def touch(self, path: str, stat: os.stat_result | None = None) -> bool:
        """Note that `path` may have changed; True when it is new or changed (now pending)."""
        try:
            stat = self.change_stat(path, stat)
        except OSError:
            if path in self.pending:
                return True  # the next tick reports it vanished
            self.known.pop(path, None)
            return False
        key = (stat.st_size, stat.st_mtime_ns)
        state = self.pending.get(path)
        if state is not None:
            if key != (state.size, state.mtime_ns):  # written again (a close event): the wait starts again
                state.size, state.mtime_ns, state.stable_since = stat.st_size, stat.st_mtime_ns, self.clock()
            return True
        if self.known.get(path) == key:
            return False
        now = self.clock()
        self.pending[path] = _Pending(stat.st_size, stat.st_mtime_ns, now, now)
        return True

    def change_stat(self, path: str, found: os.stat_result | None = None) -> os.stat_result:
        """The stat whose size and time stamp say whether `path` changed: the file's own, but
        for a link bandwatch will not follow, the link's (so a link onto a file that changes
        all the time, such as the ledger, is refused once, not again at every change)."""
        own = os.lstat(path)  # one system call for a plain file in a plain folder (the usual case)
        if S_ISLNK(own.st_mode) or self._folder_is_linked(os.path.dirname(path)):
            try:
                check_place(path, self.policy)
            except SpectrumFileError:
                return own
            return found if found is not None else os.stat(path)
        return found if found is not None else own

    def _folder_is_linked(self, folder: str) -> bool:
        """Whether a folder's path goes through a link (resolved once per folder: a folder
        swapped for a link later is still refused when its files are opened)."""
        linked = self._linked_folders.get(folder)
        if linked is None:
            linked = os.path.realpath(folder) != os.path.abspath(folder)
            self._linked_folders[folder] = linked
        return linked

    def next_due(self) -> float | None:
        """The clock time at which the next pending file will have been still for the settle
        time (None with nothing pending)."""
        if not self.pending:
            return None
        return min(state.stable_since for state in self.pending.values()) + self.settle_seconds

    def tick(self, hold: Callable[[str], bool] = lambda path: False, due: float | None = None) -> list[SettleOutcome]:
        """Check every pending file that has been still for the settle time (by its last seen size
        and time stamp); returns those that settled, vanished or gave up. `due`: `next_due()` as
        the caller found it since the last tick (touches since can only make it later), so that
        it is not worked out again."""
        now = self.clock()
        outcomes: list[SettleOutcome] = []
        if due is None:
            due = self.next_due()
        if due is None or now < due:
            return outcomes  # none has been still for the settle time (most ticks in a burst)
        for path in list(self.pending):
            state = self.pending[path]
            if now - state.stable_since < self.settle_seconds:
                continue  # not due yet: looked at when it is (a change since then restarts the wait)
            try:
                stat = self.change_stat(path)
            except FileNotFoundError:
                del self.pending[path]
                self.known.pop(path, None)
                outcomes.append(VanishedFile(path))
                continue
            except OSError:
                stat = None
            if stat is not None and (stat.st_size, stat.st_mtime_ns) != (state.size, state.mtime_ns):
                state.size, state.mtime_ns, state.stable_since = stat.st_size, stat.st_mtime_ns, now
                continue
            if now - state.stable_since < self.settle_seconds or hold(path):
                continue
            said = state.incomplete_why
            outcome = self._examine(path, state, now)
            if outcome is None and state.incomplete_why is not None and state.incomplete_why != said:
                outcomes.append(WaitingFile(path, state.incomplete_why, self.max_wait_seconds, state.take_when_waited_out))
            if outcome is not None:
                del self.pending[path]
                self.known[path] = (state.size, state.mtime_ns)
                outcomes.append(outcome)
        return outcomes

    def _read_ends(self, path: str, state: _Pending, now: float) -> tuple[bytes, bytes, int] | RefusedFile | None:
        """The file's first and last ENDS_BYTES and its size (`_unchanged`)."""
        try:
            head, tail, size = read_ends(path, self.max_bytes, ENDS_BYTES, self.policy)
        except SpectrumFileError as error:
            return self._refused(path, state, error)
        return (head, tail, size) if self._unchanged(path, state, now, size) else None

    def _read_whole(self, path: str, state: _Pending, now: float) -> bytes | RefusedFile | None:
        """The file's bytes when unchanged since its stat; RefusedFile when it may not be read;
        None when it vanished or was written to meanwhile (its wait starts again)."""
        try:
            data = read_regular(path, self.max_bytes, self.policy)
        except SpectrumFileError as error:
            return self._refused(path, state, error)
        return data if self._unchanged(path, state, now, len(data)) else None

    @staticmethod
    def _refused(path: str, state: _Pending, error: SpectrumFileError) -> RefusedFile | None:
        if error.problem == "no such file":
            return None  # vanished while opening: the next tick says so
        return RefusedFile(path, str(error), state.size, state.mtime_ns)

    def _unchanged(self, path: str, state: _Pending, now: float, size_read: int) -> bool:
        """Whether the file is as its stat said while it was read; if not, its wait starts again."""
        try:
            after = self.change_stat(path)
        except OSError:
            return False  # vanished while reading: the next tick says so
        if (after.st_size, after.st_mtime_ns) != (state.size, state.mtime_ns) or size_read != state.size:
            state.size, state.mtime_ns, state.stable_since = after.st_size, after.st_mtime_ns, now
            return False  # written to while we read: wait again
        return True

    def _examine(self, path: str, state: _Pending, now: float) -> SettleOutcome | None:
        key = (state.size, state.mtime_ns)
        if state.incomplete_stat == key:
            why = state.incomplete_why
        else:
            # a file whose format tells by its ends (text) is read no further than them; the
            # whole file only when they say cut off, or its format counts blocks (JCAMP-DX)
            ends = self._read_ends(path, state, now)
            if not isinstance(ends, tuple):
                return ends
            if looks_whole_by_ends(*ends):
                return SettledFile(path, None, state.size, state.mtime_ns)
            data = self._read_whole(path, state, now)
            if not isinstance(data, bytes):
                return data
            found = incomplete(data)
            if found is None:
                # not hashed here: the worker hashes the bytes it analyses, and the station a
                # file it has seen before (is it the same content?)
                return SettledFile(path, None, state.size, state.mtime_ns)
            sha = hashlib.sha256(data).hexdigest()
            why = found.reason
            state.incomplete_stat, state.incomplete_sha, state.incomplete_why = key, sha, why
            state.take_when_waited_out = found.take_when_waited_out
        if now - state.first_seen >= self.max_wait_seconds:
            if state.take_when_waited_out:
                return SettledFile(path, state.incomplete_sha, state.size, state.mtime_ns)
            return IncompleteFile(
                path, state.incomplete_sha, f"{why}; gave up after {self.max_wait_seconds:g} s", state.size, state.mtime_ns
            )
        return None
