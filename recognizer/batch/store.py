"""The batch file: one SQLite database holding everything read from a set of scans
and everything a person did to check it.

A batch file (suffix ``.inkcount``) is self-contained: the deskewed page
images, every box's crop and the model's probabilities for it, the values read,
the review state of every digit and field, and the log of review actions. It
is written with the standard library :mod:`sqlite3`; a reviewer's work is
committed the moment it is done.

Storage
-------
* **Journal**: write-ahead log (``PRAGMA journal_mode=WAL``) with
  ``synchronous=FULL``: a commit is on disk when the call returns, and a
  process killed at any moment leaves a file that opens again, intact, with
  every committed change (SQLite's guarantee; our tests kill a writer with
  SIGKILL and check). While a batch is open, SQLite keeps two companion files
  beside it (``-wal``, ``-shm``); they are folded back and removed on close.
* **Identification**: ``PRAGMA application_id`` = :data:`APPLICATION_ID`
  ("Inkc"), a table ``inkcount_meta`` (format name, creation time, program
  version) and ``PRAGMA user_version`` = schema version.
* **Schema versions**: :data:`MIGRATIONS` is an ordered list of functions;
  entry ``i`` brings a file from version ``i`` to ``i + 1`` (entry 0 creates
  the tables of version 1). Opening an older file runs the missing steps, each
  in one transaction, so a failed step leaves the file as it was. A file of a
  newer version is refused with a clear message.
* **Images**: each page image (deskewed, grayscale, full resolution) is one
  lossless PNG (zlib level 3): about 0.3 MB for a clean A5 card at 300 dpi,
  about 2.6 MB when the scan is noisy (noise does not compress). The crop of
  every box is a PNG too; the window shows those, and re-reading with another
  model cuts the cells again from the stored page, so nothing depends on the
  original scan files staying where they were.
* **Probabilities**: the 11 class probabilities of each written box as 44
  bytes (little-endian float32, classes as in :data:`recognizer.digits.model.CLASSES`).

Tables (version 1)
------------------
``inkcount_meta(key, value)``; ``settings(key, value JSON)`` (threshold,
target residual error, threshold source, model path and version, PDF
resolution); ``files(path, sha256, size, added, complete)``; ``pages(file,
page, dpi, skew_deg, problem, warnings JSON, layout JSON, odd_layout,
read_at)`` — a row with ``page`` NULL is a problem with the whole file;
``page_images(page, png)`` (apart, so that queries on pages never wade
through megabytes of image); ``fields(page, position, name, boxes JSON,
read_value, gap, value, whole, resolution, state)``; ``digits(field, box,
blank, prediction, confidence, model_version, value, state, probs,
crop_png)`` — one row per box, empty ones included, the blobs last for the
same reason; ``actions(time, reviewer, kind, field, digit, old_value,
new_value, before JSON, undoes, undone_by)``.

Version 2 adds ``pages.template`` (name and version of the form template that
read the page, ``orchard_card v1``; NULL without a template),
``pages.registration_score`` and ``fields.rule_problems`` (JSON list of the
template rules the value read breaks, each ``"<rule>: <what>"``).

Version 3 keeps the templates themselves: ``templates(name, version, json,
added)`` holds the JSON of every template that read a page of the batch
(keyed by name and version, as ``pages.template`` names them), so the rules
are checked again after a review and the export types the values without the
template file; ``fields.typed`` is the field's value as its template types it
(``18.7``, ``2026-09-13``), NULL without a template. Pages read into a version
2 file keep NULL there (their template was not kept): they export their digits.
The meaning of the states and of ``value``/``whole``/``resolution`` is in
:mod:`recognizer.review.actions`.

One writer at a time
--------------------
Opening a batch for writing takes an operating-system lock on a side file
``<batch>.lock`` (``fcntl.flock``; ``msvcrt.locking`` on Windows), holding the
holder's process id, host and start time. A second window or command that
opens the same batch for writing is refused with :class:`BatchInUseError`
("in use by another Inkcount window or command ..."). The operating system
drops the lock when its holder ends in any way, crash and ``kill -9``
included, so a left-over lock file never blocks anybody (stale-lock
recovery needs no clean-up). Opening with ``read_only=True`` (``status``,
``export``) takes no lock: SQLite's WAL lets it read a consistent snapshot
while the writer goes on.

Reading into a batch
--------------------
:func:`ingest_scans` reads scan files into the batch, one transaction per
page. A file whose content (sha256) is already in the batch is not read again,
even under another name; a file interrupted part-way is resumed from the
first page not yet stored.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import socket
import sqlite3
import sys
import threading
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import cv2
import numpy as np

from recognizer import __version__
from recognizer.page.boxes import Box
from recognizer.page.cells import cut_cell
from recognizer.digits.model import NOT_A_DIGIT, DigitModel, load_model, timestamp
from recognizer.reading.stream import ReadSettings, read_scans
from recognizer.reading.page import PageRead
from recognizer.review.actions import DEFAULT_TARGET_ERROR, READ, Change, refresh_layout, refresh_states
from recognizer.scans.files import ScanProblem
from recognizer.forms.template import Template, load_template, template_from_json, template_to_json

__all__ = [
    "APPLICATION_ID",
    "FORMAT_NAME",
    "SCHEMA_VERSION",
    "MIGRATIONS",
    "SUFFIX",
    "Batch",
    "BatchFileError",
    "BatchInUseError",
    "BatchSettings",
    "Change",
    "IngestSummary",
    "SampleRef",
    "ingest_scans",
    "labelled_samples",
    "encode_png",
    "decode_png",
]

SUFFIX = ".inkcount"
FORMAT_NAME = "inkcount-batch"
#: ``PRAGMA application_id`` of a batch file: the bytes "Inkc".
APPLICATION_ID = int.from_bytes(b"Inkc", "big")
_SQLITE_HEADER = b"SQLite format 3\x00"
_PNG_LEVEL = 3
_IN_USE = "is in use by another Inkcount window or command"


class BatchFileError(Exception):
    """A batch file that cannot be used; the message names the file and the reason."""

    def __init__(self, path: str | os.PathLike, reason: str) -> None:
        self.path = str(path)
        self.reason = reason
        super().__init__(f"cannot use batch file {self.path!r}: {reason}")


class BatchInUseError(BatchFileError):
    """The batch is open for writing in another process."""


# --------------------------------------------------------------------------- schema


def _run_script(conn: sqlite3.Connection, script: str) -> None:
    """Run ``;``-separated statements inside the current transaction.

    (``executescript`` would commit first, which a migration must not do.)
    """
    for statement in script.split(";"):
        if statement.strip():
            conn.execute(statement)


def _schema_v1(conn: sqlite3.Connection) -> None:
    _run_script(
        conn,
        """
        CREATE TABLE inkcount_meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
        CREATE TABLE settings (key TEXT PRIMARY KEY, value TEXT NOT NULL);
        CREATE TABLE files (
            id INTEGER PRIMARY KEY,
            path TEXT NOT NULL,
            sha256 TEXT UNIQUE,
            size INTEGER,
            added TEXT NOT NULL,
            complete INTEGER NOT NULL DEFAULT 0
        );
        CREATE TABLE pages (
            id INTEGER PRIMARY KEY,
            file_id INTEGER NOT NULL REFERENCES files(id),
            page INTEGER,
            dpi REAL,
            skew_deg REAL,
            problem TEXT,
            warnings TEXT NOT NULL DEFAULT '[]',
            layout TEXT,
            odd_layout INTEGER NOT NULL DEFAULT 0,
            read_at TEXT NOT NULL,
            UNIQUE (file_id, page)
        );
        CREATE TABLE page_images (
            page_id INTEGER PRIMARY KEY REFERENCES pages(id),
            png BLOB NOT NULL
        );
        CREATE TABLE fields (
            id INTEGER PRIMARY KEY,
            page_id INTEGER NOT NULL REFERENCES pages(id),
            position INTEGER NOT NULL,
            name TEXT NOT NULL,
            boxes TEXT NOT NULL,
            read_value TEXT NOT NULL,
            gap INTEGER NOT NULL,
            doubts TEXT NOT NULL DEFAULT '[]',
            value TEXT NOT NULL,
            whole INTEGER NOT NULL DEFAULT 0,
            resolution TEXT,
            state TEXT NOT NULL,
            UNIQUE (page_id, name)
        );
        CREATE INDEX fields_by_state ON fields(state);
        CREATE TABLE digits (
            id INTEGER PRIMARY KEY,
            field_id INTEGER NOT NULL REFERENCES fields(id),
            box INTEGER NOT NULL,
            blank INTEGER NOT NULL,
            prediction TEXT NOT NULL,
            confidence REAL NOT NULL,
            model_version TEXT,
            value TEXT,
            state TEXT NOT NULL,
            probs BLOB,
            crop_png BLOB NOT NULL,
            UNIQUE (field_id, box)
        );
        CREATE TABLE actions (
            id INTEGER PRIMARY KEY,
            time TEXT NOT NULL,
            reviewer TEXT NOT NULL,
            kind TEXT NOT NULL,
            field_id INTEGER REFERENCES fields(id),
            digit_id INTEGER REFERENCES digits(id),
            old_value TEXT,
            new_value TEXT,
            before TEXT,
            undoes INTEGER REFERENCES actions(id),
            undone_by INTEGER REFERENCES actions(id)
        );
        CREATE INDEX actions_by_field ON actions(field_id);
        """
    )


def _schema_v2(conn: sqlite3.Connection) -> None:
    """Version 2: the form template (name and version) and registration score of each page
    read with a template, and the rules each field's value breaks."""
    _run_script(
        conn,
        """
        ALTER TABLE pages ADD COLUMN template TEXT;
        ALTER TABLE pages ADD COLUMN registration_score REAL;
        ALTER TABLE fields ADD COLUMN rule_problems TEXT NOT NULL DEFAULT '[]';
        """
    )


