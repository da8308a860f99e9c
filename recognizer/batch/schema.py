"""The batch file's tables, and the steps that bring an older file up to date.

The schema version is SQLite's ``PRAGMA user_version``. :data:`MIGRATIONS` is
an ordered list of functions; entry ``i`` brings a file from version ``i`` to
``i + 1`` (entry 0 creates the tables of version 1). Opening an older file runs
the missing steps, each in one transaction, so a failed step leaves the file as
it was.

Tables (version 1)
------------------
``inkcount_meta(key, value)``; ``settings(key, value JSON)`` (threshold,
target residual error, threshold source, model path and version, PDF
resolution); ``files(path, sha256, size, added, complete)``; ``pages(file,
page, dpi, skew_deg, problem, warnings JSON, layout JSON, odd_layout,
read_at)`` — a row with ``page`` NULL is a problem with the whole file;
``page_images(page, png)`` (apart, so that queries on pages never wade
through megabytes of image); ``fields(page, position, name, boxes JSON,
read_value, gap, doubts JSON, value, whole, resolution, state)`` (``doubts``: reasons
to distrust the field's boxes, found while finding them); ``digits(field, box,
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
Version 4 records spot checks (:mod:`recognizer.review.audit`), so that a
statement of the residual error can be reproduced: ``audits(drawn_at,
reviewer, seed, method, asked, population, after_action)`` (who drew the
sample, when, with which seed and method, how many fields were asked for, how
many fields were accepted without a person then, and the last action logged
before the draw: a drawn field is audited once a person confirmed or corrected
it in a later action) and ``audit_fields(audit_id, field_id, position,
value)`` (the fields drawn, in the order they are checked, each with the
value accepted when it was drawn).
Version 5 makes the batch file lean (:mod:`recognizer.batch.images`): a page
image may be kept at a display resolution, so ``page_images`` gains ``scale``
(stored pixels per pixel of the page as read; 1 for every image of an older
file, which stays as it was) and ``width``, ``height`` (the page's size as
read, which box coordinates refer to; NULL: the stored image's own); the
``png`` column holds PNG or WebP bytes (and crops in ``digits.crop_png``
likewise). ``files.location`` is the absolute path of the scan when it was
read (``path`` stays as it was given), to find the original again for
cutting a box afresh at full resolution; NULL in older files (``path`` is
tried).
Version 6 keeps the box crops of a field together: ``crop_sheets(field_id,
margin, image)`` holds one image per field, the crops of its boxes side by
side in the order of the boxes (each the box and ``margin`` pixels round it,
all at the top; :func:`recognizer.batch.images.sheet_layout`), as PNG or
lossless WebP. A digit whose ``crop_png`` is empty (zero bytes) has its crop
there; a digit with bytes of its own keeps them (every crop of an older file,
and the crops of a field that are not all the reader's cut). The crops are
lean (:func:`recognizer.batch.images.lean_crop`): plain paper and black lines
away from the ink, the same cell to the bit.
The meaning of the states and of ``value``/``whole``/``resolution`` is in
:mod:`recognizer.states` and :mod:`recognizer.review.actions`.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Callable

__all__ = ["MIGRATIONS", "SCHEMA_VERSION", "MigrationError", "migrate"]


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


def _schema_v4(conn: sqlite3.Connection) -> None:
    """Version 4: spot checks of the fields accepted without a person, and the fields each one drew."""
    _run_script(
        conn,
        """
        CREATE TABLE audits (
            id INTEGER PRIMARY KEY,
            drawn_at TEXT NOT NULL,
            reviewer TEXT NOT NULL,
            seed INTEGER NOT NULL,
            method TEXT NOT NULL,
            asked INTEGER NOT NULL,
            population INTEGER NOT NULL,
            after_action INTEGER NOT NULL DEFAULT 0
        );
        CREATE TABLE audit_fields (
            audit_id INTEGER NOT NULL REFERENCES audits(id),
            field_id INTEGER NOT NULL REFERENCES fields(id),
            position INTEGER NOT NULL,
            value TEXT NOT NULL,
            PRIMARY KEY (audit_id, field_id)
        );
        """
    )


def _schema_v5(conn: sqlite3.Connection) -> None:
    """Version 5: page images at a display resolution (their scale and the page's full size), and
    where each scan file was when it was read. (A column already there is left as it is.)"""
    added = {
        "page_images": ("scale REAL NOT NULL DEFAULT 1", "width INTEGER", "height INTEGER"),
        "files": ("location TEXT",),
    }
    for table, columns in added.items():
        have = {r[1] for r in conn.execute(f"PRAGMA table_info({table})")}
        for column in columns:
            if column.split()[0] not in have:
                conn.execute(f"ALTER TABLE {table} ADD COLUMN {column}")


def _schema_v6(conn: sqlite3.Connection) -> None:
    """Version 6: the crops of each field's boxes in one image (a digit's own ``crop_png`` left empty)."""
    conn.execute(
        """
        CREATE TABLE IF NOT EXISTS crop_sheets (
            field_id INTEGER PRIMARY KEY REFERENCES fields(id),
            margin INTEGER NOT NULL,
            image BLOB NOT NULL
        )
        """
    )


#: Schema steps in order: ``MIGRATIONS[i]`` brings a file from version i to i + 1.
MIGRATIONS: list[Callable[[sqlite3.Connection], None]] = [_schema_v1, _schema_v2, _schema_v3, _schema_v4,
                                                       _schema_v5, _schema_v6]
#: Schema version written by this program.
SCHEMA_VERSION = len(MIGRATIONS)


class MigrationError(Exception):
    """A schema step failed; the file is as it was before that step."""

    def __init__(self, version: int, cause: Exception) -> None:
        self.version = version
        self.cause = cause
        super().__init__(f"could not upgrade the batch from format {version} to {version + 1} ({cause}); "
                         "the file is unchanged")


def migrate(conn: sqlite3.Connection) -> None:
    """Run the missing schema steps, one transaction each.

    Raises
    ------
    MigrationError
        A step failed (it was rolled back; earlier steps stay).
    """
    current = conn.execute("PRAGMA user_version").fetchone()[0]
    for version in range(current, len(MIGRATIONS)):
        try:
            conn.execute("BEGIN IMMEDIATE")
            MIGRATIONS[version](conn)
            conn.execute(f"PRAGMA user_version = {version + 1}")
            conn.execute("COMMIT")
        except Exception as exc:
            conn.execute("ROLLBACK")
            raise MigrationError(version, exc) from exc
