"""Read-only views of a batch for the window, the commands and ingest: the files and
pages stored, per-page counts, one field with its boxes, the fields of a page, and
what a threshold would do.

Everything here only reads what is stored (no recognition, no writes); the
meaning of the states is in :mod:`recognizer.states`, the tables in
:mod:`recognizer.batch.schema`. Functions taking ``field_ids`` or ``page_ids``
return nothing for an empty list. The rows the review package works from are
in :mod:`recognizer.batch.review_rows`.
"""

from __future__ import annotations

import json
from collections import Counter, defaultdict
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np

from recognizer.batch.store import Batch
from recognizer.states import State, combine_states, digit_to_check

READ, TO_CHECK, CORRECTED, CONFIRMED, UNREADABLE = (
    State.READ.value, State.TO_CHECK.value, State.CORRECTED.value, State.CONFIRMED.value, State.UNREADABLE.value)

__all__ = [
    "BoxEdges",
    "decode_boxes",
    "StoredFile",
    "StoredPage",
    "FieldPlace",
    "stored_files",
    "stored_pages",
    "page_dpi",
    "PageSource",
    "page_source",
    "page_digits",
    "find_field_id",
    "field_place",
    "count_fields",
    "state_counts",
    "PageSummary",
    "DigitView",
    "FieldView",
    "PageField",
    "OpenDigits",
    "page_summaries",
    "field_states",
    "load_field",
    "page_fields",
    "pages_of_fields",
    "digit_states",
    "open_digits",
    "labelled_count",
]

#: A box's pixel edges ``(x0, y0, x1, y1)`` on its stored page.
BoxEdges = tuple[int, int, int, int]


def _marks(ids: list[int]) -> str:
    return ",".join("?" * len(ids))


def decode_boxes(text: str) -> tuple[BoxEdges, ...]:
    """A field's boxes from the JSON of ``fields.boxes``."""
    return tuple(tuple(b) for b in json.loads(text))



# --------------------------------------------------------------------------- files


@dataclass(frozen=True)
class StoredFile:
    """A source file of the batch: its path as given, its content's sha256 (None for a
    file that could not be read) and whether all its pages are read."""

    file_id: int
    path: str
    sha256: str | None
    complete: bool


def stored_files(batch: Batch) -> list[StoredFile]:
    """Every source file of the batch, in the order they were added."""
    return [StoredFile(r["id"], r["path"], r["sha256"], bool(r["complete"]))
            for r in batch.rows("SELECT id, path, sha256, complete FROM files ORDER BY id")]


# --------------------------------------------------------------------------- pages


@dataclass(frozen=True)
class PageSource:
    """Where a page came from: its scan file as given (``path``) and where it was when read
    (``location``, None in batches older than format 5), the file's sha256 and size, the page's
    number in it, the resolution it was read at and the template that read it (its label)."""

    page_id: int
    path: str
    location: str | None
    sha256: str | None
    size: int | None
    page: int | None
    dpi: float | None
    template: str | None


def page_source(batch: Batch, page_id: int) -> PageSource:
    """The scan file and page a stored page came from (KeyError: no such page)."""
    rows = batch.rows("SELECT p.id, fl.path, fl.location, fl.sha256, fl.size, p.page, p.dpi, p.template "
                      "FROM pages p JOIN files fl ON fl.id = p.file_id WHERE p.id = ?", (page_id,))
    if not rows:
        raise KeyError(f"no page {page_id}")
    return PageSource(*rows[0])


def page_digits(batch: Batch, page_id: int) -> dict[tuple[int, int, int, int], int]:
    """The digit (its id, for :meth:`Batch.digit_crop`) of every box of a page, by the box's edges
    (x0, y0, x1, y1)."""
    digits = {}
    for boxes, box, digit_id in batch.rows("SELECT f.boxes, d.box, d.id FROM digits d JOIN fields f "
                                           "ON f.id = d.field_id WHERE f.page_id = ?", (page_id,)):
        edges = json.loads(boxes)[box]
        digits[tuple(int(v) for v in edges)] = digit_id
    return digits



@dataclass(frozen=True)
class StoredPage:
    """A page of the batch, or a problem with a whole file (``page`` None).

    ``problem`` says why it could not be read (None: read); ``template`` names
    the form template that read it (``orchard_card v1``; None without one).
    """

    page_id: int
    file_id: int
    file: str
    page: int | None
    problem: str | None
    template: str | None


def stored_pages(batch: Batch) -> list[StoredPage]:
    """Every page and file problem of the batch, in file and page order."""
    return [
        StoredPage(r["id"], r["file_id"], r["path"], r["page"], r["problem"], r["template"])
        for r in batch.rows(
            "SELECT p.id, p.file_id, p.page, p.problem, p.template, fl.path FROM pages p "
            "JOIN files fl ON fl.id = p.file_id ORDER BY fl.id, p.page"
        )
    ]


def page_dpi(batch: Batch, page_id: int) -> float | None:
    """The resolution of a stored page image (None for a page that could not be read).

    Raises
    ------
    KeyError
        No page of that id.
    """
    rows = batch.rows("SELECT dpi FROM pages WHERE id = ?", (page_id,))
    if not rows:
        raise KeyError(f"no page {page_id}")
    return rows[0][0]


