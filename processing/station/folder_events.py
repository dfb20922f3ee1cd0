"""Native file events of one folder (not its subfolders), read from Linux inotify on one thread.

Why not watchdog's native observer here: it passes every event through four threads (reader,
dispatcher, emitter, observer), and each hand-over wakes a thread; in a burst of exports that
was ~0.5 ms of the station's own CPU per file (two events a file: created, closed after
writing), a sixth of all it spent. This thread reads the events and hands each path named to
`notify` itself. It is used for the usual case, one folder watched natively; watchdog still
watches folder trees (`recursive`) and polls where native events do not arrive.

What is asked of the kernel is what the station needs (`watcher.NATIVE_EVENTS`): a file
created, moved in or out, written and closed, deleted. The thread ends when the folder itself
goes (deleted, moved, unmounted): `alive` is then False and the station watches again.
"""
from __future__ import annotations

import ctypes
import ctypes.util
import os
import select
import struct
import threading
from collections.abc import Callable

IN_CLOSE_WRITE = 0x00000008
IN_MOVED_FROM = 0x00000040
IN_MOVED_TO = 0x00000080
IN_CREATE = 0x00000100
IN_DELETE = 0x00000200
IN_DELETE_SELF = 0x00000400
IN_MOVE_SELF = 0x00000800
IN_UNMOUNT = 0x00002000
IN_Q_OVERFLOW = 0x00004000
IN_IGNORED = 0x00008000
IN_ONLYDIR = 0x01000000
IN_ISDIR = 0x40000000
IN_NONBLOCK = os.O_NONBLOCK
IN_CLOEXEC = os.O_CLOEXEC

WATCHED = IN_CREATE | IN_CLOSE_WRITE | IN_MOVED_FROM | IN_MOVED_TO | IN_DELETE | IN_DELETE_SELF | IN_MOVE_SELF
FOLDER_GONE = IN_DELETE_SELF | IN_MOVE_SELF | IN_UNMOUNT | IN_IGNORED
HEADER = struct.Struct("iIII")  # wd, mask, cookie, length of the name that follows
READ_BYTES = 64 * 1024


def _libc() -> ctypes.CDLL:
    return ctypes.CDLL(ctypes.util.find_library("c") or None, use_errno=True)


def parse_events(buffer: bytes) -> list[tuple[int, bytes]]:
    """(mask, name) of each inotify event in `buffer` (the name empty for the folder itself)."""
    events = []
    offset, end = 0, len(buffer)
    while offset + HEADER.size <= end:
        _, mask, _, length = HEADER.unpack_from(buffer, offset)
        offset += HEADER.size
        events.append((mask, buffer[offset:offset + length].rstrip(b"\0")))
        offset += length
    return events


class FolderEvents(threading.Thread):
    """Watches `folder` (one level) and calls `notify(path)` for each file or folder an event
    names (`created(path)` instead for a file created, when given), from this thread; `stop()`
    then `join()`. Raises OSError at construction when the
    kernel refuses (no inotify, the watch limit reached, the folder missing): the caller polls."""

    def __init__(self, folder: str, notify: Callable[[str], None],
                 created: Callable[[str], None] | None = None) -> None:
        super().__init__(name="bandwatch-folder-events", daemon=True)
        self.folder = folder
        self.notify = notify
        self.created = created or notify  # a file created: its content follows (see _hand_over)
        libc = _libc()
        descriptor = libc.inotify_init1(IN_NONBLOCK | IN_CLOEXEC)
        if descriptor < 0:
            error = ctypes.get_errno()
            raise OSError(error, f"inotify: {os.strerror(error)}")
        if libc.inotify_add_watch(descriptor, os.fsencode(folder), WATCHED | IN_ONLYDIR) < 0:
            error = ctypes.get_errno()
            os.close(descriptor)
            raise OSError(error, f"inotify watch on {folder}: {os.strerror(error)}")
        self._descriptor = descriptor
        self._stop_read, self._stop_write = os.pipe()
        self._stopped = threading.Lock()

    def stop(self) -> None:
        """Wake the thread to end (closing this end of the wake pipe here, once: a descriptor
        closed by the thread could be another file's by then)."""
        if not self._stopped.acquire(blocking=False):
            return
        try:
            os.write(self._stop_write, b"!")
        except OSError:
            pass  # the thread ended already (the folder went)
        finally:
            os.close(self._stop_write)

    def run(self) -> None:
        poller = select.poll()
        poller.register(self._descriptor, select.POLLIN)
        poller.register(self._stop_read, select.POLLIN)
        try:
            while True:
                ready = [fd for fd, _ in poller.poll()]
                if self._stop_read in ready:
                    return
                try:
                    buffer = os.read(self._descriptor, READ_BYTES)
                except BlockingIOError:
                    continue
                if not self._hand_over(buffer):
                    return
        finally:
            os.close(self._descriptor)
            os.close(self._stop_read)

    def _hand_over(self, buffer: bytes) -> bool:
        """Notify each path named; False when the folder itself is gone (the watch ended)."""
        for mask, name in parse_events(buffer):
            if mask & FOLDER_GONE:
                return False
            if name:
                path = os.path.join(self.folder, os.fsdecode(name))
                # a file just created is usually written and closed next (an event of its own):
                # `created` may note it without waking anyone (a folder is told at once)
                (self.created if mask & IN_CREATE and not mask & IN_ISDIR else self.notify)(path)
            elif mask & IN_Q_OVERFLOW:
                self.notify(self.folder)  # events were lost: the station's rescan finds the files
        return True
