"""One ``countmill batch`` run per output folder: an OS lock on ``DIR/.countmill-batch.lock``.

The lock is :func:`fcntl.flock` (exclusive, non-blocking) on a file that is never deleted.
The kernel drops it when the holder's file descriptor closes, which includes the holder
being killed (``SIGKILL``, OOM killer, power loss on a network mount's client): a killed
run leaves no stale lock behind, so nobody has to clean one up by hand.

The holder writes ``pid``, ``host`` and start time into the file after taking the lock; a
run that finds the lock taken reads them back for its message. The text is only advice:
the lock itself is the ``flock``, never the file's content or existence.

Notes
-----
Deleting the lock file while a run holds it would let a second run lock a new file of the
same name, so the file is created once and left in place. The descriptor is opened
``O_CLOEXEC`` and worker processes are started with ``spawn``: no child process inherits it,
so the lock goes away with the coordinating process. On NFS, Linux emulates ``flock`` with
POSIX byte-range locks (NFSv4 or NFSv3 with ``lockd``); a mount with ``nolock`` makes every
lock succeed locally, which is not safe across machines: run the coordinator of one output
folder on one machine.
"""

from __future__ import annotations

import datetime as dt
import errno
import fcntl
import json
import os
import socket
from pathlib import Path

from countmill.errors import CountmillError, LockHeld

LOCK_NAME = ".countmill-batch.lock"


class OutputLock:
    """Exclusive lock on one output folder; use as a context manager.

    Raises :class:`countmill.errors.LockHeld` (exit code 4) when another run holds it.
    """

    def __init__(self, folder: str | Path):
        self.folder = Path(folder)
        self.path = self.folder / LOCK_NAME
        self._fd: int | None = None

    def acquire(self) -> "OutputLock":
        try:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644)
        except OSError as exc:
            raise CountmillError(f"{self.path}: cannot open the lock file: {exc.strerror}") from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            holder = _read_holder(fd)
            os.close(fd)
            if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                raise LockHeld(
                    f"{self.folder}: another countmill batch run holds the lock {self.path.name}"
                    f" ({holder}); this run did nothing"
                ) from None
            raise CountmillError(f"{self.path}: cannot lock: {exc.strerror}") from None
        self._fd = fd
        info = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "started": dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        }
        try:
            os.ftruncate(fd, 0)
            os.pwrite(fd, (json.dumps(info) + "\n").encode(), 0)
        except OSError:
            pass  # the holder text is advice only; the flock is the lock
        return self

    def release(self) -> None:
        if self._fd is None:
            return
        try:
            os.ftruncate(self._fd, 0)
        except OSError:
            pass
        os.close(self._fd)  # closing the descriptor drops the flock
        self._fd = None

    def __enter__(self) -> "OutputLock":
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


def _read_holder(fd: int) -> str:
    try:
        text = os.pread(fd, 4096, 0).decode("utf-8", "replace").strip()
        info = json.loads(text)
        return f"pid {info['pid']} on {info['host']}, started {info['started']}"
    except (OSError, ValueError, KeyError, TypeError):
        return "holder unknown"
