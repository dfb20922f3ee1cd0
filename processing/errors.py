"""Typed errors: every problem a user can cause names the file, the line and the problem."""
from __future__ import annotations

from pathlib import Path

from processing.safe_text import safe_text


class BandwatchError(Exception):
    """Base of every error bandwatch reports to a user as one line."""


class SpectrumFileError(BandwatchError):
    """A spectrum or line-list file that cannot be read as it stands.

    ``str(error)`` is the one-line message: ``path:line: problem`` (line omitted when the
    problem belongs to the whole file).
    """

    def __init__(self, path: str | Path | None, problem: str, line: int | None = None) -> None:
        self.path = str(path) if path is not None else "<data>"
        self.problem = problem
        self.line = line
        where = self.path if line is None else f"{self.path}:{line}"
        super().__init__(safe_text(f"{where}: {problem}"))  # names and header values come from files


class LibraryFileError(BandwatchError):
    """A malformed isotopologue library file (the shipped one or a user's)."""

    def __init__(self, path: str | Path, problem: str) -> None:
        self.path = str(path)
        self.problem = problem
        super().__init__(safe_text(f"{self.path}: {problem}"))


class ConfigError(BandwatchError):
    """A bad value in the station configuration; names the key."""

    def __init__(self, path: str | Path | None, key: str, problem: str) -> None:
        self.path = str(path) if path is not None else "<settings>"
        self.key = key
        self.problem = problem
        super().__init__(safe_text(f"{self.path}: {key}: {problem}"))


class UnknownSpeciesError(BandwatchError):
    """A molecule or isotopologue name the library does not know (one-line message)."""
