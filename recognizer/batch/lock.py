"""One writer at a time: an operating-system lock beside the batch file.

Opening a batch for writing takes an operating-system lock on a side file
``<batch>.lock`` (through the portalocker library: ``flock`` on POSIX, ``LockFileEx`` on Windows), holding the
holder's process id, host and start time. A second window or command that
opens the same batch for writing is refused with :class:`recognizer.batch.store.BatchInUseError`
("in use by another Inkcount window or command ..."). The operating system
drops the lock when its holder ends in any way, crash and ``kill -9``
included, so a left-over lock file never blocks anybody (stale-lock
recovery needs no clean-up). Opening with ``read_only=True`` (``status``,
``export``) takes no lock: SQLite's WAL lets it read a consistent snapshot
while the writer goes on.
"""

from __future__ import annotations

import json
import os
import socket
from pathlib import Path

import portalocker

__all__ = ["WriterLock", "LockHeld"]


class LockHeld(Exception):
    """Another process holds the lock; ``holder`` says who, in words (may be empty)."""

    def __init__(self, holder: str) -> None:
        self.holder = holder
        super().__init__(holder)


class WriterLock:
    """Exclusive OS lock on ``<batch>.lock``, released by the OS if the holder dies.

    The lock file holds, after its first byte, JSON with the holder's process
    id, host and start time (``since``), read back for the message a second
    writer gets.

    Raises
    ------
    LockHeld
        Another process (or another open batch in this process) holds it.
    """

    def __init__(self, batch_path: Path, *, since: str) -> None:
        self.path = batch_path.with_name(batch_path.name + ".lock")
        self._fh = None
        while self._fh is None:
            fh = open(self.path, "a+b")
            try:
                portalocker.lock(fh, portalocker.LOCK_EX | portalocker.LOCK_NB)
            except portalocker.exceptions.LockException:
                holder = _read_holder(fh)
                fh.close()
                raise LockHeld(holder) from None
            # The previous holder may have removed the file between our open
            # and our lock: then we locked an orphan; try again.
            if os.path.exists(self.path) and os.path.samestat(os.fstat(fh.fileno()), os.stat(self.path)):
                self._fh = fh
            else:
                fh.close()
        info = {"pid": os.getpid(), "host": socket.gethostname(), "since": since}
        self._fh.seek(1)
        self._fh.truncate()
        self._fh.write(json.dumps(info).encode())
        self._fh.flush()

    def release(self) -> None:
        if self._fh is None:
            return
        try:
            os.unlink(self.path)  # still holding the lock: see the check above
        except OSError:
            pass
        self._fh.close()
        self._fh = None


def _read_holder(fh) -> str:
    """`` (process 123 on host, since ...)`` from a lock file, or ``""``."""
    try:
        fh.seek(1)
        info = json.loads(fh.read(4096).decode())
        return f" (process {info['pid']} on {info['host']}, since {info['since']})"
    except (OSError, ValueError, KeyError, TypeError):
        return ""
