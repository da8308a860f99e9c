"""Opening a batch file: its header and identification, the checks of its content, the writer
lock; and creating one atomically, telling a half-created file from one that holds data.

Creation
--------

A new batch is built whole (tables, the Inkcount marker, its first settings)
under a hidden temporary name in the same folder, ``.<name>.<random>.creating``,
synced to disk, and then linked to its real name with :func:`os.link`, which
never replaces an existing file, then the folder is synced. Whoever calls
:func:`build_in_place` holds the batch's writer lock
(:mod:`recognizer.batch.lock`), so two Inkcounts never build the same batch at
once (the second is told it is in use), and temporary files of the batch found
while building, or on any later opening for writing, are those of a creator that died: they are
removed (:func:`remove_dead_temporaries`; a creator killed after linking the batch into place
leaves its temporary name beside a whole batch). A program
killed at any moment therefore leaves no batch or a complete one, never a
half-made file under the batch's name.

Older Inkcounts created the file in place; one killed then left an empty file,
or an SQLite file without the marker. :func:`leftover` recognises such a file
(0 bytes, or :func:`recognizer.batch.checks.holds_nothing`: only our tables,
empty) so that it can be made afresh; a file holding anything else is never
replaced. On a file system without hard links the temporary file is renamed
into place after checking that the name is free (the writer lock keeps
Inkcounts apart there).
"""

from __future__ import annotations

import glob
import json
import os
import secrets
import sqlite3
from pathlib import Path
from typing import Any

from recognizer import __version__
from recognizer.batch import checks, schema
from recognizer.batch.lock import LockHeld, WriterLock
from recognizer.digits.model import timestamp

__all__ = [
    "APPLICATION_ID",
    "FORMAT_NAME",
    "SQLITE_HEADER",
    "BatchFileError",
    "BatchInUseError",
    "build_in_place",
    "check_header",
    "check_ours",
    "connect",
    "leftover",
    "lock_for_writing",
    "migrate",
    "remove_dead_temporaries",
    "side_size",
    "worth_a_look",
]

FORMAT_NAME = "inkcount-batch"
#: ``PRAGMA application_id`` of a batch file: the bytes "Inkc".
APPLICATION_ID = int.from_bytes(b"Inkc", "big")
SQLITE_HEADER = b"SQLite format 3\x00"
#: SQLite page size of a new batch file: the crop sheets (about 6 KB a field) and the small rows of
#: the other tables leave less over in 2 KB pages than in SQLite's 4 KB default (measured with
#: ``bench/bench_batch_size.py``, format 6: 131.6 KB a page at 2 KB, 138.2 at 4 KB, 128.6 at 1 KB;
#: format 5, a crop a row of about 2 KB: the file about a fifth smaller at 2 KB than at 4 KB).
PAGE_SIZE = 2048


class BatchFileError(Exception):
    """A batch file that cannot be used; the message names the file and the reason."""

    def __init__(self, path: str | os.PathLike, reason: str) -> None:
        self.path = str(path)
        self.reason = reason
        super().__init__(f"cannot use batch file {self.path!r}: {reason}")


class BatchInUseError(BatchFileError):
    """The batch is open for writing in another process."""


_IN_USE = "is in use by another Inkcount window or command"


def check_header(path: Path) -> None:
    if not path.is_file():
        raise BatchFileError(path, "no such file")
    if path.stat().st_size == 0:
        if side_size(path, "-wal"):
            return  # everything still in the write-ahead log beside it: SQLite reads it from there
        raise BatchFileError(path, "the file is empty: its creation was interrupted; opening it for writing "
                             "(reading scans into it, or in the window) makes it afresh")
    try:
        with open(path, "rb") as fh:
            head = fh.read(len(SQLITE_HEADER))
    except OSError as exc:
        raise BatchFileError(path, f"cannot read the file ({exc.strerror or exc})") from None
    if head != SQLITE_HEADER:
        raise BatchFileError(path, "not an Inkcount batch file (not an SQLite database)")


