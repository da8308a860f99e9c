"""The review queue: what is left to check in a batch, in a chosen order.

Each item is a field (or, ordered by digit, a written box) in state ``to
check`` with the reasons it is flagged: for a field, the reasons of the one
rule (:func:`recognizer.states.check_field`, through
:func:`recognizer.batch.flags.field_checks`: the same call that set its
state); for a digit, its own (below the threshold, or not a digit). They are
keys (:class:`recognizer.states.Reason`); :meth:`ReviewItem.words` puts them
in a clerk's words (:func:`recognizer.states.reasons_in_words`).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field

from recognizer.batch.review_rows import FieldToCheck, digits_to_check, fields_to_check
from recognizer.batch.store import Batch
from recognizer.digits.model import NOT_A_DIGIT
from recognizer.reading.page import UNREADABLE_MARK
from recognizer.states import Reason, field_reasons, reasons_in_words

__all__ = ["ORDERS", "ReviewItem", "ReviewQueue"]

#: Orders of the review queue.
ORDERS = ("page", "confidence", "digit")


@dataclass(frozen=True)
class ReviewItem:
    """A field or a digit to check.

    ``digit_id`` and ``box`` are None for a field. ``value`` is the current
    value, ``read`` the value as read (for a digit: the prediction, ``?`` for
    "not a digit"), ``confidence`` the digit's (for a field: the lowest of its
    written boxes, None if it has none), ``why`` the reasons it is flagged.
    """

    field_id: int
    digit_id: int | None
    file: str
    page: int
    field: str
    box: int | None
    value: str
    read: str
    confidence: float | None
    why: tuple[str, ...]
    sort_key: tuple = field(default=(), repr=False, compare=False)

    @property
    def words(self) -> str:
        """Why it is to check, in a clerk's words."""
        return reasons_in_words(self.why)

    @property
    def ref(self) -> str:
        """``FILE:PAGE:FIELD``, as the ``inkcount review`` command takes it."""
        return f"{self.file}:{self.page}:{self.field}"


def _field_reasons(f: FieldToCheck) -> tuple[str, ...]:
    if f.why:
        return f.why
    # to check with no reason left (a field-level decision a person has not taken): the digits' own
    return field_reasons(unsure_digits=f.unsure, marks=f.marks)


class ReviewQueue:
    """What is left to check in a batch, in a chosen order.

    Parameters
    ----------
    batch : Batch
    order : {"page", "confidence", "digit"}
        ``"page"``: by file, page and field position; ``"confidence"``: lowest
        confidence first; ``"digit"``: grouped by the digit read (all the 7s
        together, "not a digit" last), lowest confidence first in each group.
    unit : {"field", "digit"}, optional
        Items are fields (default) or single digits; ``order="digit"`` always
        lists digits. The digit queue holds digits to check only: fields
        flagged for their value as a whole, a gap, doubtful boxes, page
        warnings or their layout are in the field queue.

    The queue reads the batch each time it is asked, so it follows changes.
    Iterating it goes on from the last item handed out, skipping anything
    resolved meanwhile.
    """

    def __init__(self, batch: Batch, *, order: str = "page", unit: str | None = None) -> None:
        if order not in ORDERS:
            raise ValueError(f"order must be one of {ORDERS}, got {order!r}")
        unit = unit or ("digit" if order == "digit" else "field")
        if unit not in ("field", "digit") or (order == "digit" and unit != "digit"):
            raise ValueError(f"unit must be 'field' or 'digit' ('digit' for order='digit'), got {unit!r}")
        self.batch = batch
        self.order = order
        self.unit = unit

    def items(self) -> list[ReviewItem]:
        """Everything left to check, in order."""
        items = self._field_items() if self.unit == "field" else self._digit_items()
        return sorted(items, key=lambda item: item.sort_key)

    def __len__(self) -> int:
        return len(self.items())

    def next(self, after: ReviewItem | None = None) -> ReviewItem | None:
        """The first item to check, or the first one coming after ``after`` in the order."""
        for item in self.items():
            if after is None or item.sort_key > after.sort_key:
                return item
        return None

    def __iter__(self) -> Iterator[ReviewItem]:
        item = self.next()
        while item is not None:
            yield item
            item = self.next(after=item)

    def _key(self, file_id: int, page: int, position: int, box: int, confidence: float | None,
             prediction: str | None = None) -> tuple:
        where = (file_id, page, position, box)
        rank = 2.0 if confidence is None else confidence
        if self.order == "page":
            return where
        if self.order == "confidence":
            return (rank, *where)
        group = NOT_A_DIGIT if prediction == UNREADABLE_MARK else int(prediction)
        return (group, rank, *where)

    def _field_items(self) -> list[ReviewItem]:
        return [
            ReviewItem(
                f.field_id, None, f.file, f.page, f.name, None, f.value, f.read_value,
                f.lowest, _field_reasons(f), self._key(f.file_id, f.page, f.position, -1, f.lowest),
            )
            for f in fields_to_check(self.batch)
        ]

    def _digit_items(self) -> list[ReviewItem]:
        return [
            ReviewItem(
                d.field_id, d.digit_id, d.file, d.page, d.name, d.box, d.value or "",
                d.prediction, d.confidence,
                (Reason.NOT_A_DIGIT.value,) if d.prediction == UNREADABLE_MARK else (Reason.LOW_CONFIDENCE.value,),
                self._key(d.file_id, d.page, d.position, d.box, d.confidence, d.prediction),
            )
            for d in digits_to_check(self.batch)
        ]
