"""Which files a reprocess takes: folders, globs and files named, or runs already in the ledger.

Everything is streamed: a folder is walked one entry at a time (`FileFilter.scan`), a glob's
folders are found with `glob.iglob` and each is walked the same way, the ledger is read a page
of paths at a time. Nothing holds the whole list, so an archive of a million files costs the
memory of one page. Paths are absolute with resolved folders (file names kept as they are),
as the station records them, so a reprocessed file is the same run as the station's. Each
candidate names its instrument (runs are keyed by instrument + path): files named on the
command line are this station's instrument's, runs found in the ledger keep their own.
"""
from __future__ import annotations

import fnmatch
import glob
import os
import re
import threading
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import date, datetime, timedelta, timezone
from pathlib import Path

from processing.errors import BandwatchError
from processing.station import ledger
from processing.station.watcher import FileFilter

LEDGER_PAGE = 1000


class SelectionError(BandwatchError):
    """A path, glob or ledger query that cannot select anything as given."""


@dataclass(frozen=True)
class Candidate:
    """A file to consider: its path, when the file could be looked at its size and time stamp,
    and the instrument whose file it is."""

    path: str
    size_bytes: int | None = None
    mtime_ns: int | None = None
    instrument: str = ""


@dataclass(frozen=True)
class PathSelection:
    """Files named on the command line: folders (walked with subfolders), globs, files."""

    arguments: tuple[str, ...]
    include: tuple[str, ...] = ("*",)
    exclude: tuple[str, ...] = ()
    instrument: str = ""  # the instrument these files are recorded under

    def check(self) -> None:
        """One clear error for an argument that names nothing (before any work starts)."""
        for argument in self.arguments:
            if glob.has_magic(argument):
                continue
            if not os.path.lexists(argument):
                raise SelectionError(f"{argument}: no such file or folder")

    def candidates(self) -> Iterator[Candidate]:
        for argument in self.arguments:
            if glob.has_magic(argument):
                yield from self._glob(argument)
            elif os.path.isdir(argument):
                yield from self._walk(Path(argument).resolve(), recursive=True, include=self.include)
            else:
                yield _file_candidate(argument, self.instrument)

    def count(self, done: threading.Event | None = None) -> int:
        """How many files `candidates` gives; when `done` is set meanwhile, the count so far."""
        total = 0
        for _ in self.candidates():
            total += 1
            if done is not None and done.is_set():
                break
        return total

    def _walk(self, root: Path, recursive: bool, include: tuple[str, ...]) -> Iterator[Candidate]:
        walker = FileFilter(root=root, include=include, exclude=self.exclude, recursive=recursive)
        for path, found in walker.scan():
            yield Candidate(path, found.st_size, found.st_mtime_ns, self.instrument)

    def _glob(self, pattern: str) -> Iterator[Candidate]:
        """A glob: its folder part through `glob.iglob` (folders only, `**` for any depth), its
        last part matched while each folder is walked; `**` as the last part takes every file
        below. The configuration's include patterns apply as well."""
        folder_part, name_part = os.path.split(pattern)
        folder_part = folder_part or "."
        folders = glob.iglob(folder_part, recursive=True) if glob.has_magic(folder_part) else iter([folder_part])
        recursive = name_part == "**"
        for folder in folders:
            if not os.path.isdir(folder):
                continue
            for candidate in self._walk(Path(folder).resolve(), recursive, ("*",) if recursive else (name_part,)):
                name = os.path.basename(candidate.path)
                if any(fnmatch.fnmatch(name, included) for included in self.include):
                    yield candidate


def _file_candidate(argument: str, instrument: str) -> Candidate:
    """A file named as such: its folder resolved, its own name kept (a link stays a link, and
    the analysis then reads it under the read rules)."""
    path = str(Path(argument).parent.resolve() / Path(argument).name)
    try:
        found = os.stat(path)
    except OSError:
        return Candidate(path, instrument=instrument)
    return Candidate(path, found.st_size, found.st_mtime_ns, instrument)


