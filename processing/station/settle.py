"""Decide when a file is finished being written: stable size and time stamp, complete content.

A file is settled when its size and modification time have not changed for `settle_seconds`
and it reads completely: a JCAMP-DX file must carry one ##END= per ##TITLE= (the exporter
may still be writing otherwise). A file that stays incomplete past `max_wait_seconds` is given
up as incomplete. A file deleted before it settles is reported as vanished and forgotten.
Files are opened read-only and only read.
"""
from __future__ import annotations

import hashlib
import os
import re
import time
from collections.abc import Callable
from dataclasses import dataclass

READ_CHUNK = 1024 * 1024
_JCAMP_TITLE = re.compile(rb"^[ \t]*##[ \t]*TITLE[ \t]*=", re.IGNORECASE | re.MULTILINE)
_JCAMP_END = re.compile(rb"^[ \t]*##[ \t]*END[ \t]*=", re.IGNORECASE | re.MULTILINE)


@dataclass(frozen=True)
class SettledFile:
    """Ready to analyse; `sha256` is None when the file could not be read here."""

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


@dataclass(frozen=True)
class VanishedFile:
    path: str


SettleOutcome = SettledFile | IncompleteFile | VanishedFile


def incomplete_reason(data: bytes) -> str | None:
    """Why the content looks still being written, or None when it looks complete."""
    head = data.lstrip(b"\xef\xbb\xbf \t\r\n")[:2]
    if head != b"##":
        return None
    titles = len(_JCAMP_TITLE.findall(data))
    ends = len(_JCAMP_END.findall(data))
    if ends == 0:
        return "JCAMP-DX file has no ##END= (still being written?)"
    if ends < titles:
        return f"JCAMP-DX file has {titles} ##TITLE= blocks but only {ends} ##END= (still being written?)"
    return None


def read_and_hash(path: str, max_bytes: int) -> tuple[bytes, str]:
    """The file's bytes (up to max_bytes + 1) and their sha256, opened read-only."""
    digest = hashlib.sha256()
    chunks: list[bytes] = []
    total = 0
    with open(path, "rb") as handle:
        while total <= max_bytes:
            chunk = handle.read(READ_CHUNK)
            if not chunk:
                break
            digest.update(chunk)
            chunks.append(chunk)
            total += len(chunk)
    return b"".join(chunks), digest.hexdigest()


@dataclass
class _Pending:
    size: int
    mtime_ns: int
    stable_since: float
    first_seen: float
    incomplete_stat: tuple[int, int] | None = None  # stat when found incomplete (no re-read)
    incomplete_sha: str | None = None
    incomplete_why: str | None = None


class Settler:
    """Tracks files that changed until they settle; single-threaded (the station loop)."""

    def __init__(
        self,
        settle_seconds: float,
        max_wait_seconds: float,
        max_bytes: int,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.settle_seconds = settle_seconds
        self.max_wait_seconds = max_wait_seconds
        self.max_bytes = max_bytes
        self.clock = clock
        self.pending: dict[str, _Pending] = {}
        self.known: dict[str, tuple[int, int]] = {}  # path -> (size, mtime_ns) last settled

    def touch(self, path: str, stat: os.stat_result | None = None) -> bool:
        """Note that `path` may have changed; True when it is new or changed (now pending)."""
        if stat is None:
            try:
                stat = os.stat(path)
            except OSError:
                if path in self.pending:
                    return True  # the next tick reports it vanished
                self.known.pop(path, None)
                return False
        key = (stat.st_size, stat.st_mtime_ns)
        if path in self.pending:
            return True
        if self.known.get(path) == key:
            return False
        now = self.clock()
        self.pending[path] = _Pending(stat.st_size, stat.st_mtime_ns, now, now)
        return True

    def tick(self, hold: Callable[[str], bool] = lambda path: False) -> list[SettleOutcome]:
        """Check every pending file once; returns those that settled, vanished or gave up."""
        now = self.clock()
        outcomes: list[SettleOutcome] = []
        for path in list(self.pending):
            state = self.pending[path]
            try:
                stat = os.stat(path)
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
            outcome = self._examine(path, state, now)
            if outcome is not None:
                del self.pending[path]
                self.known[path] = (state.size, state.mtime_ns)
                outcomes.append(outcome)
        return outcomes

    def _examine(self, path: str, state: _Pending, now: float) -> SettledFile | IncompleteFile | None:
        key = (state.size, state.mtime_ns)
        if state.incomplete_stat == key:
            why = state.incomplete_why
        else:
            try:
                data, sha = read_and_hash(path, self.max_bytes)
            except OSError as error:
                return SettledFile(path, None, state.size, state.mtime_ns, error.strerror or str(error))
            try:
                after = os.stat(path)
            except OSError:
                return None  # vanished while reading: the next tick says so
            if (after.st_size, after.st_mtime_ns) != key or len(data) != state.size and len(data) <= self.max_bytes:
                state.size, state.mtime_ns, state.stable_since = after.st_size, after.st_mtime_ns, now
                return None  # written to while we read: wait again
            why = incomplete_reason(data)
            if why is None:
                return SettledFile(path, sha, state.size, state.mtime_ns)
            state.incomplete_stat, state.incomplete_sha, state.incomplete_why = key, sha, why
        if now - state.first_seen >= self.max_wait_seconds:
            return IncompleteFile(
                path, state.incomplete_sha, f"{why}; gave up after {self.max_wait_seconds:g} s"
            )
        return None
