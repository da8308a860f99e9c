"""Form templates: named, typed digit fields with rules, and the reference page they sit on.

Without a template the box finder names the fields of every page ``f01``,
``f02``, ... and their values are plain digit strings. A template describes one
form design: where each field's boxes are on a reference scan of the form, what
each field is called, what kind of value it holds and which rules its value
must keep. Pages are aligned to the reference (:mod:`recognizer.forms.registration`)
before their boxes are cut, so a faint, crossed or partly cut-off box is still
read where the template says it is.

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

File format
-----------
A template is a UTF-8 JSON file (suffix ``.json``) of this shape::

    {
      "format": "inkcount-template",
      "format_version": 1,
      "name": "orchard_card",            # shown in the CSV and the batch file
      "version": 3,                      # the template's own revision, >= 1
      "description": "free text",
      "reference": {
        "dpi": 300,                      # resolution of the box coordinates
        "width_px": 2480, "height_px": 1748,   # size of the reference page
        "features_dpi": 100,             # resolution of the image below
        "image_png": "iVBORw0KGgo..."    # base64 PNG, the reference page's ink
      },                                 # (0 = paper, 255 = ink) at features_dpi
      "fields": [
        {"name": "grower_number", "type": "digits",
         "boxes": [[x0, y0, x1, y1], ...],   # inner box rectangles, left to right,
                                             # pixel edges at reference dpi, x1/y1 exclusive
         "required": true, "lengths": [5]},
        {"name": "picking_date", "type": "date", "date_order": "DDMMYYYY",
         "boxes": [...], "min": "2026-08-10", "max": "2026-10-31"},
        {"name": "net_weight", "type": "decimal", "decimals": 1, "boxes": [...],
         "min": 0.1, "max": 2000},
        {"name": "member_code", "type": "code", "check_digit": "luhn", "boxes": [...]}
      ],
      "rules": [
        {"rule": "sum", "total": "total_crates", "parts": ["crates_1", "crates_2"]}
      ]
    }

Keys other than these are refused, so a misspelt rule does not go unnoticed.
Field names are letters, digits and underscores, start with a letter and may
not be one of the CSV's own columns (:data:`RESERVED_NAMES`). A file of a
newer ``format_version`` than this program knows is refused with a message
saying so.
"""

from __future__ import annotations

import base64
import dataclasses
import datetime as dt
import json
import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import cv2
import numpy as np

from recognizer.page.boxes import Box
from recognizer.forms.checkdigits import CHECK_SYSTEMS, is_valid

__all__ = [
    "DATE_ORDERS",
    "FIELD_TYPES",
    "FORMAT",
    "FORMAT_VERSION",
    "RESERVED_NAMES",
    "Reference",
    "SumRule",
    "Template",
    "TemplateError",
    "TemplateField",
    "TemplateFileError",
    "TypedValue",
    "add_field",
    "check_page",
    "delete_field",
    "join_fields",
    "move_field",
    "parse_sum",
    "rename_field",
    "run_boxes",
    "set_sums",
    "split_field",
    "sum_text",
    "update_field",
    "load_template",
    "save_template",
    "template_from_json",
    "template_to_json",
    "typed_value",
]

FORMAT = "inkcount-template"
FORMAT_VERSION = 1
FIELD_TYPES = ("digits", "integer", "decimal", "date", "code")
#: Examples of box orders for dates; any order of DD, MM and YYYY (or YY) is accepted.
DATE_ORDERS = ("DDMMYYYY", "MMDDYYYY", "YYYYMMDD", "DDMMYY", "MMDDYY", "YYMMDD")
#: Column names of the values CSV that a field may not take.
RESERVED_NAMES = frozenset({"file", "page", "to_check", "problem", "template"})
_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")
_UNREADABLE = "?"


class TemplateError(ValueError):
    """A template that does not hold together (bad field, unknown rule, ...)."""


class TemplateFileError(Exception):
    """A template file that cannot be used; the message names the file and the reason."""

    def __init__(self, path: str | os.PathLike, reason: str) -> None:
        super().__init__(f"{path}: {reason}")
        self.path = Path(path)
        self.reason = reason


# ---------------------------------------------------------------- the template


