"""Which files to take, and the file-system observer that reports them.

The observer only says "something happened to this path"; what to do is decided by
`settle.Settler` from the file's own size and time stamp. Native events are used unless the
folder is on a network file system (where they do not arrive) or polling is asked for: for one
folder from inotify on one thread (`folder_events`), for a folder tree from watchdog's native
observer; a periodic rescan (in the station) catches anything events missed.
"""
from __future__ import annotations

import fnmatch
import functools
import os
import re
import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

from watchdog.events import (
    DirCreatedEvent,
    DirDeletedEvent,
    DirMovedEvent,
    FileClosedEvent,
    FileCreatedEvent,
    FileDeletedEvent,
    FileMovedEvent,
    FileSystemEvent,
    FileSystemEventHandler,
)
from watchdog.observers import Observer
from watchdog.observers.api import BaseObserver
from watchdog.observers.polling import PollingObserver

from processing.station.folder_events import FolderEvents

NETWORK_FS_TYPES = frozenset(
    {"nfs", "nfs4", "cifs", "smb", "smb2", "smb3", "smbfs", "ncpfs", "afs", "9p", "fuse.sshfs",
     "sshfs", "fuse", "fuse.rclone", "fuse.gvfsd-fuse", "davfs", "fuse.davfs2", "glusterfs",
     "ceph", "lustre", "gpfs", "vboxsf", "virtiofs", "drvfs"}
)
POLL_INTERVAL_SECONDS = 1.0
Watching = BaseObserver | FolderEvents  # what start_observer returns: stop(), join(), observer_alive()


def _name_pattern(patterns: tuple[str, ...]) -> re.Pattern[str] | None:
    """One compiled expression for a set of shell patterns (as fnmatch reads them on this
    system: case folded where the system folds case), or None for no patterns."""
    if not patterns:
        return None
    flags = re.IGNORECASE if os.path.normcase("A") == "a" else 0
    return re.compile("|".join(f"(?:{fnmatch.translate(p)})" for p in patterns), flags)


@dataclass(frozen=True)
class FileFilter:
    """Include/exclude shell patterns on file names, recursion, hidden folders skipped."""

    root: Path
    include: tuple[str, ...] = ("*",)
    exclude: tuple[str, ...] = ()
    recursive: bool = False

    def accepts(self, path: str | Path) -> bool:
        """True for a path under root that names a file we should take (by name only)."""
        text = os.fspath(path)
        root = self._root_prefix
        if not text.startswith(root):
            return False
        parts = text[len(root):].split(os.sep)
        if not parts[-1] or (len(parts) > 1 and not self.recursive):
            return False
        if any(part.startswith(".") for part in parts[:-1]):
            return False
        name = parts[-1]
        if self._excluded is not None and self._excluded.match(name):
            return False
        return self._included is not None and self._included.match(name) is not None

    @functools.cached_property
    def _root_prefix(self) -> str:
        return os.path.join(os.fspath(self.root), "")

    @functools.cached_property
    def _included(self) -> re.Pattern[str] | None:
        return _name_pattern(self.include)

    @functools.cached_property
    def _excluded(self) -> re.Pattern[str] | None:
        return _name_pattern(self.exclude)

    def scan(self) -> Iterator[tuple[str, os.stat_result]]:
        """Every accepted name now in the folder that is not a folder (regular files, and
        FIFOs, devices, links that the settler then refuses with a reason), with its stat.
        Iterative, so any depth of subfolders is fine; streamed, so a folder of a million
        files is never held as a list (one folder is open at a time: subfolders wait on a stack
        of names)."""
        stack = [self.root]
        while stack:
            folder = stack.pop()
            try:
                entries = os.scandir(folder)
            except OSError:
                continue
            with entries:
                while True:
                    try:
                        entry = next(entries)
                    except StopIteration:
                        break
                    except OSError:
                        break  # the folder went away while it was read
                    try:
                        if entry.is_dir(follow_symlinks=False):
                            if self.recursive and not entry.name.startswith("."):
                                stack.append(Path(entry.path))
                            continue
                        if entry.is_dir() or not self.accepts(entry.path):
                            continue  # a link to a folder is not walked into
                        found = entry.stat()
                    except OSError:
                        continue  # vanished while scanning
                    yield entry.path, found


def filesystem_type(path: str | Path) -> str:
    """The file-system type of the mount holding `path` (from /proc/mounts), or ''."""
    target = os.path.realpath(path)
    best, best_type = "", ""
    try:
        with open("/proc/mounts", encoding="utf-8", errors="replace") as mounts:
            for line in mounts:
                fields = line.split()
                if len(fields) < 3:
                    continue
                mount_point = fields[1].replace("\\040", " ")
                inside = target == mount_point or target.startswith(mount_point.rstrip("/") + "/")
                if inside and len(mount_point) >= len(best):
                    best, best_type = mount_point, fields[2]
    except OSError:
        return ""
    return best_type


