"""Spot checks: how many wrong values are left among the fields nobody checked.

No reader is perfect: among the fields it accepted without a person (state
``read``, never acted on by a person; :mod:`recognizer.batch.audits`) some
values are wrong. A spot check measures how many: :func:`draw_audit` draws a
random sample of those fields, a person checks each one with the ordinary
review actions (:func:`recognizer.review.actions.confirm` when it is right,
:func:`~recognizer.review.actions.set_field` when it is not, which also fixes
the value, is logged and can be undone), and :func:`audit_status` counts the
fields answered and the errors found, and bounds the share of wrong values
(:mod:`recognizer.review.residual`).

Drawing
-------
Systematic sampling over the pages with a seeded random start, which spreads
the sample evenly over the pages (an implicit stratification by page): the
eligible fields are sorted by file and page, in a random order within each
page (so that the sample does not fall on the same field of every form when
the step matches the number of fields per page); with ``N`` of them and ``n``
to draw, the step is ``N / n`` and the fields taken are those at ``floor(start
+ i * step)`` for ``i = 0 .. n - 1``, ``start`` uniform in ``[0, step)``. Both
the order within a page and ``start`` come from
``numpy.random.default_rng(seed)``. Every eligible field has the same chance,
``n / N``, to be drawn; each page gets its share of the sample to within one
field; the same seed on the same batch draws the same fields. With ``n >= N``
every eligible field is drawn. The drawn fields are checked by file, page and
place on the page. The seed (random unless given), who drew, when, the
method, how many fields were eligible and the fields drawn (with the values
accepted then) are stored in the batch, so the statement made from them can
be reproduced.

Answers
-------
A drawn field is *audited* once a person confirmed, corrected or marked it
unreadable after the draw (in the window's spot check, with ``inkcount audit
--confirm/--set`` or with ``inkcount review``; an action undone no longer
counts). It is an *error* when the value the person left differs from the
value accepted when it was drawn, or the person marked it unreadable (a value
was accepted where none could be read). The latest spot check is the one
reported; an older one stays recorded.
"""

from __future__ import annotations

import secrets
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from recognizer.batch import audits
from recognizer.batch.audits import AuditFieldRow, AuditRecord
from recognizer.batch.queries import state_counts
from recognizer.batch.store import Batch
from recognizer.digits.model import timestamp
from recognizer.review.actions import default_reviewer
from recognizer.review.errors import ReviewError
from recognizer.review.queue import ReviewItem
from recognizer.review.residual import CONFIDENCE, CONFIDENCE_WORDS, clopper_pearson_upper, percent
from recognizer.states import State

__all__ = [
    "METHOD", "AuditStatus", "ResidualFigures", "audit_status", "draw_audit", "residual_figures",
    "residual_line", "residual_path", "residual_statement", "systematic_sample",
]

#: The drawing method, as stored with each spot check.
METHOD = "systematic sample over the pages (fields sorted by file and page, random order within a page), seeded random start"


def systematic_sample(strata: Sequence, count: int, seed: int) -> list[int]:
    """Indices (ascending) of ``count`` items drawn by systematic sampling with a seeded random start.

    ``strata`` gives each item's page (any sortable key; the items in page
    order); items are put in a random order within their page before the
    sample is taken (see the module docstring).
    """
    total = len(strata)
    if count < 0:
        raise ValueError("count must be 0 or more")
    if count >= total:
        return list(range(total))
    if count == 0:
        return []
    rng = np.random.default_rng(seed)
    shuffle = rng.random(total)
    order = sorted(range(total), key=lambda i: (strata[i], shuffle[i]))
    step = total / count
    start = float(rng.uniform(0.0, step))
    picks = sorted(order[min(total - 1, int(start + i * step))] for i in range(count))
    assert len(set(picks)) == count
    return picks


def draw_audit(batch: Batch, count: int, *, seed: int | None = None, reviewer: str | None = None) -> AuditStatus:
    """Draw ``count`` fields accepted without a person into a new spot check (all of them if fewer).

    Raises
    ------
    ReviewError
        ``count`` is not positive, or no field is accepted without a person.
    """
    if count < 1:
        raise ReviewError(f"draw at least one field, not {count}")
    seed = secrets.randbelow(2**31) if seed is None else int(seed)
    if not 0 <= seed < 2**63:
        raise ReviewError(f"the seed must be a whole number from 0 to 2**63 - 1, not {seed}")
    with batch.transaction() as conn:
        eligible = audits.unattended_fields(conn)
        if not eligible:
            raise ReviewError("no field of this batch was accepted without a person: there is nothing to spot check")
        picks = [eligible[i] for i in systematic_sample([(f.file_id, f.page) for f in eligible], count, seed)]
        record = audits.add_audit(conn, drawn_at=timestamp(), reviewer=reviewer or default_reviewer(), seed=seed,
                                  method=METHOD, asked=count, population=len(eligible),
                                  fields=[(f.field_id, f.value) for f in picks])
    return audit_status(batch, record.audit_id)


@dataclass(frozen=True)
class AuditStatus:
    """A spot check and how far it has come: fields drawn, audited, errors found, and the bound."""

    record: AuditRecord
    fields: list[AuditFieldRow] = field(repr=False)

    @property
    def drawn(self) -> int:
        return len(self.fields)

    @property
    def audited(self) -> int:
        return sum(f.done for f in self.fields)

    @property
    def errors(self) -> int:
        return sum(_is_error(f) for f in self.fields)

    @property
    def open_ids(self) -> list[int]:
        """The drawn fields not answered yet, in the order they are checked."""
        return [f.field_id for f in self.fields if not f.done]

    @property
    def finished(self) -> bool:
        return all(f.done for f in self.fields)

    def bound(self, confidence: float = CONFIDENCE) -> float | None:
        """Upper bound on the share of wrong values among the fields accepted without a person (None: none audited)."""
        if not self.audited:
            return None
        return clopper_pearson_upper(self.errors, self.audited, confidence)

    def items(self) -> list[ReviewItem]:
        """The drawn fields as review items (in the order drawn; ``read`` is the value accepted when drawn)."""
        return [ReviewItem(f.field_id, None, f.file, f.page, f.name, None, f.value, f.drawn, f.lowest, (),
                           (f.position,)) for f in self.fields]