@dataclass(frozen=True)
class Reference:
    """The reference page a template's boxes were taken from.

    Attributes
    ----------
    dpi : float
        Resolution of the box coordinates.
    width_px, height_px : int
        Size of the reference page at ``dpi``.
    features_dpi : float
        Resolution of ``image``.
    image : numpy.ndarray
        (H, W) uint8 ink of the reference page at ``features_dpi``, 0 = paper,
        255 = ink (see :func:`recognizer.forms.registration.page_ink`).
    """

    dpi: float
    width_px: int
    height_px: int
    features_dpi: float
    image: np.ndarray = field(repr=False, compare=False)


@dataclass(frozen=True)
class TemplateField:
    """One named field of a template; see the module notes for types and rules.

    ``boxes`` are inner box rectangles, left to right, at the reference's dpi.
    ``minimum``/``maximum`` are numbers (``integer``, ``decimal``) or ISO date
    strings (``date``); ``lengths`` lists the allowed numbers of digits.
    """

    name: str
    boxes: tuple[Box, ...]
    type: str = "digits"
    required: bool = False
    decimals: int = 0
    date_order: str | None = None
    check_digit: str | None = None
    minimum: float | str | None = None
    maximum: float | str | None = None
    lengths: tuple[int, ...] | None = None

    def __post_init__(self) -> None:
        _check_field(self)


@dataclass(frozen=True)
class SumRule:
    """``total`` must equal the sum of ``parts`` (blank parts count as 0)."""

    total: str
    parts: tuple[str, ...]


@dataclass(frozen=True)
class Template:
    """A form design: its reference page, named fields and cross-field rules."""

    name: str
    version: int
    reference: Reference
    fields: tuple[TemplateField, ...]
    sums: tuple[SumRule, ...] = ()
    description: str = ""

    def __post_init__(self) -> None:
        _check_template(self)

    def field(self, name: str) -> TemplateField:
        """The field called ``name`` (KeyError if there is none)."""
        for f in self.fields:
            if f.name == name:
                return f
        raise KeyError(name)

    @property
    def label(self) -> str:
        """``name`` and ``version`` as recorded with each page read (``orchard_card v3``)."""
        return f"{self.name} v{self.version}"


# ---------------------------------------------------------------- validation


def _check_field(f: TemplateField) -> None:
    where = f"field {f.name!r}"
    if not isinstance(f.name, str) or not _NAME.match(f.name):
        raise TemplateError(f"field name {f.name!r}: use letters, digits and _, starting with a letter")
    if f.name in RESERVED_NAMES:
        raise TemplateError(f"{where}: the name is one of the CSV's own columns")
    if not f.boxes:
        raise TemplateError(f"{where}: no boxes")
    for b in f.boxes:
        if b.x1 <= b.x0 or b.y1 <= b.y0 or min(b.x0, b.y0) < 0:
            raise TemplateError(f"{where}: box {[b.x0, b.y0, b.x1, b.y1]} is not a rectangle on the page")
    if f.type not in FIELD_TYPES:
        raise TemplateError(f"{where}: unknown type {f.type!r}; known: {', '.join(FIELD_TYPES)}")
    n = len(f.boxes)
    if (f.type == "decimal") != (f.decimals > 0):
        raise TemplateError(f"{where}: 'decimals' (1 or more) goes with type 'decimal' and only with it")
    if f.decimals >= n:
        raise TemplateError(f"{where}: {f.decimals} decimals need more than {n} boxes")
    if (f.type == "date") != (f.date_order is not None):
        raise TemplateError(f"{where}: 'date_order' goes with type 'date' and only with it")
    if f.date_order is not None:
        parts = _date_parts(f.date_order)
        if parts is None:
            raise TemplateError(f"{where}: date order {f.date_order!r} is not DD, MM and YYYY (or YY) in some order")
        if len(f.date_order) != n:
            raise TemplateError(f"{where}: date order {f.date_order} needs {len(f.date_order)} boxes, the field has {n}")
    if f.type == "code" and f.check_digit is None:
        raise TemplateError(f"{where}: a 'code' field needs 'check_digit'")
    if f.check_digit is not None:
        if f.type not in ("code", "digits"):
            raise TemplateError(f"{where}: 'check_digit' goes with types 'code' and 'digits'")
        if f.check_digit not in CHECK_SYSTEMS:
            raise TemplateError(f"{where}: unknown check digit {f.check_digit!r}; known: {', '.join(CHECK_SYSTEMS)}")
    if f.lengths is not None:
        if not f.lengths or any(not isinstance(k, int) or not 1 <= k <= n for k in f.lengths):
            raise TemplateError(f"{where}: lengths must be whole numbers from 1 to {n}")
    bounds = [v for v in (f.minimum, f.maximum) if v is not None]
    if bounds and f.type not in ("integer", "decimal", "date"):
        raise TemplateError(f"{where}: min and max go with types integer, decimal and date")
    if f.type == "date":
        for v in bounds:
            if not isinstance(v, str) or _iso_date(v) is None:
                raise TemplateError(f"{where}: min and max of a date are ISO dates such as 2026-08-10, not {v!r}")
    else:
        for v in bounds:
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise TemplateError(f"{where}: min and max must be numbers, not {v!r}")
    if len(bounds) == 2 and _bound(f, f.minimum) > _bound(f, f.maximum):
        raise TemplateError(f"{where}: min {f.minimum} is above max {f.maximum}")