def needs_polling(path: str | Path) -> bool:
    """True when native file events are unlikely to arrive (network and FUSE file systems)."""
    kind = filesystem_type(path)
    return kind in NETWORK_FS_TYPES or kind.startswith("fuse.") or kind.startswith("nfs")


class _Forwarder(FileSystemEventHandler):
    """Passes every file path an event mentions to `notify` (the settler decides)."""

    def __init__(self, notify: Callable[[str], None]) -> None:
        self.notify = notify

    def on_any_event(self, event: FileSystemEvent) -> None:
        if event.is_directory:
            if event.event_type in ("created", "moved"):
                self.notify(os.fsdecode(getattr(event, "dest_path", "") or event.src_path))
            return
        self.notify(os.fsdecode(event.src_path))
        dest = getattr(event, "dest_path", "")
        if dest:
            self.notify(os.fsdecode(dest))


def start_observer(
    root: Path,
    recursive: bool,
    poll: bool,
    notify: Callable[[str], None],
    on_problem: Callable[[str], None] | None = None,
    created: Callable[[str], None] | None = None,
) -> tuple[Watching, str]:
    """Start watching `root`; returns the observer and "native", "polling", or, when the
    subfolders are nested too deeply for watchdog (its walk recurses, a RecursionError past
    ~1000 levels), the same watching the top folder only: the station's rescan, which is
    iterative, still finds every file below. `created`: told of a file created, instead of
    `notify`, where the events say so (one folder watched natively)."""
    _quiet_watchdog_recursion()
    try:
        return _start(root, recursive, poll, notify, created)
    except RecursionError:
        if on_problem is not None:
            on_problem(
                f"{root}: subfolders nested too deeply for file events; only the top folder is watched "
                "by events, files below are found by the periodic rescan"
            )
        observer, kind = _start(root, False, poll, notify, created)
        return observer, f"{kind}, top folder only"


# What the native observer asks the kernel for: a file appearing (created, moved in), written
# and closed, or gone, and folders coming and going. Not each write (an export of 2 MB is
# dozens of them, all handled in Python for nothing: the settler watches size and time stamp
# itself) nor attribute changes; a file changed without being closed is found by the rescan.
NATIVE_EVENTS: list[type[FileSystemEvent]] = [
    FileCreatedEvent, FileMovedEvent, FileClosedEvent, FileDeletedEvent, DirCreatedEvent, DirMovedEvent, DirDeletedEvent,
]


def _start(root: Path, recursive: bool, poll: bool, notify: Callable[[str], None],
           created: Callable[[str], None] | None = None) -> tuple[Watching, str]:
    use_polling = poll or needs_polling(root)
    if not use_polling and not recursive:
        try:
            events = FolderEvents(str(root), notify, created)  # one folder: one thread (see folder_events)
        except OSError:
            pass  # no inotify here, or the watch limit is reached: watchdog tries, then polling
        else:
            events.start()
            return events, "native"
    observer: BaseObserver = PollingObserver(timeout=POLL_INTERVAL_SECONDS) if use_polling else Observer()
    observer.schedule(_Forwarder(notify), str(root), recursive=recursive,
                      event_filter=None if use_polling else NATIVE_EVENTS)
    try:
        observer.start()
    except OSError:
        if use_polling:
            raise
        # e.g. the inotify watch limit is reached: fall back to polling
        observer = PollingObserver(timeout=POLL_INTERVAL_SECONDS)
        observer.schedule(_Forwarder(notify), str(root), recursive=recursive)
        observer.start()
        use_polling = True
    return observer, "polling" if use_polling else "native"


def observer_alive(observer: Watching) -> bool:
    """False when any thread of the observer died (e.g. a RecursionError while adding watches
    for a deep folder tree moved in, or the watched folder went): its events stopped; the
    station then starts another."""
    if isinstance(observer, FolderEvents):
        return observer.is_alive()
    threads = [observer, *observer.emitters]
    reader = getattr(observer, "_inotify_fd", None)  # the native observer's reading thread
    if isinstance(reader, threading.Thread):
        threads.append(reader)
    return all(thread.is_alive() for thread in threads)


_previous_hook = threading.excepthook


def _watchdog_hook(args: threading.ExceptHookArgs) -> None:
    """A watchdog thread dying of a RecursionError (a deep tree moved in) is not printed as a
    traceback: the station notices the dead observer (`observer_alive`) and says so in one line."""
    thread_module = type(args.thread).__module__ if args.thread is not None else ""
    if args.exc_type is RecursionError and thread_module.startswith("watchdog."):
        return
    _previous_hook(args)


def _quiet_watchdog_recursion() -> None:
    global _previous_hook
    if threading.excepthook is not _watchdog_hook:
        _previous_hook = threading.excepthook
        threading.excepthook = _watchdog_hook