def _schema_v3(conn: sqlite3.Connection) -> None:
    """Version 3: the templates that read pages, kept in the batch, and each field's typed value."""
    _run_script(
        conn,
        """
        CREATE TABLE templates (
            name TEXT NOT NULL,
            version INTEGER NOT NULL,
            json TEXT NOT NULL,
            added TEXT NOT NULL,
            PRIMARY KEY (name, version)
        );
        ALTER TABLE fields ADD COLUMN typed TEXT;
        """
    )


#: Schema steps in order: ``MIGRATIONS[i]`` brings a file from version i to i + 1.
MIGRATIONS: list[Callable[[sqlite3.Connection], None]] = [_schema_v1, _schema_v2, _schema_v3]
#: Schema version written by this program.
SCHEMA_VERSION = len(MIGRATIONS)


def _migrate(conn: sqlite3.Connection, path: Path) -> None:
    """Run the missing schema steps, one transaction each."""
    current = conn.execute("PRAGMA user_version").fetchone()[0]
    for version in range(current, len(MIGRATIONS)):
        try:
            conn.execute("BEGIN IMMEDIATE")
            MIGRATIONS[version](conn)
            conn.execute(f"PRAGMA user_version = {version + 1}")
            conn.execute("COMMIT")
        except Exception as exc:
            conn.execute("ROLLBACK")
            raise BatchFileError(
                path, f"could not upgrade the batch from format {version} to {version + 1} ({exc}); "
                "the file is unchanged"
            ) from exc