def _check_template(t: Template) -> None:
    if not isinstance(t.name, str) or not t.name.strip():
        raise TemplateError("the template needs a name")
    if isinstance(t.version, bool) or not isinstance(t.version, int) or t.version < 1:
        raise TemplateError(f"version must be a whole number from 1, not {t.version!r}")
    if not t.fields:
        raise TemplateError("the template has no fields")
    names = [f.name for f in t.fields]
    seen = {n for n in names if names.count(n) > 1}
    if seen:
        raise TemplateError(f"field names used twice: {', '.join(sorted(seen))}")
    r = t.reference
    if r.dpi <= 0 or r.features_dpi <= 0 or r.width_px < 1 or r.height_px < 1:
        raise TemplateError("the reference needs a positive dpi and page size")
    if r.image.ndim != 2 or r.image.dtype != np.uint8:
        raise TemplateError("the reference image must be a grey 8-bit image")
    for f in t.fields:
        for b in f.boxes:
            if b.x1 > r.width_px or b.y1 > r.height_px:
                raise TemplateError(f"field {f.name!r}: a box lies outside the reference page")
    by_name = {f.name: f for f in t.fields}
    for rule in t.sums:
        involved = (rule.total, *rule.parts)
        if not rule.parts:
            raise TemplateError(f"sum rule for {rule.total!r}: no parts")
        for name in involved:
            if name not in by_name:
                raise TemplateError(f"sum rule for {rule.total!r}: no field {name!r}")
            if by_name[name].type not in ("integer", "decimal"):
                raise TemplateError(f"sum rule for {rule.total!r}: field {name!r} is not a number (integer or decimal)")
        if len(set(involved)) != len(involved):
            raise TemplateError(f"sum rule for {rule.total!r}: a field is named twice")


def _date_parts(order: str) -> list[str] | None:
    """Split ``DDMMYYYY`` into ``['DD', 'MM', 'YYYY']``; None if it is no date order."""
    parts = re.findall(r"DD|MM|YYYY|YY", order)
    if "".join(parts) != order or sorted(p[0] for p in parts) != ["D", "M", "Y"]:
        return None
    return parts


def _iso_date(text: str) -> dt.date | None:
    try:
        return dt.date.fromisoformat(text) if re.fullmatch(r"\d{4}-\d{2}-\d{2}", text) else None
    except ValueError:
        return None


def _bound(f: TemplateField, value: float | str) -> float | dt.date:
    return _iso_date(value) if f.type == "date" else value  # type: ignore[arg-type,return-value]


# ---------------------------------------------------------------- typed values


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
    for part in _date_parts(spec.date_order) or []:
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
    if spec.minimum is not None and value.number < _bound(spec, spec.minimum):  # type: ignore[operator]
        problems.append(f"min: {value.text} is below the minimum {spec.minimum}")
    if spec.maximum is not None and value.number > _bound(spec, spec.maximum):  # type: ignore[operator]
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