@dataclass(frozen=True)
class PageSummary:
    """One page of the batch, counted.

    ``to_check`` and ``done`` count fields (done = corrected, confirmed or
    unreadable); ``state`` is the page's combined state (``unreadable`` for a
    page or file that could not be read, whose ``problem`` says why);
    ``label`` is the file name, with ``, page N`` when its file has several pages.
    """

    page_id: int
    file: str
    page: int | None
    to_check: int
    done: int
    fields: int
    problem: str | None
    state: str
    label: str


def page_summaries(batch: Batch, page_ids: Iterable[int] | None = None) -> list[PageSummary]:
    """Per-page counts of fields to check and done, in file and page order (all pages when None)."""
    where, params = "", []
    if page_ids is not None:
        ids = list(page_ids)
        if not ids:
            return []
        where, params = f"WHERE p.id IN ({_marks(ids)})", ids
    states: dict[int, list[str]] = defaultdict(list)
    for r in batch.rows(f"SELECT f.page_id, f.state FROM fields f JOIN pages p ON p.id = f.page_id {where}", params):
        states[r[0]].append(r[1])
    pages_per_file = {r[0]: r[1] for r in batch.rows("SELECT file_id, COUNT(*) FROM pages GROUP BY file_id")}
    out = []
    for r in batch.rows(
        f"SELECT p.id, p.page, p.problem, p.file_id, fl.path FROM pages p JOIN files fl ON fl.id = p.file_id {where} "
        "ORDER BY fl.id, p.page", params,
    ):
        s = states.get(r["id"], [])
        done = sum(1 for x in s if x in (CORRECTED, CONFIRMED, UNREADABLE))
        state = UNREADABLE if r["problem"] else combine_states(s)
        label = Path(r["path"]).name
        if r["page"] is not None and pages_per_file.get(r["file_id"], 1) > 1:
            label += f", page {r['page']}"
        out.append(PageSummary(r["id"], r["path"], r["page"], s.count(TO_CHECK), done, len(s), r["problem"],
                               state, label))
    return out


def pages_of_fields(batch: Batch, field_ids: Iterable[int]) -> set[int]:
    """Ids of the pages the given fields are on."""
    ids = list(field_ids)
    if not ids:
        return set()
    return {r[0] for r in batch.rows(f"SELECT DISTINCT page_id FROM fields WHERE id IN ({_marks(ids)})", ids)}


# --------------------------------------------------------------------------- fields


def find_field_id(batch: Batch, file_id: int, page: int, name: str) -> int | None:
    """Id of field ``name`` on page ``page`` of file ``file_id`` (None: no such field)."""
    rows = batch.rows(
        "SELECT f.id FROM fields f JOIN pages p ON p.id = f.page_id "
        "WHERE p.file_id = ? AND p.page = ? AND f.name = ?",
        (file_id, page, name),
    )
    return int(rows[0][0]) if rows else None


class FieldPlace(NamedTuple):
    """Where a field is: its file's path as stored, page number and field name."""

    file: str
    page: int
    name: str


def field_place(batch: Batch, field_id: int) -> FieldPlace:
    """Where field ``field_id`` is.

    Raises
    ------
    KeyError
        No field of that id.
    """
    rows = batch.rows(
        "SELECT fl.path, p.page, f.name FROM fields f JOIN pages p ON p.id = f.page_id "
        "JOIN files fl ON fl.id = p.file_id WHERE f.id = ?",
        (field_id,),
    )
    if not rows:
        raise KeyError(f"no field {field_id}")
    return FieldPlace(*rows[0])


def count_fields(batch: Batch, state: str) -> int:
    """How many fields are in ``state``."""
    return int(batch.rows("SELECT COUNT(*) FROM fields WHERE state = ?", (str(state),))[0][0])


def field_states(batch: Batch, field_ids: Iterable[int] | None = None) -> dict[int, str]:
    """``{field id: state}`` for the given fields (all when None)."""
    if field_ids is None:
        rows = batch.rows("SELECT id, state FROM fields")
    else:
        ids = list(field_ids)
        if not ids:
            return {}
        rows = batch.rows(f"SELECT id, state FROM fields WHERE id IN ({_marks(ids)})", ids)
    return {r[0]: r[1] for r in rows}


@dataclass(frozen=True)
class DigitView:
    """One box of a field: what the model read (``read``), its value now and its state."""

    digit_id: int
    box: int
    blank: bool
    read: str
    value: str | None
    confidence: float
    state: str

    @property
    def counted(self) -> bool:
        """Written, or given a digit by a person: the boxes a clerk types into."""
        return not self.blank or self.state != READ


