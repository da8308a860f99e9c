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
* **Creation** is atomic (:mod:`recognizer.batch.creation`): a killed creator
  leaves no batch or a complete one; of two creators at once the second is
  told the batch is in use; an empty or half-created file of an older
  Inkcount is made afresh when opened for writing, a file holding data never.
* **Checks** (:mod:`recognizer.batch.checks`): opening checks tables,
  settings, stored JSON and values against the schema version, and a stored
  image's size is checked before it is decoded; a failure is a
  :class:`BatchFileError` naming the file and the reason.
* **Paths**: a scan's path is stored as text, bytes of its name that are not
  UTF-8 as visible ``\\xNN`` escapes (:func:`stored_path`).
* **Schema versions**: :data:`recognizer.batch.schema.MIGRATIONS` is an ordered list of functions;
  entry ``i`` brings a file from version ``i`` to ``i + 1`` (entry 0 creates
  the tables of version 1). Opening an older file runs the missing steps, each
  in one transaction, so a failed step leaves the file as it was. A file of a
  newer version is refused with a clear message.
* **Images** (:mod:`recognizer.batch.images`): each page image (deskewed,
  grey) is kept for the eye at a display resolution (150 dpi WebP, or whole
  as a 1-bit PNG when the page is bitonal), with its scale; :meth:`Batch.page_image`
  gives it back on the full-resolution grid the box coordinates refer to.
  The crop of every box is kept at full resolution, lean (plain paper and
  black lines away from the ink, as scanned near it) and so that the cell cut
  from it is the reader's to the bit; a field's crops are kept side by side
  in one image, its crop sheet (:meth:`Batch.digit_crop` gives one back).
  Re-reading with another model and learning cut the cells again from those
  crops (:class:`recognizer.batch.samples.StoredPages`), so nothing depends
  on the original scan files staying where they were. Each file's content hash,
  size, path and absolute location are kept, so that a box can also be cut
  afresh from the original scan while it is still there.
* **Probabilities**: the 11 class probabilities of each written box as 44
  bytes (little-endian float32, classes as in :data:`recognizer.digits.model.CLASSES`).