# ---------------------------------------------------------------- editing
#
# Small pure steps for a template editor: each returns a new, validated
# Template (TemplateError, with a message for the user, when the result would
# not hold together) and leaves the one given as it was.

#: Width of the printed wall between two boxes of a run drawn by hand, in mm
#: (common practice for comb fields, no source).
_DRAWN_WALL_MM = 0.7


def _with_fields(template: Template, fields: Sequence[TemplateField],
                 sums: Sequence[SumRule] | None = None) -> Template:
    return Template(template.name, template.version, template.reference, tuple(fields),
                    template.sums if sums is None else tuple(sums), template.description)


def _index(template: Template, name: str) -> int:
    for i, f in enumerate(template.fields):
        if f.name == name:
            return i
    raise TemplateError(f"there is no field {name!r}")


def update_field(template: Template, name: str, /, **changes: Any) -> Template:
    """Change attributes of field ``name`` (those of :class:`TemplateField`).

    A new ``name`` is followed in the sum rules. Setting the ``type`` clears
    what belongs to the other types (decimals, date order, check digit, min
    and max) unless given in the same call.
    """
    i = _index(template, name)
    old = template.fields[i]
    if "type" in changes and changes["type"] != old.type:
        cleared = {"decimals": 0, "date_order": None, "check_digit": None, "minimum": None, "maximum": None}
        changes = {**cleared, **changes}
    try:
        new = dataclasses.replace(old, **changes)
    except TypeError as exc:
        raise TemplateError(f"field {name!r}: {exc}") from None
    renamed = new.name != name
    sums = [SumRule(_renamed(r.total, name, new.name), tuple(_renamed(p, name, new.name) for p in r.parts))
            for r in template.sums] if renamed else template.sums
    return _with_fields(template, [*template.fields[:i], new, *template.fields[i + 1 :]], sums)


def _renamed(n: str, old: str, new: str) -> str:
    return new if n == old else n


def rename_field(template: Template, name: str, new_name: str) -> Template:
    """Give field ``name`` the name ``new_name`` (sum rules follow)."""
    return update_field(template, name, name=new_name.strip())


def delete_field(template: Template, name: str) -> Template:
    """Remove a field (a shape that is not a digit field) and the sum rules it was part of."""
    i = _index(template, name)
    if len(template.fields) == 1:
        raise TemplateError("a template needs at least one field; this is the last one")
    sums = [r for r in template.sums if name not in (r.total, *r.parts)]
    return _with_fields(template, [*template.fields[:i], *template.fields[i + 1 :]], sums)


def move_field(template: Template, name: str, dx: int, dy: int) -> Template:
    """Shift every box of field ``name`` by ``(dx, dy)`` reference pixels (it must stay on the page)."""
    i = _index(template, name)
    f = template.fields[i]
    boxes = tuple(Box(b.x0 + dx, b.y0 + dy, b.x1 + dx, b.y1 + dy) for b in f.boxes)
    if not _inside(boxes, template.reference):
        raise TemplateError(f"field {name!r} would leave the page")
    return _with_fields(template, [*template.fields[:i], dataclasses.replace(f, boxes=boxes),
                                   *template.fields[i + 1 :]])


def _inside(boxes: Sequence[Box], ref: Reference) -> bool:
    return all(b.x0 >= 0 and b.y0 >= 0 and b.x1 <= ref.width_px and b.y1 <= ref.height_px for b in boxes)


def run_boxes(x0: int, y0: int, x1: int, y1: int, count: int, *, dpi: float) -> tuple[Box, ...]:
    """``count`` boxes side by side filling the rectangle ``[x0, x1) x [y0, y1)``.

    The rectangle is cut into equal parts; each box keeps a printed wall of
    0.7 mm (half on each side) out of its part.
    """
    if count < 1:
        raise TemplateError("a run needs at least one box")
    x0, x1, y0, y1 = min(x0, x1), max(x0, x1), min(y0, y1), max(y0, y1)
    pitch = (x1 - x0) / count
    wall = _DRAWN_WALL_MM * dpi / 25.4
    if pitch < 2 * wall + 2 or y1 - y0 < 2 * wall + 2:
        raise TemplateError(f"the rectangle is too small for {count} box(es)")
    half = wall / 2
    return tuple(
        Box(round(x0 + i * pitch + half), round(y0 + half), round(x0 + (i + 1) * pitch - half), round(y1 - half))
        for i in range(count)
    )