@dataclass(frozen=True)
class FieldView:
    """One field whatever its state: where it is, its boxes (pixel edges
    ``(x0, y0, x1, y1)`` on the stored page) and their readings, its value and state."""

    field_id: int
    page_id: int
    file: str
    page: int
    name: str
    position: int
    boxes: tuple[BoxEdges, ...]
    value: str
    read_value: str
    whole: bool
    state: str
    digits: tuple[DigitView, ...]

    @property
    def slots(self) -> list[DigitView]:
        """The counted boxes (see :attr:`DigitView.counted`), in order."""
        return [d for d in self.digits if d.counted]

    @property
    def place(self) -> str:
        return f"{Path(self.file).name}, page {self.page}, field {self.name}"


def load_field(batch: Batch, field_id: int) -> FieldView:
    """One field with all its boxes (no images).

    Raises
    ------
    KeyError
        No field of that id.
    """
    rows = batch.rows(
        "SELECT f.id, f.page_id, f.name, f.position, f.boxes, f.value, f.read_value, f.whole, f.state, "
        "p.page, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
        "JOIN files fl ON fl.id = p.file_id WHERE f.id = ?", (field_id,),
    )
    if not rows:
        raise KeyError(f"no field {field_id}")
    r = rows[0]
    digits = [
        DigitView(d["id"], d["box"], bool(d["blank"]), d["prediction"], d["value"], float(d["confidence"]), d["state"])
        for d in batch.rows(
            "SELECT id, box, blank, prediction, value, confidence, state FROM digits WHERE field_id = ? ORDER BY box",
            (field_id,),
        )
    ]
    return FieldView(
        r["id"], r["page_id"], r["path"], r["page"], r["name"], r["position"], decode_boxes(r["boxes"]), r["value"],
        r["read_value"], bool(r["whole"]), r["state"], tuple(digits),
    )


class PageField(NamedTuple):
    """A field as a page outline shows it (unpacks as ``field_id, name, state, boxes``)."""

    field_id: int
    name: str
    state: str
    boxes: tuple[BoxEdges, ...]


def page_fields(batch: Batch, page_id: int) -> list[PageField]:
    """Every field of a page, in reading order."""
    return [
        PageField(r["id"], r["name"], r["state"], decode_boxes(r["boxes"]))
        for r in batch.rows("SELECT id, name, state, boxes FROM fields WHERE page_id = ? ORDER BY position", (page_id,))
    ]


# --------------------------------------------------------------------------- digits


def digit_states(batch: Batch, field_ids: Iterable[int]) -> dict[int, str]:
    """``{digit id: state}`` of the written boxes of the given fields."""
    ids = list(field_ids)
    if not ids:
        return {}
    return {r[0]: r[1] for r in
            batch.rows(f"SELECT id, state FROM digits WHERE field_id IN ({_marks(ids)}) AND NOT blank", ids)}


@dataclass(frozen=True)
class OpenDigits:
    """The written digits no person has handled yet (state ``read`` or ``to check``):
    the ones another threshold can send to a person or let through.

    Attributes
    ----------
    predictions : tuple of str
        What the model read, per digit (``?`` for not a digit).
    confidences : ndarray, float64, shape (n,), 0..1
    to_check_now : int
        Digits in state ``to check`` now (any digit, handled or not).
    """

    predictions: tuple[str, ...]
    confidences: np.ndarray
    to_check_now: int

    def to_check_at(self, threshold: float | None) -> int:
        """How many of them a ``threshold`` (0..1) would send to a person, without applying it."""
        return sum(digit_to_check(p, float(c), threshold) for p, c in zip(self.predictions, self.confidences))


def open_digits(batch: Batch) -> OpenDigits:
    """The digits a new threshold can re-flag (see :class:`OpenDigits`)."""
    rows = batch.rows("SELECT prediction, confidence FROM digits WHERE NOT blank AND state IN (?, ?)", (READ, TO_CHECK))
    now = int(batch.rows("SELECT COUNT(*) FROM digits WHERE state = ?", (TO_CHECK,))[0][0])
    return OpenDigits(tuple(r[0] for r in rows), np.array([r[1] for r in rows], np.float64), now)


def labelled_count(batch: Batch) -> int:
    """How many boxes a person corrected or confirmed to a per-box value (a quick count of
    :func:`recognizer.batch.samples.labelled_samples`, without cutting any cell)."""
    return int(batch.rows(
        "SELECT COUNT(*) FROM digits WHERE state IN (?, ?) AND NOT blank AND value IS NOT NULL", (CORRECTED, CONFIRMED)
    )[0][0])


def state_counts(batch: Batch) -> dict[str, Counter]:
    """Pages, fields and digits counted by state: ``{"pages": Counter, "fields": ..., "digits": ...}``."""
    fields = batch.rows("SELECT page_id, state FROM fields")
    by_page: dict[int, list[str]] = defaultdict(list)
    for r in fields:
        by_page[r["page_id"]].append(r["state"])
    pages = Counter(
        State.UNREADABLE if r["problem"] else combine_states(by_page[r["id"]])
        for r in batch.rows("SELECT id, problem FROM pages")
    )
    digits = Counter(
        r[0] for r in batch.rows("SELECT state FROM digits WHERE NOT blank OR state != ?", (READ,))
    )
    return {"pages": pages, "fields": Counter(r["state"] for r in fields), "digits": digits}