# --------------------------------------------------------------------------- records


@dataclass(frozen=True)
class BatchSettings:
    """Batch-wide settings.

    ``threshold`` is ``None`` until the first page is read (then it is set from
    the model's calibration for ``target_error``, unless set by hand).
    ``threshold_source`` is ``"target"`` (follows the model and the target)
    or ``"manual"``.
    """

    threshold: float | None = None
    target_error: float = DEFAULT_TARGET_ERROR
    threshold_source: str = "target"
    model_path: str | None = None
    model_version: str | None = None
    pdf_dpi: float | None = None


@dataclass(frozen=True)
class SampleRef:
    """Where a labelled sample came from."""

    digit_id: int
    file: str
    page: int
    field: str
    box: int
    state: str
    reviewer: str | None


@dataclass
class IngestSummary:
    """What :func:`ingest_scans` did.

    ``known`` lists ``(path, path already in the batch)`` for files skipped
    because their content is already in the batch; ``stopped`` is True when
    ``should_stop`` ended the run early.
    """

    files_added: int = 0
    known: list[tuple[str, str]] = field(default_factory=list)
    pages_read: int = 0
    pages_with_problems: int = 0
    problems: list[ScanProblem] = field(default_factory=list)
    fields: int = 0
    fields_to_check: int = 0
    digits: int = 0
    digits_to_check: int = 0
    stopped: bool = False


# --------------------------------------------------------------------------- helpers


def encode_png(image: np.ndarray) -> bytes:
    """Lossless PNG bytes of an (M, N) uint8 image."""
    ok, buf = cv2.imencode(".png", np.ascontiguousarray(image, dtype=np.uint8),
                           [cv2.IMWRITE_PNG_COMPRESSION, _PNG_LEVEL])
    if not ok:
        raise ValueError(f"cannot encode an image of shape {np.shape(image)} as PNG")
    return buf.tobytes()


def decode_png(data: bytes) -> np.ndarray:
    """(M, N) uint8 image back from :func:`encode_png` bytes."""
    image = cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_UNCHANGED)
    if image is None:
        raise ValueError("damaged image data in the batch file")
    return image


def _sha256(path: Path) -> tuple[str, int] | ScanProblem:
    h = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
    except OSError as exc:
        return ScanProblem(path, None, f"cannot read the file ({exc.strerror or exc})")
    return h.hexdigest(), path.stat().st_size


def _check_header(path: Path) -> None:
    if not path.is_file():
        raise BatchFileError(path, "no such file")
    try:
        with open(path, "rb") as fh:
            head = fh.read(len(_SQLITE_HEADER))
    except OSError as exc:
        raise BatchFileError(path, f"cannot read the file ({exc.strerror or exc})") from None
    if head != _SQLITE_HEADER:
        raise BatchFileError(path, "not an Inkcount batch file (not an SQLite database)")