def add_field(template: Template, name: str, boxes: Sequence[Box], **attributes: Any) -> Template:
    """Add a field with ``boxes`` (e.g. from :func:`run_boxes`) after the others."""
    if not _inside(boxes, template.reference):
        raise TemplateError("the new field lies outside the page")
    return _with_fields(template, [*template.fields, TemplateField(name.strip(), tuple(boxes), **attributes)])


def _free_name(template: Template, base: str) -> str:
    taken = {f.name for f in template.fields}
    k = 2
    while f"{base}_{k}" in taken:
        k += 1
    return f"{base}_{k}"


def _refit(f: TemplateField, boxes: tuple[Box, ...]) -> TemplateField:
    """``f`` on other boxes; a plain ``digits`` field of the same name if its type no longer fits them."""
    try:
        return dataclasses.replace(f, boxes=boxes)
    except TemplateError:
        return TemplateField(f.name, boxes, required=f.required)


def _valid_sums(fields: Sequence[TemplateField], sums: Sequence[SumRule]) -> list[SumRule]:
    kinds = {f.name: f.type for f in fields}
    return [r for r in sums if all(kinds.get(n) in ("integer", "decimal") for n in (r.total, *r.parts))]


def split_field(template: Template, name: str, at: int, *, new_name: str | None = None) -> Template:
    """Cut field ``name`` in two before its box ``at`` (0-based, 1 <= at < number of boxes).

    The left part keeps the name (and its type and rules where they still fit
    its boxes; otherwise it becomes a plain ``digits`` field); the right part
    is a new ``digits`` field called ``new_name`` (default ``<name>_2``),
    placed just after it. Sum rules that no longer fit are dropped.
    """
    i = _index(template, name)
    f = template.fields[i]
    if not 1 <= at < len(f.boxes):
        raise TemplateError(f"field {name!r} has {len(f.boxes)} boxes: split after box 1 to {len(f.boxes) - 1}")
    left = _refit(f, f.boxes[:at])
    right = TemplateField((new_name or _free_name(template, name)).strip(), f.boxes[at:])
    fields = [*template.fields[:i], left, right, *template.fields[i + 1 :]]
    return _with_fields(template, fields, _valid_sums(fields, template.sums))


def join_fields(template: Template, first: str, second: str) -> Template:
    """Join two neighbouring runs of boxes on one line into one field.

    The joined field takes the name, type and rules of the left one (where
    they fit the joined boxes); the other one and its sum rules go. Refused
    when the runs are not side by side: on one line (vertical centres within
    half a box height) with at most three box widths between them.
    """
    ia, ib = _index(template, first), _index(template, second)
    if ia == ib:
        raise TemplateError("choose two different fields to join")
    a, b = template.fields[ia], template.fields[ib]
    if a.boxes[0].x0 > b.boxes[0].x0:
        (ia, a), (ib, b) = (ib, b), (ia, a)
    height = max(bx.height for bx in (*a.boxes, *b.boxes))
    width = max(bx.width for bx in (*a.boxes, *b.boxes))
    same_line = abs(a.boxes[-1].centre[1] - b.boxes[0].centre[1]) <= height / 2
    near = b.boxes[0].x0 - a.boxes[-1].x1 <= 3 * width and b.boxes[0].x0 >= a.boxes[-1].x1 - width / 2
    if not (same_line and near):
        raise TemplateError(f"{a.name!r} and {b.name!r} are not side by side on one line; only neighbours join")
    joined = _refit(a, (*a.boxes, *b.boxes))
    fields = [joined if k == ia else f for k, f in enumerate(template.fields) if k != ib]
    sums = [r for r in template.sums if b.name not in (r.total, *r.parts)]
    return _with_fields(template, fields, _valid_sums(fields, sums))


def parse_sum(text: str) -> SumRule:
    """A sum rule from ``"total = part + part + ..."`` (field names)."""
    left, eq, right = text.partition("=")
    parts = [p.strip() for p in right.split("+")]
    if not eq or not left.strip() or not all(parts):
        raise TemplateError(f"write a sum as 'total = part + part', not {text.strip()!r}")
    return SumRule(left.strip(), tuple(parts))


