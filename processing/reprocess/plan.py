"""Whether a file needs today's analysis, and with which settings.

A file is skipped when its newest version in the ledger (on its instrument) was made with today's analysis
version, library and settings, did not fail, and the file's size and time stamp are those that
version recorded. Anything else is analysed again, with the reason kept for the summary.
A version made by an operator's redo (species changed, lines left out, ...) keeps that request:
it is applied to today's settings, so a reprocess never drops an operator's correction.
"""
from __future__ import annotations

import json
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import Any

from processing.pipeline import ProcessSettings
from processing.provenance import Provenance, current_provenance
from processing.reprocess.selection import Candidate
from processing.station.ledger import LatestVersion
from processing.station.redo import RedoRequest, redo_settings

NEW = "new"
NO_VERSIONS = "recorded before versions were kept"
ANALYSIS_CHANGED = "analysis version changed"
LIBRARY_CHANGED = "library changed"
SETTINGS_CHANGED = "settings changed"
FAILED_BEFORE = "failed before"
FILE_CHANGED = "file changed or not known unchanged"


@dataclass(frozen=True)
class Task:
    """One file to analyse: what it was, why again, and with what."""

    seq: int
    candidate: Candidate
    previous: LatestVersion | None
    reason: str
    settings: ProcessSettings
    provenance: Provenance
    request: dict[str, Any] | None  # an operator's redo request carried over, else None

    @property
    def path(self) -> str:
        return self.candidate.path

    @property
    def key(self) -> tuple[str, str]:
        """(instrument, path): the file as the ledger keys it."""
        return (self.candidate.instrument, self.candidate.path)


def why_analyse(candidate: Candidate, latest: LatestVersion | None, provenance: Provenance) -> str | None:
    """The reason to analyse `candidate` again, or None to skip it."""
    if latest is None:
        return NEW
    made_with = latest.provenance
    if made_with is None:
        return NO_VERSIONS
    if made_with.analysis_version != provenance.analysis_version:
        return ANALYSIS_CHANGED
    if made_with.library_hash != provenance.library_hash:
        return LIBRARY_CHANGED
    if made_with.settings_hash != provenance.settings_hash:
        return SETTINGS_CHANGED
    if latest.status == "failed":
        return FAILED_BEFORE
    known = candidate.size_bytes is not None and latest.size_bytes is not None
    if not known or (candidate.size_bytes, candidate.mtime_ns) != (latest.size_bytes, latest.mtime_ns):
        return FILE_CHANGED
    return None


class Planner:
    """Turns candidates into tasks and skips, a chunk at a time (one ledger query per chunk)."""

    def __init__(
        self, settings: ProcessSettings, latest_of: Callable[[str, list[str]], dict[str, LatestVersion]]
    ) -> None:
        """`latest_of(instrument, paths)`: path -> newest version on that instrument, for those
        the ledger holds."""
        self.settings = settings
        self.provenance = current_provenance(settings)
        self._latest_of = latest_of
        self._requested: dict[str, tuple[ProcessSettings, Provenance, dict[str, Any]]] = {}
        self._seq = 0

    def plan(self, chunk: Iterable[Candidate]) -> tuple[list[Task], list[tuple[Candidate, LatestVersion]]]:
        """(tasks to run, skipped files with the version that stands) for one chunk."""
        candidates = list(chunk)
        paths_by_instrument: dict[str, list[str]] = {}
        for candidate in candidates:
            paths_by_instrument.setdefault(candidate.instrument, []).append(candidate.path)
        latest = {
            instrument: self._latest_of(instrument, paths) for instrument, paths in paths_by_instrument.items()
        }
        tasks: list[Task] = []
        skipped: list[tuple[Candidate, LatestVersion]] = []
        for candidate in candidates:
            previous = latest[candidate.instrument].get(candidate.path)
            settings, provenance, request = self._settings_for(previous)
            reason = why_analyse(candidate, previous, provenance)
            if reason is None:
                assert previous is not None
                skipped.append((candidate, previous))
                continue
            self._seq += 1
            tasks.append(Task(self._seq, candidate, previous, reason, settings, provenance, request))
        return tasks, skipped

    def _settings_for(self, previous: LatestVersion | None) -> tuple[ProcessSettings, Provenance, dict[str, Any] | None]:
        if previous is None or previous.request_json is None:
            return self.settings, self.provenance, None
        known = self._requested.get(previous.request_json)
        if known is None:
            request = json.loads(previous.request_json)
            settings = redo_settings(self.settings, RedoRequest.from_dict(request))
            known = (settings, current_provenance(settings), request)
            if len(self._requested) < 256:  # distinct requests are few; bounded all the same
                self._requested[previous.request_json] = known
        return known
