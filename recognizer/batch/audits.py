"""The SQL of spot checks: the fields accepted without a person, the spot checks drawn, and their answers.

A field is *accepted without a person* when its state is ``read``, it has no
resolution and no person ever acted on it (no action of
:data:`recognizer.batch.edits.REVIEW_KINDS` in the log, undone or not). A
field drawn into a spot check is *audited* once a person confirmed,
corrected or marked it unreadable in an action logged after the draw
(``audits.after_action``) that is still in effect; the value it then has is
the person's. What a spot check is for, and how it is drawn, is in
:mod:`recognizer.review.audit`; the tables are in
:mod:`recognizer.batch.schema` (version 4).
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from typing import Any

from recognizer.batch.edits import REVIEW_KINDS
from recognizer.batch.store import Batch
from recognizer.states import State

__all__ = [
    "AuditRecord", "AuditFieldRow", "UnattendedField", "add_audit", "audit_fields", "audit_records",
    "count_unattended", "unattended_fields",
]

_KINDS = ",".join(f"'{k}'" for k in REVIEW_KINDS)
_UNATTENDED = (
    f"f.state = '{State.READ.value}' AND f.resolution IS NULL "
    f"AND NOT EXISTS (SELECT 1 FROM actions a WHERE a.field_id = f.id AND a.kind IN ({_KINDS}))"
)


@dataclass(frozen=True)
class UnattendedField:
    """A field accepted without a person, with its place (file id, page number, position) and value."""

    field_id: int
    page_id: int
    file_id: int
    page: int
    position: int
    value: str


def unattended_fields(conn: sqlite3.Connection | Batch) -> list[UnattendedField]:
    """The fields accepted without a person, by file, page and place on the page."""
    rows = _query(
        conn,
        "SELECT f.id, f.page_id, p.file_id, p.page, f.position, f.value FROM fields f "
        f"JOIN pages p ON p.id = f.page_id WHERE {_UNATTENDED} ORDER BY p.file_id, p.page, f.position, f.id",
    )
    return [UnattendedField(*r) for r in rows]


def count_unattended(batch: Batch, *, read_after: str | None = None) -> int:
    """How many fields are accepted without a person (only those on pages read after ``read_after``, if given)."""
    sql = f"SELECT COUNT(*) FROM fields f JOIN pages p ON p.id = f.page_id WHERE {_UNATTENDED}"
    params: tuple = ()
    if read_after is not None:
        sql += " AND p.read_at > ?"
        params = (read_after,)
    return int(batch.rows(sql, params)[0][0])


def _query(source: sqlite3.Connection | Batch, sql: str, params: tuple = ()) -> list[Any]:
    if isinstance(source, Batch):
        return source.rows(sql, params)
    return source.execute(sql, params).fetchall()


@dataclass(frozen=True)
class AuditRecord:
    """One spot check as drawn: when, by whom, seed and method, how many fields were asked for, how many
    were accepted without a person then (``population``), and the last action logged before the draw."""

    audit_id: int
    drawn_at: str
    reviewer: str
    seed: int
    method: str
    asked: int
    population: int
    after_action: int


def add_audit(conn: sqlite3.Connection, *, drawn_at: str, reviewer: str, seed: int, method: str, asked: int,
              population: int, fields: list[tuple[int, str]]) -> AuditRecord:
    """Record a spot check and its fields ``(field id, value accepted)``, in order, inside a transaction."""
    after = int(conn.execute("SELECT COALESCE(MAX(id), 0) FROM actions").fetchone()[0])
    cur = conn.execute(
        "INSERT INTO audits (drawn_at, reviewer, seed, method, asked, population, after_action) "
        "VALUES (?, ?, ?, ?, ?, ?, ?)",
        (drawn_at, reviewer, int(seed), method, int(asked), int(population), after),
    )
    audit_id = int(cur.lastrowid)
    conn.executemany("INSERT INTO audit_fields (audit_id, field_id, position, value) VALUES (?, ?, ?, ?)",
                     [(audit_id, fid, k, value) for k, (fid, value) in enumerate(fields)])
    return AuditRecord(audit_id, drawn_at, reviewer, int(seed), method, int(asked), int(population), after)


def audit_records(batch: Batch) -> list[AuditRecord]:
    """Every spot check of the batch, oldest first."""
    return [AuditRecord(*r) for r in batch.rows(
        "SELECT id, drawn_at, reviewer, seed, method, asked, population, after_action FROM audits ORDER BY id")]


@dataclass(frozen=True)
class AuditFieldRow:
    """A field drawn into a spot check: its place, the value accepted when drawn (``drawn``), its value and
    state now, whether a person answered it after the draw (``done``), and the lowest confidence of its boxes."""

    field_id: int
    position: int
    drawn: str
    file_id: int
    file: str
    page: int
    name: str
    field_position: int
    value: str
    state: str
    done: bool
    lowest: float | None


def audit_fields(batch: Batch, audit: AuditRecord) -> list[AuditFieldRow]:
    """The fields drawn into ``audit``, in the order they are checked."""
    rows = batch.rows(
        f"""
        SELECT af.field_id, af.position, af.value AS drawn, p.file_id, fl.path, p.page, f.name, f.position,
               f.value, f.state,
               EXISTS (SELECT 1 FROM actions a WHERE a.field_id = af.field_id AND a.id > ?
                       AND a.kind IN ({_KINDS}) AND a.undone_by IS NULL) AS done,
               (SELECT MIN(d.confidence) FROM digits d WHERE d.field_id = f.id AND NOT d.blank) AS lowest
        FROM audit_fields af JOIN fields f ON f.id = af.field_id JOIN pages p ON p.id = f.page_id
        JOIN files fl ON fl.id = p.file_id
        WHERE af.audit_id = ? ORDER BY af.position
        """,
        (audit.after_action, audit.audit_id),
    )
    return [AuditFieldRow(r[0], r[1], r[2], r[3], r[4], r[5], r[6], r[7], r[8], r[9], bool(r[10]), r[11])
            for r in rows]