def sum_text(rule: SumRule) -> str:
    """``"total = part + part"``, as :func:`parse_sum` reads it."""
    return f"{rule.total} = {' + '.join(rule.parts)}"


def set_sums(template: Template, sums: Sequence[SumRule]) -> Template:
    """The template with these sum rules (checked against its fields)."""
    return _with_fields(template, template.fields, sums)


# ---------------------------------------------------------------- JSON


_TOP_KEYS = {"format", "format_version", "name", "version", "description", "reference", "fields", "rules"}
_REFERENCE_KEYS = {"dpi", "width_px", "height_px", "features_dpi", "image_png"}
_FIELD_KEYS = {"name", "type", "boxes", "required", "decimals", "date_order", "check_digit", "min", "max", "lengths"}
_SUM_KEYS = {"rule", "total", "parts"}


def template_to_json(template: Template) -> dict[str, Any]:
    """The JSON object of ``template`` (see the module notes)."""
    ref = template.reference
    ok, png = cv2.imencode(".png", ref.image, [cv2.IMWRITE_PNG_COMPRESSION, 9])
    assert ok
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "name": template.name,
        "version": template.version,
        "description": template.description,
        "reference": {
            "dpi": ref.dpi,
            "width_px": ref.width_px,
            "height_px": ref.height_px,
            "features_dpi": ref.features_dpi,
            "image_png": base64.b64encode(png.tobytes()).decode("ascii"),
        },
        "fields": [_field_to_json(f) for f in template.fields],
        "rules": [{"rule": "sum", "total": r.total, "parts": list(r.parts)} for r in template.sums],
    }


def _field_to_json(f: TemplateField) -> dict[str, Any]:
    out: dict[str, Any] = {"name": f.name, "type": f.type}
    if f.required:
        out["required"] = True
    if f.decimals:
        out["decimals"] = f.decimals
    optional = {"date_order": f.date_order, "check_digit": f.check_digit, "min": f.minimum, "max": f.maximum}
    out.update({k: v for k, v in optional.items() if v is not None})
    if f.lengths is not None:
        out["lengths"] = list(f.lengths)
    out["boxes"] = [[b.x0, b.y0, b.x1, b.y1] for b in f.boxes]
    return out


def template_from_json(data: Any) -> Template:
    """Build a :class:`Template` from its JSON object; :class:`TemplateError` if it is not one."""
    obj = _object(data, "the file", _TOP_KEYS)
    if obj.get("format") != FORMAT:
        raise TemplateError(f"not an Inkcount template (format is {obj.get('format')!r}, expected {FORMAT!r})")
    version = obj.get("format_version")
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        raise TemplateError(f"format_version must be a whole number, not {version!r}")
    if version > FORMAT_VERSION:
        raise TemplateError(
            f"template format version {version} is newer than this program reads "
            f"(up to {FORMAT_VERSION}); update Inkcount"
        )
    fields = obj.get("fields")
    rules = obj.get("rules", [])
    if not isinstance(fields, list) or not isinstance(rules, list):
        raise TemplateError("'fields' and 'rules' must be lists")
    return Template(
        name=_typed(obj, "name", str),
        version=_typed(obj, "version", int),
        reference=_reference_from_json(obj.get("reference")),
        fields=tuple(_field_from_json(f, i) for i, f in enumerate(fields)),
        sums=tuple(_sum_from_json(r, i) for i, r in enumerate(rules)),
        description=_typed(obj, "description", str, ""),
    )


def _object(data: Any, what: str, keys: set[str]) -> dict[str, Any]:
    if not isinstance(data, dict):
        raise TemplateError(f"{what} must be a JSON object")
    unknown = set(data) - keys
    if unknown:
        raise TemplateError(f"{what}: unknown key(s) {', '.join(sorted(unknown))}")
    return data


_MISSING = object()


