"""Open only regular files, and only where bandwatch may read: the one way files are opened.

An export share can hold more than spectra: a FIFO (opening it blocks until someone writes),
a device (/dev/zero never ends), a socket, or a symbolic link to anywhere, including the
station's own ledger. Opening and closing any descriptor of a SQLite database drops every
POSIX lock this process holds on it, after which another process can delete the live WAL:
the ledger must never be opened except by SQLite. So, before anything is opened:

1. the path is resolved (links followed, by name only) and the target must lie inside
   `ReadPolicy.root` (unless `follow_links_outside`) and never inside a `forbidden` folder
   (the data folder);
2. the resolved path is opened component by component with O_NOFOLLOW, so a link put in
   place after step 1 is refused instead of followed, and with O_NONBLOCK, so a FIFO that
   slipped through cannot block;
3. the opened descriptor is checked with fstat: a regular file, or refused.

Every refusal is a `SpectrumFileError` with a one-line reason.
"""
from __future__ import annotations

import errno
import os
import stat
from dataclasses import dataclass
from pathlib import Path

from processing.errors import SpectrumFileError

READ_CHUNK = 1 << 20
_KINDS = (
    (stat.S_ISDIR, "a directory"),
    (stat.S_ISFIFO, "a FIFO (named pipe)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)


@dataclass(frozen=True)
class ReadPolicy:
    """Where files may be read from. The default (no root) allows any regular file."""

    root: str | None = None  # files must resolve to a place inside this folder
    follow_links_outside: bool = False  # a link from root to elsewhere is followed
    forbidden: tuple[str, ...] = ()  # folders never read, wherever a link points (data folder)

    @classmethod
    def for_station(cls, export_dir: str | Path, data_dir: str | Path, follow_links_outside: bool = False) -> ReadPolicy:
        return cls(str(Path(export_dir).resolve()), follow_links_outside, (str(Path(data_dir).resolve()),))



def _inside(path: str, folder: str) -> bool:
    return path == folder or path.startswith(folder.rstrip("/") + "/")


def kind_of(mode: int) -> str:
    """'a FIFO (named pipe)', 'a folder', ... for a file mode that is not a regular file."""
    for test, name in _KINDS:
        if test(mode):
            return name
    return "not a regular file"


def check_place(path: str, policy: ReadPolicy) -> str:
    """The resolved path of `path` if the policy lets bandwatch read there; else a
    `SpectrumFileError` saying why. Opens nothing."""
    real = os.path.realpath(path)
    for folder in policy.forbidden:
        if _inside(real, os.path.realpath(folder)):
            raise SpectrumFileError(path, "leads into bandwatch's data folder; never read")
    if policy.root is not None and not policy.follow_links_outside:
        root = os.path.realpath(policy.root)
        if not _inside(real, root):
            raise SpectrumFileError(
                path, "a symbolic link leading outside the export folder; not followed (follow_links_outside = false)"
            )
    return real


def _is_forbidden_file(found: os.stat_result, policy: ReadPolicy) -> bool:
    """True when `found` is the same file as one directly in a forbidden folder (by stat only)."""
    for folder in policy.forbidden:
        try:
            entries = list(os.scandir(folder))
        except OSError:
            continue
        for entry in entries:
            try:
                other = entry.stat(follow_symlinks=False)
            except OSError:
                continue
            if (other.st_dev, other.st_ino) == (found.st_dev, found.st_ino):
                return True
    return False


def _open_without_links(real: str) -> int:
    """Open an absolute, already resolved path, refusing any link met on the way (O_NOFOLLOW
    at every step), non-blocking."""
    parts = [part for part in real.split("/") if part]
    directory = os.open("/", os.O_RDONLY | os.O_DIRECTORY | os.O_CLOEXEC)
    try:
        for part in parts[:-1]:
            inner = os.open(part, os.O_RDONLY | os.O_DIRECTORY | os.O_NOFOLLOW | os.O_CLOEXEC, dir_fd=directory)
            os.close(directory)
            directory = inner
        flags = os.O_RDONLY | os.O_NONBLOCK | os.O_NOFOLLOW | os.O_NOCTTY | os.O_CLOEXEC
        return os.open(parts[-1] if parts else ".", flags, dir_fd=directory)
    finally:
        os.close(directory)


def open_regular(path: str | Path, policy: ReadPolicy | None = None) -> int:
    """A read-only descriptor of the regular file at `path`, allowed by `policy`."""
    source = str(path)
    policy = policy or ReadPolicy()
    real = check_place(source, policy)
    try:
        before = os.stat(real)  # by name: opens nothing
    except FileNotFoundError:
        raise SpectrumFileError(source, "no such file") from None
    except OSError as error:
        raise SpectrumFileError(source, f"cannot be read ({error.strerror or error})") from None
    if not stat.S_ISREG(before.st_mode):
        raise SpectrumFileError(source, f"is {kind_of(before.st_mode)}, not a regular file; not read")
    if before.st_nlink > 1 and _is_forbidden_file(before, policy):
        raise SpectrumFileError(source, "is a hard link to a file in bandwatch's data folder; never read")
    try:
        descriptor = _open_without_links(real)
    except OSError as error:
        if error.errno in (errno.ELOOP, errno.ENOTDIR):
            raise SpectrumFileError(source, "was replaced by a link while being opened; not read") from None
        if error.errno == errno.ENOENT:
            raise SpectrumFileError(source, "no such file") from None
        if error.errno in (errno.EACCES, errno.EPERM):
            raise SpectrumFileError(source, "permission denied") from None
        raise SpectrumFileError(source, f"cannot be read ({error.strerror or error})") from None
    opened = os.fstat(descriptor)
    if not stat.S_ISREG(opened.st_mode) or (opened.st_dev, opened.st_ino) != (before.st_dev, before.st_ino):
        os.close(descriptor)
        what = kind_of(opened.st_mode) if not stat.S_ISREG(opened.st_mode) else "another file"
        raise SpectrumFileError(source, f"became {what} while being opened; not read")
    return descriptor


def _open_within(source: str, max_bytes: int, policy: ReadPolicy | None) -> tuple[int, int]:
    """A read-only descriptor of the regular file and its size; refused (and closed) when the
    file is over `max_bytes`."""
    descriptor = open_regular(source, policy)
    try:
        size = os.fstat(descriptor).st_size
    except OSError as error:
        os.close(descriptor)
        raise SpectrumFileError(source, f"cannot be read ({error.strerror or error})") from None
    if size > max_bytes:
        os.close(descriptor)
        raise SpectrumFileError(source, f"file is {size / 1e6:.3g} MB, over the {max_bytes / 1e6:.3g} MB limit")
    return descriptor, size


def read_ends(path: str | Path, max_bytes: int, end_bytes: int, policy: ReadPolicy | None = None) -> tuple[bytes, bytes, int]:
    """The first and the last `end_bytes` of the regular file at `path` and its size (opened
    and refused as `read_regular` does), without reading the rest: whether a file looks whole
    is told by its ends."""
    source = str(path)
    descriptor, size = _open_within(source, max_bytes, policy)
    try:
        head = os.pread(descriptor, end_bytes, 0)
        tail = os.pread(descriptor, end_bytes, size - end_bytes) if size > end_bytes else head
    except OSError as error:
        raise SpectrumFileError(source, f"cannot be read ({error.strerror or error})") from None
    finally:
        os.close(descriptor)
    return head, tail, size


def read_regular(path: str | Path, max_bytes: int, policy: ReadPolicy | None = None) -> bytes:
    """The bytes of the regular file at `path`; refuses a file over `max_bytes` (as found,
    or grown while being read) without reading past the limit."""
    source = str(path)
    descriptor, size = _open_within(source, max_bytes, policy)
    try:
        chunks: list[bytes] = []
        total = 0
        want = size + 1  # read(n) allocates n bytes: the size seen, +1 to notice growth
        while total <= max_bytes:
            chunk = os.read(descriptor, max(1, min(want, max_bytes + 1 - total)))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
            want = READ_CHUNK
    except OSError as error:
        raise SpectrumFileError(source, f"cannot be read ({error.strerror or error})") from None
    finally:
        os.close(descriptor)
    if total > max_bytes:
        raise SpectrumFileError(source, f"file grew past the {max_bytes / 1e6:.3g} MB limit")
    return b"".join(chunks)