def connect(path: Path, *, read_only: bool) -> sqlite3.Connection:
    try:
        if read_only:
            conn = sqlite3.connect(f"{path.absolute().as_uri()}?mode=ro", uri=True,
                                   isolation_level=None, check_same_thread=False)
        else:
            conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
        conn.row_factory = sqlite3.Row
        conn.execute("PRAGMA busy_timeout = 5000")
        if not read_only:  # (write-ahead logging is turned on once the file is known to be ours)
            conn.execute("PRAGMA synchronous = FULL")
        conn.execute("PRAGMA foreign_keys = ON")
    except sqlite3.DatabaseError as exc:
        raise BatchFileError(path, f"damaged or unreadable database ({exc})") from None
    return conn


def check_ours(conn: sqlite3.Connection, path: Path, *, read_only: bool) -> None:
    try:
        app_id = conn.execute("PRAGMA application_id").fetchone()[0]
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        fmt = None
        if "inkcount_meta" in tables:
            row = conn.execute("SELECT value FROM inkcount_meta WHERE key = 'format'").fetchone()
            fmt = row[0] if row else None
    except sqlite3.DatabaseError as exc:
        conn.close()
        raise BatchFileError(path, f"the file is damaged ({exc})") from None
    if app_id != APPLICATION_ID or fmt != FORMAT_NAME:
        unfinished = checks.holds_nothing(conn, APPLICATION_ID)
        conn.close()
        if unfinished:
            raise BatchFileError(path, "an unfinished batch file (its creation was interrupted); opening it for "
                                 "writing (reading scans into it, or in the window) makes it afresh")
        raise BatchFileError(path, "an SQLite database, but not an Inkcount batch file")
    if version > schema.SCHEMA_VERSION:
        conn.close()
        raise BatchFileError(
            path, f"made by a newer Inkcount (batch format {version}; this program reads up to "
            f"{schema.SCHEMA_VERSION}); update Inkcount to open it"
        )
    if version < schema.SCHEMA_VERSION and read_only:
        conn.close()
        raise BatchFileError(path, f"batch format {version} needs upgrading: open it for writing once")
    try:
        if not read_only:
            conn.execute("PRAGMA journal_mode = WAL")
            migrate(conn, path)
        checks.check_tables(conn, schema.SCHEMA_VERSION)
        checks.settings_values({r[0]: r[1] for r in conn.execute("SELECT key, value FROM settings")},
                               checks.SETTING_NAMES)
        checks.check_rows(conn)
    except BatchFileError:
        conn.close()
        raise
    except (ValueError, sqlite3.DatabaseError) as exc:
        conn.close()
        raise BatchFileError(path, str(exc)) from None


def lock_for_writing(path: Path) -> WriterLock:
    try:
        return WriterLock(path, since=timestamp())
    except LockHeld as held:
        raise BatchInUseError(path, f"it {_IN_USE}{held.holder}") from None
    except OSError as exc:
        raise BatchFileError(path, f"cannot write beside it ({exc.strerror or exc})") from None


def migrate(conn: sqlite3.Connection, path: Path) -> None:
    """Run the missing schema steps; a failed one is a :class:`BatchFileError` naming ``path``."""
    try:
        schema.migrate(conn)
    except schema.MigrationError as exc:
        raise BatchFileError(path, str(exc)) from exc


_CREATING = ".creating"  # suffix of the temporary name a batch is built under


def side_size(path: Path, suffix: str) -> int:
    """Size of SQLite's companion file ``<path><suffix>`` (0 when there is none)."""
    try:
        return path.with_name(path.name + suffix).stat().st_size
    except OSError:
        return 0


def worth_a_look(path: Path) -> bool:
    """Could ``path`` be an empty or half-created batch file? (Decided under the lock by :func:`leftover`.)"""
    try:
        with open(path, "rb") as fh:
            head = fh.read(len(SQLITE_HEADER))
    except OSError:
        return False
    return head in (b"", SQLITE_HEADER)