def _typed(obj: dict[str, Any], key: str, kind: type | tuple[type, ...], default: Any = _MISSING) -> Any:
    if key not in obj:
        if default is _MISSING:
            raise TemplateError(f"'{key}' is missing")
        return default
    value = obj[key]
    kinds = kind if isinstance(kind, tuple) else (kind,)
    if (isinstance(value, bool) and bool not in kinds) or not isinstance(value, kinds):
        raise TemplateError(f"'{key}' has the wrong kind of value: {value!r}")
    return value


def _reference_from_json(data: Any) -> Reference:
    obj = _object(data, "'reference'", _REFERENCE_KEYS)
    try:
        png = base64.b64decode(_typed(obj, "image_png", str), validate=True)
    except ValueError as exc:
        raise TemplateError(f"'reference': image_png is not base64 ({exc})") from None
    image = cv2.imdecode(np.frombuffer(png, np.uint8), cv2.IMREAD_GRAYSCALE)
    if image is None:
        raise TemplateError("'reference': image_png is not a PNG image")
    return Reference(
        dpi=float(_typed(obj, "dpi", (int, float))),
        width_px=_typed(obj, "width_px", int),
        height_px=_typed(obj, "height_px", int),
        features_dpi=float(_typed(obj, "features_dpi", (int, float))),
        image=image,
    )


def _field_from_json(data: Any, index: int) -> TemplateField:
    obj = _object(data, f"field {index + 1}", _FIELD_KEYS)
    name = _typed(obj, "name", str)
    try:
        boxes = tuple(Box(*map(int, b)) for b in _typed(obj, "boxes", list) if _box_like(b))
        if len(boxes) != len(obj["boxes"]):
            raise TemplateError(f"field {name!r}: each box is a list of four whole numbers [x0, y0, x1, y1]")
        lengths = obj.get("lengths")
        if lengths is not None and not isinstance(lengths, list):
            raise TemplateError(f"field {name!r}: 'lengths' must be a list")
        return TemplateField(
            name=name,
            boxes=boxes,
            type=_typed(obj, "type", str, "digits"),
            required=_typed(obj, "required", bool, False),
            decimals=_typed(obj, "decimals", int, 0),
            date_order=_typed(obj, "date_order", str, None),
            check_digit=_typed(obj, "check_digit", str, None),
            minimum=obj.get("min"),
            maximum=obj.get("max"),
            lengths=tuple(lengths) if lengths is not None else None,
        )
    except TemplateError as exc:
        message = str(exc)
        raise TemplateError(message if message.startswith("field") else f"field {name!r}: {message}") from None


def _box_like(b: Any) -> bool:
    return isinstance(b, list) and len(b) == 4 and all(isinstance(v, int) and not isinstance(v, bool) for v in b)


def _sum_from_json(data: Any, index: int) -> SumRule:
    obj = _object(data, f"rule {index + 1}", _SUM_KEYS)
    if obj.get("rule") != "sum":
        raise TemplateError(f"rule {index + 1}: unknown rule {obj.get('rule')!r} (known: sum)")
    parts = _typed(obj, "parts", list)
    if not all(isinstance(p, str) for p in parts):
        raise TemplateError(f"rule {index + 1}: 'parts' must be field names")
    return SumRule(_typed(obj, "total", str), tuple(parts))


def save_template(template: Template, path: str | os.PathLike) -> None:
    """Write ``template`` to ``path`` as JSON (UTF-8, indented)."""
    text = json.dumps(template_to_json(template), indent=1, ensure_ascii=False)
    # one line per box: innermost lists of numbers on one line
    text = re.sub(r"\[\s+([-0-9.,\s]*?)\s+\]", lambda m: "[" + re.sub(r",\s+", ", ", m.group(1)) + "]", text)
    Path(path).write_text(text + "\n", encoding="utf-8")


def load_template(path: str | os.PathLike) -> Template:
    """Read a template file.

    Raises
    ------
    TemplateFileError
        The file is missing, not JSON, not a template, of a newer format, or
        inconsistent; the message names the file and says why.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise TemplateFileError(path, f"cannot read the template: {reason}") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise TemplateFileError(path, f"not a template: damaged JSON at line {exc.lineno} ({exc.msg})") from None
    try:
        return template_from_json(data)
    except TemplateError as exc:
        raise TemplateFileError(path, str(exc)) from None