# --------------------------------------------------------------------------- lock


class _WriterLock:
    """Exclusive OS lock on ``<batch>.lock``, released by the OS if the holder dies."""

    def __init__(self, batch_path: Path) -> None:
        self.path = batch_path.with_name(batch_path.name + ".lock")
        self._fh = None
        while self._fh is None:
            fh = open(self.path, "a+b")
            if not _try_lock(fh):
                holder = _read_holder(fh)
                fh.close()
                raise BatchInUseError(batch_path, f"it {_IN_USE}{holder}")
            # The previous holder may have removed the file between our open
            # and our lock: then we locked an orphan; try again.
            if os.path.exists(self.path) and os.path.samestat(os.fstat(fh.fileno()), os.stat(self.path)):
                self._fh = fh
            else:
                fh.close()
        info = {"pid": os.getpid(), "host": socket.gethostname(), "since": timestamp()}
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


if sys.platform == "win32":  # pragma: no cover - exercised on Windows only
    import msvcrt

    def _try_lock(fh) -> bool:
        fh.seek(0)
        try:
            msvcrt.locking(fh.fileno(), msvcrt.LK_NBLCK, 1)
        except OSError:
            return False
        return True

else:
    import fcntl

    def _try_lock(fh) -> bool:
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            return False
        return True


def _read_holder(fh) -> str:
    """`` (process 123 on host, since ...)`` from a lock file, or ``""``."""
    try:
        fh.seek(1)
        info = json.loads(fh.read(4096).decode())
        return f" (process {info['pid']} on {info['host']}, since {info['since']})"
    except (OSError, ValueError, KeyError, TypeError):
        return ""


# --------------------------------------------------------------------------- the batch