Tables and their versions are described in :mod:`recognizer.batch.schema`;
the writer lock in :mod:`recognizer.batch.lock`; re-flagging stored fields
with the one rule of :mod:`recognizer.states` in :mod:`recognizer.batch.flags`.
Reading scans into a batch is :func:`recognizer.ingest.ingest_scans`.
"""

from __future__ import annotations

import dataclasses
import json
import os
import sqlite3
import threading
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from recognizer.batch import checks, schema
from recognizer.batch.images import (
    PageImage, SheetCache, StoredImages, decode_png, encode_png, full_size, is_lossless, stored_images,
)
from recognizer.batch.opening import (
    APPLICATION_ID, FORMAT_NAME, BatchFileError, BatchInUseError, build_in_place, check_header, check_ours, connect,
    leftover, lock_for_writing, remove_dead_temporaries, worth_a_look,
)
from recognizer.batch.lock import WriterLock
from recognizer.digits.model import DigitModel, timestamp
from recognizer.reading.page import PageRead
from recognizer.batch.flags import refresh_layout, refresh_states
from recognizer.states import DEFAULT_TARGET_ERROR, State
from recognizer.scans.files import ScanProblem, printable_name
from recognizer.forms.template import Template, TemplateError
from recognizer.forms.template_file import template_from_json, template_to_json

__all__ = [
    "APPLICATION_ID",
    "FLAG_RULE",
    "FORMAT_NAME",
    "SUFFIX",
    "Batch",
    "BatchFileError",
    "BatchInUseError",
    "BatchSettings",
    "Change",
    "PageImage",
    "encode_png",
    "decode_png",
    "stored_path",
]

SUFFIX = ".inkcount"
#: Version of the flagging rule of :mod:`recognizer.states` (2: the value as a whole, and page
#: warnings and layouts only for the fields they concern).
FLAG_RULE = 2


# --------------------------------------------------------------------------- records


@dataclass(frozen=True)
class Change:
    """What a committed change touched, announced to a batch's observers.

    ``kind`` is ``"page"`` (a page read into the batch; ``page_ids`` also
    names pages whose layout flag changed), ``"review"`` (a review action or
    its undo; ``field_ids`` names its field first, then any other field whose
    rule problems or state the template rules checked again changed) or ``"flags"`` (threshold or model changed: any state may have
    changed).
    """

    kind: str
    page_ids: tuple[int, ...] = ()
    field_ids: tuple[int, ...] = ()
    digit_ids: tuple[int, ...] = ()


@dataclass(frozen=True)
class BatchSettings:
    """Batch-wide settings.

    ``threshold`` is ``None`` until the first page is read (then it is set from
    the model's calibration for ``target_error``, unless set by hand).
    ``threshold_source`` is ``"target"`` (follows the model and the target)
    or ``"manual"``.

    Learning during the batch (:mod:`recognizer.learning`): ``learning`` turns
    it on or off; a round runs once ``learning_every`` more digits were
    checked (corrected or confirmed) than at the last round
    (``learned_at``); ``learning_rounds`` counts the rounds run (accepted or
    refused) and ``learning_last`` keeps what the last one did (a
    :class:`recognizer.learning.LearningRound` as JSON). The learned models
    are files next to the batch; ``model_path`` names the one in use.

    ``flag_rule`` is the version of the rule for "to check"
    (:mod:`recognizer.states`) the stored states follow: opening a batch
    flagged by an older rule for writing flags it again (:data:`FLAG_RULE`).
    """

    threshold: float | None = None
    target_error: float = DEFAULT_TARGET_ERROR
    threshold_source: str = "target"
    model_path: str | None = None
    model_version: str | None = None
    pdf_dpi: float | None = None
    learning: bool = True
    learning_every: int = 300
    learned_at: int = 0
    learning_rounds: int = 0
    learning_last: dict[str, Any] | None = None
    flag_rule: int = 1

    def threshold_with(self, model: DigitModel) -> float | None:
        """The threshold the batch has with ``model``: the model's for the target, or the one set by hand."""
        return float(model.threshold_for(self.target_error)) if self.threshold_source == "target" else self.threshold


_SETTING_NAMES = frozenset(f.name for f in dataclasses.fields(BatchSettings))

# --------------------------------------------------------------------------- helpers


#: A file's path as the batch keeps it (the one rule, :func:`recognizer.scans.files.printable_name`).
stored_path = printable_name


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

    def __init__(self, path: Path, conn: sqlite3.Connection, lock: WriterLock | None) -> None:
        self.path = path
        self._conn = conn
        self._lock = lock
        self._guard = threading.RLock()
        self._observers: list[Callable[[Change], None]] = []
        self._sheets = SheetCache()

    # ---- opening and closing

    @classmethod
    def create(cls, path: str | os.PathLike) -> Batch:
        """Create a new, empty batch file, atomically (see the module notes).

        Refuses to overwrite an existing file, unless it is an empty or
        half-created batch file (then it is made afresh).

        Raises
        ------
        BatchInUseError
            Another process is creating or writing this batch.
        BatchFileError
            A file of that name exists, or the folder cannot be written.
        """
        path = Path(path)
        if path.exists() and not worth_a_look(path):
            raise BatchFileError(path, "a file of that name already exists")
        return cls._open_locked(path, lock_for_writing(path), create=True, fresh=True)

    @classmethod
    def _open_locked(cls, path: Path, lock: WriterLock, *, create: bool, fresh: bool = False) -> Batch:
        """Open ``path`` for writing under ``lock`` (released on failure), creating it first if
        ``create`` and it is missing or half-created; ``fresh``: it must be created here."""
        try:
            if path.exists() and leftover(path):
                build_in_place(path, replace=True, settings={'flag_rule': FLAG_RULE})
            elif not path.exists() and create:
                build_in_place(path, replace=False, settings={'flag_rule': FLAG_RULE})
            elif fresh:
                raise BatchFileError(path, "a file of that name already exists")
            remove_dead_temporaries(path)
            check_header(path)
            conn = connect(path, read_only=False)
            check_ours(conn, path, read_only=False)
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
            Create the file if it does not exist yet (atomically, as :meth:`create`).
            Opened for writing, an empty or half-created batch file (left by an
            older Inkcount killed while creating it) is made afresh.

        Raises
        ------
        BatchInUseError
            Another process has it open for writing.
        BatchFileError
            Missing, not SQLite, SQLite but not a batch, damaged, or written by
            a newer Inkcount.
        """
        path = Path(path)
        if read_only:
            check_header(path)
            conn = connect(path, read_only=True)
            check_ours(conn, path, read_only=True)
            batch = cls(path, conn, None)
        else:
            batch = cls._open_locked(path, lock_for_writing(path), create=create)
        try:
            if not read_only and batch.settings.flag_rule < FLAG_RULE:
                with batch.transaction() as conn:  # flagged by an older rule: flag it again, once
                    refresh_layout(conn)
                    refresh_states(conn)
                    batch.update_settings(conn, flag_rule=FLAG_RULE)
        except BaseException:
            batch.close()
            raise
        return batch

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

    # ---- low-level access (for the other modules of recognizer.batch)

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
        """The batch's settings, checked (:class:`BatchFileError` for a damaged one)."""
        stored = {r["key"]: r["value"] for r in self.rows("SELECT key, value FROM settings")}
        try:
            return BatchSettings(**checks.settings_values(stored, _SETTING_NAMES))
        except ValueError as exc:
            raise BatchFileError(self.path, str(exc)) from None

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
        """The deskewed page, (M, N) uint8, on the full-resolution grid the box coordinates refer to
        (a page kept at a display resolution is scaled back), or None for a page that could not be read."""
        stored = self.stored_page(page_id)
        return None if stored is None else full_size(stored.image, stored.width, stored.height)

    def stored_page(self, page_id: int) -> PageImage | None:
        """The page image as stored (see :class:`PageImage`), or None for a page that could not be read."""
        if not self.rows("SELECT 1 FROM pages WHERE id = ?", (page_id,)):
            raise KeyError(f"no page {page_id}")
        rows = self.rows("SELECT png, scale, width, height FROM page_images WHERE page_id = ?", (page_id,))
        if not rows:
            return None
        data, scale, width, height = rows[0]
        image = decode_png(data, self.path)
        if width is None:
            height, width = image.shape
        if abs(image.shape[1] - width * scale) > 2 or abs(image.shape[0] - height * scale) > 2:
            raise BatchFileError(self.path, f"the image of page {page_id} is not the size its scale says")
        return PageImage(image, float(scale), int(width), int(height), is_lossless(data))

    def digit_crop(self, digit_id: int) -> np.ndarray:
        """The crop of one box as stored, (h, w) uint8, 0 = ink: the box and the reader's margin round
        it (lean: :func:`recognizer.batch.images.lean_crop`), from the digit's own bytes or its field's
        crop sheet."""
        rows = self.rows("SELECT field_id, box, crop_png FROM digits WHERE id = ?", (digit_id,))
        if not rows:
            raise KeyError(f"no digit {digit_id}")
        field_id, box, data = rows[0]
        if len(data):
            return decode_png(data, self.path)
        crops = self._sheet_crops(field_id)
        if not 0 <= box < len(crops):
            raise BatchFileError(self.path, f"digit {digit_id} names a box its field's crops do not have")
        return crops[box].copy()

    def _sheet_crops(self, field_id: int) -> list[np.ndarray]:
        """The crops of a field's boxes cut out of its crop sheet (:class:`SheetCache`: the last few kept;
        copy one before handing it out)."""
        rows = self.rows("SELECT s.margin, s.image, f.boxes FROM crop_sheets s JOIN fields f ON f.id = s.field_id "
                         "WHERE s.field_id = ?", (field_id,))
        if not rows:
            raise BatchFileError(self.path, f"the crops of field {field_id} are missing")
        try:
            return self._sheets.crops(field_id, *rows[0])
        except ValueError as exc:
            raise BatchFileError(self.path, str(exc)) from None

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
        """Record a source file (its path as :func:`stored_path` writes it, and where it is: its absolute
        path); return its id."""
        text = stored_path(path)
        location = stored_path(os.path.abspath(os.fspath(path)))
        with self.transaction() as conn:
            # A file that could not be read before is tried again: its old problem goes.
            for (file_id,) in conn.execute(
                "SELECT id FROM files WHERE sha256 IS NULL AND path = ?", (text,)
            ).fetchall():
                conn.execute("DELETE FROM pages WHERE file_id = ?", (file_id,))
                conn.execute("DELETE FROM files WHERE id = ?", (file_id,))
            cur = conn.execute(
                "INSERT INTO files (path, sha256, size, added, location) VALUES (?, ?, ?, ?, ?)",
                (text, sha256, size, timestamp(), location),
            )
            return int(cur.lastrowid)

    def set_location(self, sha256: str, location: str | os.PathLike) -> None:
        """Record where the scan file of content ``sha256`` is now (its absolute path), after it was found
        somewhere other than where it was read; its path as given stays as it was."""
        text = stored_path(os.path.abspath(os.fspath(location)))
        with self.transaction() as conn:
            conn.execute("UPDATE files SET location = ? WHERE sha256 = ?", (text, sha256))

    def add_result(self, file_id: int, result: PageRead | ScanProblem, *, model_version: str | None) -> int:
        """Store one page read (or one problem) in one transaction; return the page id."""
        images = None if isinstance(result, ScanProblem) else stored_images(result)  # (before taking the lock)
        with self.transaction() as conn:
            if isinstance(result, ScanProblem):
                page_id = _insert_problem(conn, file_id, result)
            else:
                page_id = _insert_page(conn, file_id, result, model_version, images)
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
        try:
            return {t.label: t for t in (
                template_from_json(checks.load_json(r[0], "a stored template", chars=checks.LIMITS["template_chars"],
                                                    depth=checks.LIMITS["template_depth"]))
                for r in self.rows("SELECT json FROM templates ORDER BY name, version"))}
        except (ValueError, TemplateError) as exc:
            raise BatchFileError(self.path, f"a stored template is damaged ({exc})") from None

    def mark_complete(self, file_ids: Iterable[int]) -> None:
        """Mark files as fully read (they are skipped by later ingests)."""
        ids = list(file_ids)
        if ids:
            with self.transaction() as conn:
                conn.executemany("UPDATE files SET complete = 1 WHERE id = ?", [(i,) for i in ids])


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


def _insert_page(conn: sqlite3.Connection, file_id: int, page: PageRead, model_version: str | None,
                 images: StoredImages) -> int:
    layout = page.layout()
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
    if images.page is not None:
        data, scale = images.page
        height, width = page.image.shape[:2]
        conn.execute("INSERT INTO page_images (page_id, png, scale, width, height) VALUES (?, ?, ?, ?, ?)",
                     (page_id, data, scale, width, height))
    for position, (f, crops) in enumerate(zip(page.fields, images.fields)):
        boxes = json.dumps([[int(b.x0), int(b.y0), int(b.x1), int(b.y1)] for b in f.boxes])
        cur = conn.execute(
            "INSERT INTO fields (page_id, position, name, boxes, read_value, gap, doubts, value, state, "
            "rule_problems, typed) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (page_id, position, f.name, boxes, f.value, int(f.gap), json.dumps(list(f.doubts)), f.value,
             State.READ.value,
             json.dumps(f.rule_problems), f.typed),
        )
        field_id = int(cur.lastrowid)
        if crops.sheet is not None:
            conn.execute("INSERT INTO crop_sheets (field_id, margin, image) VALUES (?, ?, ?)",
                         (field_id, crops.margin, crops.sheet))
        conn.executemany(
            "INSERT INTO digits (field_id, box, blank, prediction, confidence, model_version, value, state, "
            "probs, crop_png) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            [
                (
                    field_id, d.box, int(d.blank), d.text, float(d.confidence),
                    None if d.blank else model_version, d.text, State.READ.value,
                    None if d.probs is None else np.asarray(d.probs, "<f4").tobytes(), crop,
                )
                for d, crop in zip(f.digits, crops.own)
            ],
        )
    return page_id