@dataclass(frozen=True)
class LedgerSelection:
    """The files of runs already in the ledger that match a query (their newest versions), each
    on the instrument that recorded it."""

    query: ledger.RunQuery

    def candidates(self, conn: ledger.Connection) -> Iterator[Candidate]:
        after: ledger.LatestVersion | None = None
        while True:
            page = ledger.latest_matching(conn, self.query, after, LEDGER_PAGE)
            if not page:
                return
            for latest in page:
                try:
                    found = os.stat(latest.path)
                except OSError:  # gone or unreachable: the analysis says which
                    yield Candidate(latest.path, instrument=latest.instrument)
                    continue
                yield Candidate(latest.path, found.st_size, found.st_mtime_ns, latest.instrument)
            after = page[-1]

    def count(self, conn: ledger.Connection) -> int:
        return ledger.count_matching(conn, self.query)


QUERY_KEYS = ("all", "from", "to", "verdict", "status", "path", "species", "instrument")
_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


def parse_query(text: str) -> ledger.RunQuery:
    """`--ledger-runs` text as a query: terms KEY=VALUE separated by commas or spaces, all of
    which must hold; alternatives within a term by `|`.

        all                         every file the ledger holds
        from=2024-01-01 to=2024-06-30   received in that range (UTC, both days included)
        verdict=fail|warn  status=failed  path=/data/ftir-2/*  species=HCl|DCl  instrument=NAME
    """
    terms = [term for term in re.split(r"[,\s]+", text.strip()) if term]
    if not terms:
        raise SelectionError("--ledger-runs: empty query (say `all` for every file in the ledger)")
    values: dict[str, str] = {}
    for term in terms:
        if term == "all":
            continue
        key, equals, value = term.partition("=")
        if not equals or key not in QUERY_KEYS or not value:
            raise SelectionError(f"--ledger-runs: {term!r} is not KEY=VALUE with a key among {', '.join(QUERY_KEYS)}")
        if key in values:
            raise SelectionError(f"--ledger-runs: {key} given twice (alternatives go in one term: {key}=a|b)")
        values[key] = value
    return ledger.RunQuery(
        received_from=_moment(values["from"], "from") if "from" in values else None,
        received_before=_moment(values["to"], "to", end_of_day=True) if "to" in values else None,
        verdicts=_alternatives(values.get("verdict"), ("pass", "warn", "fail"), "verdict"),
        statuses=_alternatives(values.get("status"), ledger.RUN_STATUSES, "status"),
        path_glob=values.get("path"),
        species=_isotopologues(values["species"]) if "species" in values else (),
        instrument=values.get("instrument"),
    )


def _alternatives(value: str | None, allowed: tuple[str, ...], key: str) -> tuple[str, ...]:
    if value is None:
        return ()
    chosen = tuple(part for part in value.split("|") if part)
    for part in chosen:
        if part not in allowed:
            raise SelectionError(f"--ledger-runs: {key}={part} is not one of {', '.join(allowed)}")
    return chosen


def _moment(value: str, key: str, end_of_day: bool = False) -> str:
    """A date (YYYY-MM-DD, UTC) or a time (ISO 8601) as the ledger's time text; `to=` a date
    means up to the end of that day."""
    try:
        if _DATE.match(value):
            day = date.fromisoformat(value)
            if end_of_day:
                day += timedelta(days=1)
            return day.isoformat()
        moment = datetime.fromisoformat(value.replace("Z", "+00:00"))
    except ValueError:
        raise SelectionError(f"--ledger-runs: {key}={value} is not a date (YYYY-MM-DD) or time (YYYY-MM-DDTHH:MM)") from None
    if moment.tzinfo is not None:
        moment = moment.astimezone(timezone.utc).replace(tzinfo=None)
    return moment.isoformat(timespec="milliseconds") + "Z"


def _isotopologues(value: str) -> tuple[str, ...]:
    """Molecule names (HCl) or isotopologue labels (H35Cl) as the isotopologue labels a run's
    species hold, through the library."""
    from processing.errors import UnknownSpeciesError
    from processing.species import load_library

    names = tuple(part for part in value.split("|") if part)
    try:
        resolved = load_library().resolve(names)
    except UnknownSpeciesError as error:
        raise SelectionError(f"--ledger-runs: species: {error}") from None
    return tuple(item.label for item in resolved)