class Batch:
    """An open batch file.

    Use :meth:`create` or :meth:`open`, preferably as a context manager::

        with Batch.open("harvest.inkcount") as batch:
            ...

    Observers registered with :meth:`subscribe` are called with a
    :class:`Change` after every committed change.

    Two threads of one process may share an open batch (a worker reading
    scans while the window shows and reviews): every query (:meth:`rows`) and
    every write :meth:`transaction` holds the batch's lock, so a query never
    runs in the middle of another thread's transaction, and never sees its
    uncommitted rows. A second connection is not an option: a batch has one
    writer at a time.
    """

    def __init__(self, path: Path, conn: sqlite3.Connection, lock: _WriterLock | None) -> None:
        self.path = path
        self._conn = conn
        self._lock = lock
        self._guard = threading.RLock()
        self._observers: list[Callable[[Change], None]] = []

    # ---- opening and closing

    @classmethod
    def create(cls, path: str | os.PathLike) -> Batch:
        """Create a new, empty batch file (refuses to overwrite an existing file)."""
        path = Path(path)
        if path.exists():
            raise BatchFileError(path, "a file of that name already exists")
        lock = _WriterLock(path)
        try:
            conn = _connect(path, read_only=False)
            conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
            _migrate(conn, path)
            with _transaction(conn):
                conn.executemany(
                    "INSERT INTO inkcount_meta (key, value) VALUES (?, ?)",
                    [("format", FORMAT_NAME), ("created", timestamp()), ("created_by", f"inkcount {__version__}")],
                )
        except BaseException:
            lock.release()
            raise
        return cls(path, conn, lock)

    @classmethod
    def open(cls, path: str | os.PathLike, *, read_only: bool = False, create: bool = False) -> Batch:
        """Open an existing batch file.

        Parameters
        ----------
        path : path
            The ``.inkcount`` file.
        read_only : bool
            Read without taking the writer lock (reads a consistent snapshot
            while another process may be writing).
        create : bool
            Create the file if it does not exist yet.

        Raises
        ------
        BatchInUseError
            Another process has it open for writing.
        BatchFileError
            Missing, not SQLite, SQLite but not a batch, damaged, or written by
            a newer Inkcount.
        """
        path = Path(path)
        if create and not path.exists():
            return cls.create(path)
        _check_header(path)
        lock = None if read_only else _WriterLock(path)
        try:
            conn = _connect(path, read_only=read_only)
            _check_ours(conn, path, read_only=read_only)
        except BaseException:
            if lock:
                lock.release()
            raise
        return cls(path, conn, lock)

    def close(self) -> None:
        """Close the file (checkpointing the write-ahead log) and release the lock."""
        with self._guard:
            if self._conn is not None:
                self._conn.close()
                self._conn = None
        if self._lock is not None:
            self._lock.release()
            self._lock = None

    def __enter__(self) -> Batch:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @property
    def read_only(self) -> bool:
        return self._lock is None

    # ---- observers

    def subscribe(self, callback: Callable[[Change], None]) -> None:
        """Call ``callback(change)`` after every committed change."""
        self._observers.append(callback)

    def unsubscribe(self, callback: Callable[[Change], None]) -> None:
        self._observers.remove(callback)

    def notify(self, change: Change) -> None:
        """Announce a committed change to the observers."""
        for callback in list(self._observers):
            callback(change)

    # ---- low-level access (for recognizer.review.actions and recognizer.review.checked_export)

    @contextmanager
    def transaction(self) -> Iterator[sqlite3.Connection]:
        """One write transaction: committed on leaving the block, rolled back on an error.

        Other threads wait for its end before they query or write.
        """
        if self.read_only:
            raise PermissionError(f"{self.path} is open read-only")
        with self._guard, _transaction(self._connection()) as conn:
            yield conn

    def rows(self, sql: str, params: Iterable[Any] = ()) -> list[sqlite3.Row]:
        """Run a read query and return all rows (``sqlite3.Row``, by name or index)."""
        with self._guard:
            return self._connection().execute(sql, tuple(params)).fetchall()

    def _connection(self) -> sqlite3.Connection:
        if self._conn is None:
            raise ValueError("the batch is closed")
        return self._conn

    # ---- settings

    @property
    def settings(self) -> BatchSettings:
        stored = {r["key"]: json.loads(r["value"]) for r in self.rows("SELECT key, value FROM settings")}
        known = {f.name for f in dataclasses.fields(BatchSettings)}
        return BatchSettings(**{k: v for k, v in stored.items() if k in known})

    def update_settings(self, conn: sqlite3.Connection, **values: Any) -> None:
        """Store settings inside an open :meth:`transaction`."""
        known = {f.name for f in dataclasses.fields(BatchSettings)}
        unknown = set(values) - known
        if unknown:
            raise TypeError(f"unknown batch settings {sorted(unknown)}")
        conn.executemany(
            "INSERT INTO settings (key, value) VALUES (?, ?) "
            "ON CONFLICT(key) DO UPDATE SET value = excluded.value",
            [(k, json.dumps(v)) for k, v in values.items()],
        )

    # ---- reading back

    def page_image(self, page_id: int) -> np.ndarray | None:
        """The deskewed page, (M, N) uint8, or None for a page that could not be read."""
        if not self.rows("SELECT 1 FROM pages WHERE id = ?", (page_id,)):
            raise KeyError(f"no page {page_id}")
        rows = self.rows("SELECT png FROM page_images WHERE page_id = ?", (page_id,))
        return decode_png(rows[0][0]) if rows else None

    def digit_crop(self, digit_id: int) -> np.ndarray:
        """The crop of one box as read, (h, w) uint8, 0 = ink."""
        rows = self.rows("SELECT crop_png FROM digits WHERE id = ?", (digit_id,))
        if not rows:
            raise KeyError(f"no digit {digit_id}")
        return decode_png(rows[0][0])

    def digit_probs(self, digit_id: int) -> np.ndarray | None:
        """The 11 class probabilities of one box, float32, or None for an empty box."""
        rows = self.rows("SELECT probs FROM digits WHERE id = ?", (digit_id,))
        if not rows:
            raise KeyError(f"no digit {digit_id}")
        return None if rows[0][0] is None else np.frombuffer(rows[0][0], "<f4").copy()

    def integrity_check(self) -> list[str]:
        """SQLite's full integrity check: ``[]`` when the file is sound, else the complaints."""
        result = [r[0] for r in self.rows("PRAGMA integrity_check")]
        return [] if result == ["ok"] else result

    # ---- writing pages (used by ingest_scans)

    def add_file(self, path: str | os.PathLike, sha256: str | None, size: int | None) -> int:
        """Record a source file; return its id."""
        with self.transaction() as conn:
            # A file that could not be read before is tried again: its old problem goes.
            for (file_id,) in conn.execute(
                "SELECT id FROM files WHERE sha256 IS NULL AND path = ?", (str(path),)
            ).fetchall():
                conn.execute("DELETE FROM pages WHERE file_id = ?", (file_id,))
                conn.execute("DELETE FROM files WHERE id = ?", (file_id,))
            cur = conn.execute(
                "INSERT INTO files (path, sha256, size, added) VALUES (?, ?, ?, ?)",
                (str(path), sha256, size, timestamp()),
            )
            return int(cur.lastrowid)

    def add_result(self, file_id: int, result: PageRead | ScanProblem, *, model_version: str | None) -> int:
        """Store one page read (or one problem) in one transaction; return the page id."""
        with self.transaction() as conn:
            if isinstance(result, ScanProblem):
                page_id = _insert_problem(conn, file_id, result)
            else:
                page_id = _insert_page(conn, file_id, result, model_version)
                refresh_states(conn, page_ids=[page_id])
            relabelled = refresh_layout(conn)
        self.notify(Change("page", page_ids=(page_id, *(i for i in relabelled if i != page_id))))
        return page_id

    def add_templates(self, templates: Iterable[Template]) -> None:
        """Keep the templates pages are read with (one row per name and version).

        Raises
        ------
        BatchFileError
            A template of the same name and version, but other content, is
            already in the batch (raise the template's version when it changes).
        """
        with self.transaction() as conn:
            for t in templates:
                text = json.dumps(template_to_json(t), sort_keys=True)
                row = conn.execute("SELECT json FROM templates WHERE name = ? AND version = ?",
                                   (t.name, t.version)).fetchone()
                if row is None:
                    conn.execute("INSERT INTO templates (name, version, json, added) VALUES (?, ?, ?, ?)",
                                 (t.name, t.version, text, timestamp()))
                elif row[0] != text:
                    raise BatchFileError(
                        self.path, f"template {t.label} differs from the one of that name and version that "
                        "read this batch; give the changed template a new version"
                    )

    def templates(self) -> dict[str, Template]:
        """The templates kept in the batch, by label (``orchard_card v1``)."""
        return {t.label: t for t in (template_from_json(json.loads(r[0])) for r in
                                     self.rows("SELECT json FROM templates ORDER BY name, version"))}

    def mark_complete(self, file_ids: Iterable[int]) -> None:
        """Mark files as fully read (they are skipped by later ingests)."""
        ids = list(file_ids)
        if ids:
            with self.transaction() as conn:
                conn.executemany("UPDATE files SET complete = 1 WHERE id = ?", [(i,) for i in ids])