def _is_error(f: AuditFieldRow) -> bool:
    return f.done and (f.state == State.UNREADABLE or f.value != f.drawn)


def audit_status(batch: Batch, audit_id: int | None = None) -> AuditStatus | None:
    """The spot check ``audit_id`` (the latest when None) as it stands; None when there is none."""
    records = audits.audit_records(batch)
    if audit_id is not None:
        records = [r for r in records if r.audit_id == audit_id]
    if not records:
        return None
    return AuditStatus(records[-1], audits.audit_fields(batch, records[-1]))


# --------------------------------------------------------------------------- the statement


@dataclass(frozen=True)
class ResidualFigures:
    """A batch's figures for a statement of its residual error."""

    fields: int
    checked: int
    corrected: int
    to_check: int
    unattended: int
    audit: AuditStatus | None
    read_after_draw: int = 0


def residual_figures(batch: Batch) -> ResidualFigures:
    """Fields, checked by a person, corrected, still to check, accepted without a person, and the latest spot check."""
    counts = state_counts(batch)["fields"]
    status = audit_status(batch)
    after = 0 if status is None else audits.count_unattended(batch, read_after=status.record.drawn_at)
    return ResidualFigures(
        fields=sum(counts.values()),
        checked=sum(counts.get(s, 0) for s in (State.CORRECTED, State.CONFIRMED, State.UNREADABLE)),
        corrected=counts.get(State.CORRECTED, 0),
        to_check=counts.get(State.TO_CHECK, 0),
        unattended=audits.count_unattended(batch),
        audit=status,
        read_after_draw=after,
    )


def _n(count: int, one: str, many: str | None = None) -> str:
    return f"{count:,} {one if count == 1 else (many or one + 's')}"


def residual_line(figures: ResidualFigures) -> str:
    """The statement in one line (the export dialog's)."""
    status = figures.audit
    if figures.unattended == 0 and (status is None or not status.audited):
        return "Every field was checked by a person: no value was accepted without one."
    if status is None or not status.audited:
        drawn = "" if status is None else " (a spot check was drawn but not answered yet)"
        return (f"Residual error not measured: no spot check of the {_n(figures.unattended, 'value')} accepted "
                f"without a person{drawn}.")
    return (f"Spot check: {_n(status.errors, 'wrong value')} in {_n(status.audited, 'field')} checked; with "
            f"{CONFIDENCE_WORDS} confidence at most {percent(status.bound())} of the values accepted without a person "
            "were wrong.")


def residual_statement(figures: ResidualFigures, *, batch_name: str = "") -> str:
    """The statement of the batch's residual error, in plain words a data manager can paste into a report."""
    lines = [f"Residual error of the checked values{f' of batch {batch_name}' if batch_name else ''}",
             f"(stated on {timestamp()}).", ""]
    lines.append(f"Fields: {figures.fields:,}. Checked by a person: {figures.checked:,} (corrected: "
                 f"{figures.corrected:,}). Still to check: {figures.to_check:,}. Accepted without a person "
                 f"(read automatically, never checked): {figures.unattended:,}.")
    status = figures.audit
    if status is None:
        if figures.unattended:
            lines.append("The residual error was not measured: no spot check of the values accepted without a "
                         "person was made. Automatic reading makes mistakes; some of those values may be wrong.")
        else:
            lines.append("Every field was checked by a person: no value was accepted without one.")
        return "\n".join(lines) + "\n"
    r = status.record
    lines.append(
        f"Spot check: {_n(status.drawn, 'field')} drawn at random among the {r.population:,} then accepted without "
        f"a person (spread evenly over the pages; seed {r.seed}; drawn by {r.reviewer} on {r.drawn_at}); "
        f"{status.audited:,} of them checked by a person, {_n(status.errors, 'wrong value')} found"
        + (" (corrected)." if status.errors else "."))
    if not status.audited:
        lines.append("None of the drawn fields has been checked yet: the residual error was not measured.")
    else:
        bound = status.bound()
        lines.append(
            f"With {CONFIDENCE_WORDS} confidence, at most {percent(bound)} of the {r.population:,} values accepted "
            f"without a person when the spot check was drawn were wrong (one-sided exact binomial upper bound of Clopper and Pearson, {_n(status.errors, 'error')} in "
            f"{_n(status.audited, 'field')} checked).")
        if status.audited < status.drawn:
            lines.append(f"{_n(status.drawn - status.audited, 'drawn field')} not checked yet "
                         f"{'is' if status.drawn - status.audited == 1 else 'are'} left out of these figures.")
    if figures.read_after_draw:
        lines.append(f"{_n(figures.read_after_draw, 'field')} on pages read after the spot check was drawn "
                     f"{'is' if figures.read_after_draw == 1 else 'are'} not covered by it.")
    return "\n".join(lines) + "\n"


def residual_path(csv_path: str | Path) -> Path:
    """Where the statement goes beside a checked CSV: ``checked.csv`` -> ``checked.residual.txt``."""
    csv_path = Path(csv_path)
    return csv_path.with_name(f"{csv_path.stem}.residual.txt")