def leftover(path: Path) -> bool:
    """An empty or half-created batch file, holding nothing (the writer lock is held)."""
    if path.stat().st_size == 0 and side_size(path, "-wal") == 0:
        return True
    if path.stat().st_size and not worth_a_look(path):
        return False
    try:
        conn = sqlite3.connect(path, isolation_level=None)  # folds in a write-ahead log left beside it
        try:
            return checks.holds_nothing(conn, APPLICATION_ID)
        finally:
            conn.close()
    except sqlite3.DatabaseError:
        return False


def remove_dead_temporaries(path: Path) -> None:
    """Remove the temporary files of batch ``path`` (``.<name>.<random>.creating`` and their SQLite
    side files). Call with the batch's writer lock held: a live creator holds it while building, so
    the files found are those of a creator that died (before building, or after linking the batch
    into place and before removing its temporary name)."""
    for dead in path.parent.glob(glob.escape(f".{path.name}.") + "*" + _CREATING + "*"):
        dead.unlink(missing_ok=True)


def build_in_place(path: Path, *, replace: bool, settings: dict[str, Any]) -> None:
    """Build a new batch under a temporary name beside ``path`` and move it there: linked, so that
    it never replaces a file (``replace``: over a file :func:`leftover` found empty). The writer
    lock is held, so temporary files of this batch found now are a dead creator's: they go."""
    for suffix in ("-wal", "-journal", "-shm"):
        side = path.with_name(path.name + suffix)
        if side.exists() and suffix != "-shm" and side.stat().st_size:
            raise BatchFileError(path, f"'{side.name}', left by an earlier batch of that name, lies beside it; "
                                 "move it away first")
        side.unlink(missing_ok=True)
    remove_dead_temporaries(path)
    temp = path.with_name(f".{path.name}.{secrets.token_hex(6)}{_CREATING}")
    try:
        conn = sqlite3.connect(temp, isolation_level=None)
        try:
            conn.execute("PRAGMA synchronous = FULL")
            conn.execute(f"PRAGMA page_size = {PAGE_SIZE}")
            conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
            migrate(conn, path)
            conn.execute("BEGIN IMMEDIATE")
            conn.executemany(
                "INSERT INTO inkcount_meta (key, value) VALUES (?, ?)",
                [("format", FORMAT_NAME), ("created", timestamp()), ("created_by", f"inkcount {__version__}")],
            )
            conn.executemany("INSERT INTO settings (key, value) VALUES (?, ?)",
                             [(k, json.dumps(v)) for k, v in settings.items()])
            conn.execute("COMMIT")
            conn.execute("PRAGMA journal_mode = WAL")
        finally:
            conn.close()
        with open(temp, "rb") as fh:
            os.fsync(fh.fileno())
        if replace:
            os.replace(temp, path)
        else:
            _link(temp, path)
        _sync_folder(path.parent)
    except (sqlite3.Error, OSError) as exc:
        raise BatchFileError(path, f"cannot create the batch file ({exc})") from None
    finally:
        for name in (temp.name, *(temp.name + s for s in ("-journal", "-wal", "-shm"))):
            temp.with_name(name).unlink(missing_ok=True)


def _link(temp: Path, path: Path) -> None:
    """Put ``temp`` at ``path`` unless a file is there (then BatchFileError)."""
    try:
        os.link(temp, path)
    except FileExistsError:
        raise BatchFileError(path, "a file of that name already exists") from None
    except OSError:  # a file system without hard links (FAT, some shares): the lock keeps Inkcounts apart
        if path.exists():
            raise BatchFileError(path, "a file of that name already exists") from None
        os.rename(temp, path)  # refuses to overwrite on Windows


def _sync_folder(folder: Path) -> None:
    """Make a new name in ``folder`` durable (POSIX; Windows has no folder handles to sync)."""
    if os.name == "posix":
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