def _connect(path: Path, *, read_only: bool) -> sqlite3.Connection:
    try:
        if read_only:
            conn = sqlite3.connect(f"{path.absolute().as_uri()}?mode=ro", uri=True,
                                   isolation_level=None, check_same_thread=False)
        else:
            conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
        conn.row_factory = sqlite3.Row
        conn.execute("PRAGMA busy_timeout = 5000")
        if not read_only:
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = FULL")
        conn.execute("PRAGMA foreign_keys = ON")
    except sqlite3.DatabaseError as exc:
        raise BatchFileError(path, f"damaged or unreadable database ({exc})") from None
    return conn


def _check_ours(conn: sqlite3.Connection, path: Path, *, read_only: bool) -> None:
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
        conn.close()
        raise BatchFileError(path, "an SQLite database, but not an Inkcount batch file")
    if version > SCHEMA_VERSION:
        conn.close()
        raise BatchFileError(
            path, f"made by a newer Inkcount (batch format {version}; this program reads up to "
            f"{SCHEMA_VERSION}); update Inkcount to open it"
        )
    if version < SCHEMA_VERSION:
        if read_only:
            conn.close()
            raise BatchFileError(path, f"batch format {version} needs upgrading: open it for writing once")
        _migrate(conn, path)


@contextmanager
def _transaction(conn: sqlite3.Connection) -> Iterator[sqlite3.Connection]:
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield conn
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


def _insert_problem(conn: sqlite3.Connection, file_id: int, problem: ScanProblem) -> int:
    if problem.page is None:
        conn.execute("DELETE FROM pages WHERE file_id = ? AND page IS NULL", (file_id,))
    cur = conn.execute(
        "INSERT INTO pages (file_id, page, problem, read_at) VALUES (?, ?, ?, ?)",
        (file_id, problem.page, problem.reason, timestamp()),
    )
    return int(cur.lastrowid)


def _insert_page(conn: sqlite3.Connection, file_id: int, page: PageRead, model_version: str | None) -> int:
    layout = None if page.problem else json.dumps([[f.name, len(f.boxes)] for f in page.fields])
    cur = conn.execute(
        "INSERT INTO pages (file_id, page, dpi, skew_deg, problem, warnings, layout, read_at, template, "
        "registration_score) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (
            file_id, page.page, float(page.dpi), float(page.skew_deg),
            page.problem, json.dumps(list(page.warnings)), layout, timestamp(),
            page.template, page.registration_score,
        ),
    )
    page_id = int(cur.lastrowid)
    if page.image is not None:
        conn.execute("INSERT INTO page_images (page_id, png) VALUES (?, ?)", (page_id, encode_png(page.image)))
    for position, f in enumerate(page.fields):
        boxes = json.dumps([[int(b.x0), int(b.y0), int(b.x1), int(b.y1)] for b in f.boxes])
        cur = conn.execute(
            "INSERT INTO fields (page_id, position, name, boxes, read_value, gap, doubts, value, state, "
            "rule_problems, typed) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (page_id, position, f.name, boxes, f.value, int(f.gap), json.dumps(list(f.doubts)), f.value, READ,
             json.dumps(f.rule_problems), f.typed),
        )
        field_id = int(cur.lastrowid)
        conn.executemany(
            "INSERT INTO digits (field_id, box, blank, prediction, confidence, model_version, value, state, "
            "probs, crop_png) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            [
                (
                    field_id, d.box, int(d.blank), d.text, float(d.confidence),
                    None if d.blank else model_version, d.text, READ,
                    None if d.probs is None else np.asarray(d.probs, "<f4").tobytes(), encode_png(d.crop),
                )
                for d in f.digits
            ],
        )
    return page_id


