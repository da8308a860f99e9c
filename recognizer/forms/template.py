"""Form templates: named, typed digit fields with rules, and the reference page they sit on.

Without a template the box finder names the fields of every page ``f01``,
``f02``, ... and their values are plain digit strings. A template describes one
form design: where each field's boxes are on a reference scan of the form, what
each field is called, what kind of value it holds and which rules its value
must keep. Pages are aligned to the reference (:mod:`recognizer.forms.registration`)
before their boxes are cut, so a faint, crossed or partly cut-off box is still
read where the template says it is.

This module holds the template itself (:class:`Template`, :class:`TemplateField`,
:class:`SumRule`, :class:`Reference`) and the checks that make each of them
hold together: an inconsistent template cannot be built (:class:`TemplateError`).
Beside it in :mod:`recognizer.forms`:

* :mod:`recognizer.forms.values` -- the field types and the rules: a page's
  per-box texts typed (``18.7``, ``2026-09-13``) and checked;
* :mod:`recognizer.forms.editing` -- the steps of a template editor (rename,
  retype, delete, move, draw, split, join, sums);
* :mod:`recognizer.forms.template_file` -- the JSON file format, written and read;
* :mod:`recognizer.forms.drafting` -- a first template from the boxes found on
  a form scan.

Field names are letters, digits and underscores, start with a letter and may
not be one of the CSV's own columns (:data:`RESERVED_NAMES`). Each type takes
its own attributes: ``decimals`` goes with ``decimal`` fields and only with
them, ``date_order`` with ``date`` fields and only with them, ``check_digit``
with ``code`` fields (which need one) and ``digits`` fields, ``min`` and
``max`` with ``integer``, ``decimal`` and ``date`` fields; a sum rule names
number fields (``integer`` or ``decimal``) only.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from collections import Counter
from dataclasses import dataclass, field

import numpy as np

from recognizer.page.boxes import Box
from recognizer.forms.checkdigits import CHECK_SYSTEMS

__all__ = [
    "DATE_ORDERS",
    "DPI_RANGE",
    "MAX_PAGE_PIXELS",
    "FIELD_TYPES",
    "RESERVED_NAMES",
    "Reference",
    "SumRule",
    "Template",
    "TemplateError",
    "TemplateField",
    "check_reference_size",
    "comparable_bound",
    "date_parts",
    "iso_date",
]

FIELD_TYPES = ("digits", "integer", "decimal", "date", "code")
#: Examples of box orders for dates; any order of DD, MM and YYYY (or YY) is accepted.
DATE_ORDERS = ("DDMMYYYY", "MMDDYYYY", "YYYYMMDD", "DDMMYY", "MMDDYY", "YYMMDD")
#: Column names of the values CSV that a field may not take.
RESERVED_NAMES = frozenset({"file", "page", "to_check", "problem", "template"})
_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")
#: Resolutions a reference page and its features image may have (dpi).
DPI_RANGE = (50.0, 2400.0)
FEATURES_DPI_RANGE = (10.0, 600.0)
#: The largest reference page, in pixels (an A3 page at 600 dpi is 70 million).
MAX_PAGE_PIXELS = 120_000_000


class TemplateError(ValueError):
    """A template that does not hold together (bad field, unknown rule, ...)."""


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
    """One named field of a template; its types and rules are described in :mod:`recognizer.forms.values`.

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
        parts = date_parts(f.date_order)
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
            if not isinstance(v, str) or iso_date(v) is None:
                raise TemplateError(f"{where}: min and max of a date are ISO dates such as 2026-08-10, not {v!r}")
    else:
        for v in bounds:
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise TemplateError(f"{where}: min and max must be numbers, not {v!r}")
    if len(bounds) == 2 and comparable_bound(f, f.minimum) > comparable_bound(f, f.maximum):
        raise TemplateError(f"{where}: min {f.minimum} is above max {f.maximum}")


def _check_template(t: Template) -> None:
    if not isinstance(t.name, str) or not t.name.strip():
        raise TemplateError("the template needs a name")
    if isinstance(t.version, bool) or not isinstance(t.version, int) or t.version < 1:
        raise TemplateError(f"version must be a whole number from 1, not {t.version!r}")
    if not t.fields:
        raise TemplateError("the template has no fields")
    seen = {name for name, n in Counter(f.name for f in t.fields).items() if n > 1}
    if seen:
        raise TemplateError(f"field names used twice: {', '.join(sorted(seen))}")
    r = t.reference
    check_reference_size(r.dpi, r.width_px, r.height_px, r.features_dpi)
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


def check_reference_size(dpi: float, width_px: int, height_px: int, features_dpi: float) -> None:
    """A reference page's resolution and size are within reason (:data:`DPI_RANGE`,
    :data:`FEATURES_DPI_RANGE`, :data:`MAX_PAGE_PIXELS`); :class:`TemplateError` if not."""
    if not (DPI_RANGE[0] <= dpi <= DPI_RANGE[1] and FEATURES_DPI_RANGE[0] <= features_dpi <= FEATURES_DPI_RANGE[1]):
        raise TemplateError(f"the reference's dpi ({dpi:g}, features {features_dpi:g}) must lie between "
                            f"{DPI_RANGE[0]:g} and {DPI_RANGE[1]:g} (features: {FEATURES_DPI_RANGE[0]:g} to "
                            f"{FEATURES_DPI_RANGE[1]:g})")
    if width_px < 1 or height_px < 1 or width_px * height_px > MAX_PAGE_PIXELS:
        raise TemplateError(f"the reference page of {width_px} x {height_px} pixels is not a page size "
                            f"(at most {MAX_PAGE_PIXELS:,} pixels)")


def date_parts(order: str) -> list[str] | None:
    """Split ``DDMMYYYY`` into ``['DD', 'MM', 'YYYY']``; None if it is no date order."""
    parts = re.findall(r"DD|MM|YYYY|YY", order)
    if "".join(parts) != order or sorted(p[0] for p in parts) != ["D", "M", "Y"]:
        return None
    return parts


def iso_date(text: str) -> dt.date | None:
    """The day an ISO date such as ``2026-08-10`` names; None if ``text`` is none."""
    try:
        return dt.date.fromisoformat(text) if re.fullmatch(r"\d{4}-\d{2}-\d{2}", text) else None
    except ValueError:
        return None


def comparable_bound(f: TemplateField, value: float | str) -> float | dt.date:
    """A ``min`` or ``max`` of field ``f`` as its typed values compare with it (a date for a date field)."""
    return iso_date(value) if f.type == "date" else value  # type: ignore[arg-type,return-value]
