"""Typed values and rules: a page's per-box texts read as its template's fields say.

A field of a form template (:mod:`recognizer.forms.template`) has a type and
rules. :func:`typed_value` types the per-box texts of one field and tests its
own rules; :func:`check_page` does so for every field of a page and adds the
template's cross-field sum rules.

Field types
-----------
``digits``
    A code or an identifier: the digits as written, leading zeros kept
    (``00412``).
``integer``
    A whole number: leading zeros dropped (``07`` -> ``7``).
``decimal``
    A number whose last ``decimals`` boxes stand after a printed decimal
    point: ``1 8 | 7`` with ``decimals: 1`` is ``18.7``. The boxes after the
    point must all be written; empty boxes before the point are skipped, and
    no digit before the point gives ``0.7``.
``date``
    Every box written, in the box order ``date_order`` (a sequence of ``DD``,
    ``MM`` and ``YYYY`` or ``YY``, such as ``DDMMYYYY`` or ``YYYYMMDD``; a
    two-digit year means 2000-2099). The value is the ISO 8601 date
    (``2026-09-13``).
``code``
    Digits ending in check digit(s) of ``check_digit`` (``luhn``,
    ``mod11-2`` or ``mod97-10``; see :mod:`recognizer.forms.checkdigits`), leading
    zeros kept.

A field with no written box has the value ``""`` of any type.

Rules
-----
Every problem is a string starting with the rule's name and a colon:

* ``required`` -- the field must not be blank (``"required": true``).
* ``length`` -- the number of digits written, from the first to the last
  written box, must be one of ``lengths``.
* ``min`` / ``max`` -- bounds on the value, numbers for ``integer`` and
  ``decimal`` fields, ISO dates (``"2026-08-10"``) for ``date`` fields.
* ``check digit`` -- the check digit(s) of a ``code`` field (or of any
  ``digits`` field with ``check_digit`` set) must be right.
* ``date`` -- a ``date`` field must be complete and name a day that exists.
* ``decimals`` -- the boxes after the point of a ``decimal`` field must all be
  written.
* ``sum`` -- a cross-field rule of the template: the ``total`` field equals the
  sum of its ``parts`` (blank parts count as 0); a broken sum flags the total
  and every part.

Rules are checked on the value as read, whatever the model's confidence: a
value that breaks one flags its field(s) for a person to check. A field
holding a mark read as "not a digit" (``?``) has no typed value; it is already
to be checked and no rule is tested on it.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

from recognizer.forms.checkdigits import CHECK_SYSTEMS, is_valid
from recognizer.forms.template import SumRule, Template, TemplateField, comparable_bound, date_parts

__all__ = ["TypedValue", "check_page", "typed_value"]

_UNREADABLE = "?"


@dataclass
class TypedValue:
    """A field's value as its type reads it.

    ``text`` is what the CSV shows (``"18.7"``, ``"2026-09-13"``, ``"00412"``;
    ``""`` for a blank field, the raw digits with ``?`` for an unreadable
    one); ``number`` the number or :class:`datetime.date` (None when blank,
    unreadable or invalid); ``problems`` the rules broken, each
    ``"<rule>: <what>"``.
    """

    text: str
    number: int | float | dt.date | None = None
    problems: list[str] = field(default_factory=list)

    @property
    def blank(self) -> bool:
        return self.text == ""


def typed_value(spec: TemplateField, texts: Sequence[str]) -> TypedValue:
    """Type the per-box texts of one field and test its own rules.

    Parameters
    ----------
    spec : TemplateField
    texts : sequence of str
        One entry per box, left to right: a digit, ``"?"`` (a mark that is not
        a digit) or ``""`` (empty box).

    Returns
    -------
    TypedValue
    """
    if len(texts) != len(spec.boxes):
        raise ValueError(f"field {spec.name!r} has {len(spec.boxes)} boxes, got {len(texts)} texts")
    written = [i for i, t in enumerate(texts) if t]
    if not written:
        return TypedValue("", problems=["required: the field is blank"] if spec.required else [])
    raw = "".join(texts[written[0] : written[-1] + 1])
    if _UNREADABLE in raw:
        return TypedValue(raw)
    problems: list[str] = []
    if spec.lengths is not None and len(raw) not in spec.lengths:
        allowed = " or ".join(map(str, spec.lengths))
        problems.append(f"length: {len(raw)} digits written, {allowed} expected")
    value = _TYPERS[spec.type](spec, texts, raw, problems)
    if spec.check_digit is not None and not _check_digit_ok(raw, spec.check_digit):
        problems.append(f"check digit: {raw} fails the {CHECK_SYSTEMS[spec.check_digit][0]} check")
    if value.number is not None:
        _test_bounds(spec, value, problems)
    value.problems = problems
    return value


def _check_digit_ok(raw: str, system: str) -> bool:
    return len(raw) > CHECK_SYSTEMS[system][1] and is_valid(raw, system)


def _as_digits(spec: TemplateField, texts: Sequence[str], raw: str, problems: list[str]) -> TypedValue:
    return TypedValue(raw)


def _as_integer(spec: TemplateField, texts: Sequence[str], raw: str, problems: list[str]) -> TypedValue:
    number = int(raw)
    return TypedValue(str(number), number)


def _as_decimal(spec: TemplateField, texts: Sequence[str], raw: str, problems: list[str]) -> TypedValue:
    whole_texts, decimal_texts = texts[: -spec.decimals], texts[-spec.decimals :]
    whole = "".join(whole_texts) or "0"
    if not all(decimal_texts):
        problems.append(f"decimals: the {spec.decimals} box(es) after the point must all be written")
        return TypedValue(raw)
    text = f"{int(whole)}.{''.join(decimal_texts)}"
    return TypedValue(text, float(text))


def _as_date(spec: TemplateField, texts: Sequence[str], raw: str, problems: list[str]) -> TypedValue:
    assert spec.date_order is not None
    if not all(texts):
        problems.append(f"date: {sum(1 for t in texts if t)} of {len(texts)} boxes written ({spec.date_order})")
        return TypedValue(raw)
    digits = "".join(texts)
    got: dict[str, int] = {}
    pos = 0
    for part in date_parts(spec.date_order) or []:
        got[part[0]] = int(digits[pos : pos + len(part)]) + (2000 if part == "YY" else 0)
        pos += len(part)
    try:
        day = dt.date(got["Y"], got["M"], got["D"])
    except ValueError:
        problems.append(f"date: {digits} ({spec.date_order}) is not a day of the calendar")
        return TypedValue(digits)
    return TypedValue(day.isoformat(), day)


_TYPERS = {
    "digits": _as_digits,
    "code": _as_digits,
    "integer": _as_integer,
    "decimal": _as_decimal,
    "date": _as_date,
}


def _test_bounds(spec: TemplateField, value: TypedValue, problems: list[str]) -> None:
    if spec.minimum is not None and value.number < comparable_bound(spec, spec.minimum):  # type: ignore[operator]
        problems.append(f"min: {value.text} is below the minimum {spec.minimum}")
    if spec.maximum is not None and value.number > comparable_bound(spec, spec.maximum):  # type: ignore[operator]
        problems.append(f"max: {value.text} is above the maximum {spec.maximum}")


def check_page(template: Template, texts: Mapping[str, Sequence[str]]) -> dict[str, TypedValue]:
    """Type every field of a page and test all rules, cross-field sums included.

    Parameters
    ----------
    template : Template
    texts : mapping
        Field name -> per-box texts (see :func:`typed_value`), for every field
        of ``template``.

    Returns
    -------
    dict
        Field name -> :class:`TypedValue`, in the template's field order, each
        carrying the problems of its own rules and of the sums it takes part in.
    """
    values = {f.name: typed_value(f, texts[f.name]) for f in template.fields}
    for rule in template.sums:
        problem = _sum_problem(rule, values)
        if problem:
            for name in (rule.total, *rule.parts):
                values[name].problems.append(problem)
    return values


def _sum_problem(rule: SumRule, values: Mapping[str, TypedValue]) -> str | None:
    involved = [values[n] for n in (rule.total, *rule.parts)]
    if any(v.number is None and not v.blank for v in involved):
        return None  # unreadable or invalid: already flagged, nothing to add up
    parts = [v.number or 0 for v in involved[1:]]
    total = involved[0].number or 0
    if math.isclose(sum(parts), total, abs_tol=1e-9):  # type: ignore[arg-type]
        return None
    shown = " + ".join(v.text or "0" for v in involved[1:])
    return (f"sum: {rule.total} {involved[0].text or 'blank'} ≠ {shown} "  # type: ignore[arg-type]
            f"({' + '.join(rule.parts)} = {_number_text(sum(parts))})")


def _number_text(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else f"{x:g}"