# --------------------------------------------------------------------------- ingest


def ingest_scans(
    batch: Batch,
    files: Iterable[str | os.PathLike],
    *,
    settings: ReadSettings = ReadSettings(),
    workers: int = 1,
    model: DigitModel | None = None,
    problems: Iterable[ScanProblem] = (),
    on_result: Callable[[PageRead | ScanProblem], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> IngestSummary:
    """Read scan files into ``batch``, committing each page as soon as it is read.

    Parameters
    ----------
    batch : Batch
        Open for writing.
    files : iterable of paths
        Scan files (e.g. from :func:`recognizer.scans.files.list_scans`). A file whose
        content is already in the batch (same sha256, under any name) is not
        read again; one interrupted earlier is resumed where it stopped.
    settings : ReadSettings
        How to load and read pages (page images are always kept).
    workers : int
        Reading processes (see :func:`recognizer.reading.stream.read_scans`).
    model : DigitModel, optional
        An already loaded model (only with ``workers=1``); otherwise the model
        of ``settings.model_path`` is loaded.
    problems : iterable of ScanProblem
        Problems met while listing the files (e.g. from ``list_scans``), stored
        with the batch like the problems met while reading.
    on_result : callable, optional
        Called with each page read or problem, after it is committed.
    should_stop : callable, optional
        Asked after each page; returning True ends the run (the pages read so
        far stay in the batch, the rest is read by the next run).

    Returns
    -------
    IngestSummary
    """
    if model is not None and workers > 1:
        raise ValueError("a loaded model can only be used with workers=1; give settings.model_path instead")
    summary = IngestSummary()
    for problem in problems:
        _store_problem(batch, problem, summary)
    todo, file_ids = _files_to_read(batch, files, summary)
    if not todo:
        return summary
    model = model or load_model(settings.model_path)
    batch.add_templates(load_template(p) for p in settings.template_paths)
    _settle_threshold(batch, model, settings)
    stored = {(r[0], r[1]) for r in batch.rows("SELECT file_id, page FROM pages WHERE page IS NOT NULL")}
    order = {path: i for i, path in enumerate(todo)}
    results = read_scans(
        todo,
        settings=dataclasses.replace(settings, keep_image=True),
        workers=workers,
        model=model if workers == 1 else None,
        skip=lambda path, page: (file_ids[path], page) in stored,
    )
    finished = 0
    try:
        for result in results:
            current = order[Path(result.source)]
            batch.mark_complete(file_ids[p] for p in todo[finished:current])
            finished = max(finished, current)
            page_id = batch.add_result(file_ids[Path(result.source)], result, model_version=model.version)
            _count(batch, summary, result, page_id)
            if on_result is not None:
                on_result(result)
            if should_stop is not None and should_stop():
                summary.stopped = True
                break
        else:
            batch.mark_complete(file_ids[p] for p in todo[finished:])
    finally:
        results.close()
    return summary


def _files_to_read(batch: Batch, files: Iterable[str | os.PathLike], summary: IngestSummary):
    """Hash the files; return those to read (new or unfinished) and their file ids."""
    known = {r["sha256"]: r for r in batch.rows("SELECT id, path, sha256, complete FROM files WHERE sha256 IS NOT NULL")}
    todo: list[Path] = []
    file_ids: dict[Path, int] = {}
    for raw in files:
        path = Path(raw)
        digest = _sha256(path)
        if isinstance(digest, ScanProblem):
            _store_problem(batch, digest, summary)
            continue
        sha, size = digest
        row = known.get(sha)
        if row is not None and (row["complete"] or row["id"] in file_ids.values()):
            summary.known.append((str(path), row["path"]))
            continue
        if row is None:
            file_id = batch.add_file(path, sha, size)
            summary.files_added += 1
            known[sha] = {"id": file_id, "path": str(path), "complete": 0}
        else:
            file_id = row["id"]
        todo.append(path)
        file_ids[path] = file_id
    return todo, file_ids


def _store_problem(batch: Batch, problem: ScanProblem, summary: IngestSummary) -> None:
    file_id = batch.add_file(problem.source, None, None)
    batch.add_result(file_id, problem, model_version=None)
    batch.mark_complete([file_id])
    summary.problems.append(problem)


def _settle_threshold(batch: Batch, model: DigitModel, settings: ReadSettings) -> None:
    """Set the threshold from the model's calibration if the batch has none yet."""
    current = batch.settings
    with batch.transaction() as conn:
        values: dict[str, Any] = {"model_version": model.version, "pdf_dpi": settings.pdf_dpi,
                                  "model_path": settings.model_path}
        if current.threshold is None:
            values.update(threshold=float(model.threshold_for(current.target_error)),
                          target_error=current.target_error, threshold_source="target")
        batch.update_settings(conn, **values)


def _count(batch: Batch, summary: IngestSummary, result: PageRead | ScanProblem, page_id: int) -> None:
    if isinstance(result, ScanProblem):
        summary.problems.append(result)
        return
    if result.problem:
        summary.pages_with_problems += 1
        return
    summary.pages_read += 1
    fields = batch.rows("SELECT state FROM fields WHERE page_id = ?", (page_id,))
    digits = batch.rows(
        "SELECT d.state FROM digits d JOIN fields f ON f.id = d.field_id WHERE f.page_id = ? AND NOT d.blank",
        (page_id,),
    )
    summary.fields += len(fields)
    summary.fields_to_check += sum(1 for r in fields if r[0] != READ)
    summary.digits += len(digits)
    summary.digits_to_check += sum(1 for r in digits if r[0] != READ)


# --------------------------------------------------------------------------- samples


def labelled_samples(
    batch: Batch,
) -> tuple[list[np.ndarray], list[np.ndarray | None], np.ndarray, list[SampleRef]]:
    """Every box a person corrected or confirmed, as a labelled sample for retraining.

    Returns
    -------
    crops : list of (h, w) uint8 ndarray
        The box crops as read (0 = ink, 255 = paper).
    cells : list of (28, 28) float32 ndarray, 0..1, or None
        The model input of each box, cut again from the stored page image as
        the reader cuts it (:func:`recognizer.page.cells.cut_cell` at the page's
        dpi; white ink on black, MNIST layout). None when the box comes out
        blank on re-cutting, or its re-cut crop is not the size of the stored
        crop (the page and the box no longer agree): nothing to learn from.
    labels : (n,) int64 ndarray
        Class index: 0-9 for a digit, :data:`recognizer.digits.model.NOT_A_DIGIT`
        for a mark a person said is not a digit (value set to empty).
    refs : list of SampleRef
        File, page, field, box, state and the reviewer of the last action.

    Boxes of a field whose value was set as a whole with a different number of
    digits carry no per-box label and are left out, as are empty boxes.
    """
    rows = batch.rows(
        """
        SELECT d.id, d.crop_png, d.value, d.state, d.box, f.name, f.boxes, f.page_id, p.page, p.dpi, fl.path,
               (SELECT a.reviewer FROM actions a WHERE a.field_id = f.id AND a.undone_by IS NULL
                ORDER BY a.id DESC LIMIT 1) AS reviewer
        FROM digits d JOIN fields f ON f.id = d.field_id JOIN pages p ON p.id = f.page_id
        JOIN files fl ON fl.id = p.file_id
        WHERE d.state IN ('corrected', 'confirmed') AND NOT d.blank AND d.value IS NOT NULL
        ORDER BY d.id
        """
    )
    crops = [decode_png(r["crop_png"]) for r in rows]
    pages: dict[int, np.ndarray | None] = {}
    cells = []
    for r, crop in zip(rows, crops):
        if r["page_id"] not in pages:
            pages[r["page_id"]] = batch.page_image(r["page_id"])
        cells.append(_recut(pages[r["page_id"]], json.loads(r["boxes"])[r["box"]], float(r["dpi"]), crop.shape))
    labels = np.array([int(r["value"]) if r["value"] else NOT_A_DIGIT for r in rows], dtype=np.int64)
    refs = [SampleRef(r["id"], r["path"], r["page"], r["name"], r["box"], r["state"], r["reviewer"]) for r in rows]
    return crops, cells, labels, refs


def _recut(image: np.ndarray | None, box: list[int], dpi: float, shape: tuple[int, ...]) -> np.ndarray | None:
    """The MNIST cell of ``box`` cut again from ``image``; None if blank or of another crop size."""
    if image is None:
        return None
    cell = cut_cell(image, Box(*box), dpi=dpi)
    return None if cell.blank or cell.crop.shape != shape else cell.mnist
