"""Made-up form designs in millimetres, and made-up values for them.

A :class:`FormLayout` describes a printed form: its digit fields (rows of
boxes) in reading order and the other printed furniture (text, a notes
rectangle, signature lines, a table, a logo, checkboxes) that a box finder
must not take for digit boxes. :func:`orchard_card` is the Larkhollow Orchard
Cooperative's weigh-in card; :func:`bench_page` the A4 benchmark page; more
designs in :mod:`recognizer.synth.designs`.

Comb styles
-----------
Each :class:`FieldSpec` has a comb style (:data:`COMB_STYLES`):

``"closed"``
    boxes side by side, neighbours sharing a wall (``gap_mm == 0``);
``"separate"``
    square or tall boxes, each with its own four walls, ``gap_mm > 0`` apart;
``"open"``
    an open comb: a baseline with short upright ticks between the digit
    positions and no top line; the two end ticks may be taller
    (``tick``, ``end_tick``: tick heights as fractions of the box height);
``"table"``
    closed (or, with a gap, separate) boxes printed inside a cell of a ruled
    :class:`Table` of the same layout (checked when the layout is built).

The default ``style=""`` is ``"closed"`` without a gap and ``"separate"``
with one (the designs made before styles existed).  A printed separator
(``/``, ``:``, ``.``) between groups of digits, as in a date DD/MM/YYYY,
stands in a gap one box wide between two fields: every group is a field of
its own, as the orchard card's tenths after the decimal point
(:func:`recognizer.synth.designs.grouped_fields` builds such runs).

Colours
-------
Everything is printed in the layout's ``colour`` unless a field or a piece of
furniture names its own: ``"black"`` or a dropout colour (:data:`DROPOUT_COLOURS`:
light red, green, blue, light grey; RGB values in
:mod:`recognizer.synth.colour`).  :func:`recolour` prints a design in another
colour.

Truth and names
---------------
``fields`` are in reading order, the order in which
:func:`recognizer.page.boxes.find_fields` names fields ``f01``, ``f02``, ...:
rows top to bottom (a field joins a row when its vertical centre lies within
half a box height of the row's first field's centre), then left to right.
:func:`fnames` maps layout names to those names.  Every digit position's
truth rectangle is the inner rectangle of its box; for an open comb, the cell
between two ticks, from the baseline up to where a box's top wall would be.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

import numpy as np

MM_PER_INCH = 25.4
LINE_MM = 0.3
"""Width of printed lines (box walls, rules) in mm."""

DigitSource = Callable[[int, np.random.Generator], np.ndarray]

COMB_STYLES = ("closed", "separate", "open", "table")
"""The comb styles a :class:`FieldSpec` can be printed in (see the module notes)."""

PRINT_COLOURS = ("black", "red", "green", "blue", "grey")
"""Colours forms are printed in: black and the dropout colours."""

DROPOUT_COLOURS = ("red", "green", "blue", "grey")
"""Light colours that a colour-dropout scanner (or a pen-only reader) ignores."""

VALUE_KINDS = ("", "date", "day", "month", "year", "hour", "minute", "count")
"""What :func:`random_values` writes in a field: any digits ('') or a part of a date or time,
or a count (written without leading zeros)."""


def _check_colour(colour: str, what: str, *, empty: bool = True) -> None:
    if colour not in PRINT_COLOURS and not (empty and colour == ""):
        raise ValueError(f"{what}: unknown colour {colour!r}; use one of {PRINT_COLOURS}")


# ---------------------------------------------------------------- layouts

@dataclass(frozen=True)
class FieldSpec:
    """A row of digit boxes.

    ``x_mm, y_mm`` is the top-left corner of the first box (the centre line of
    its walls), in mm from the page's top-left.  Boxes are ``box_mm`` wide and
    ``box_mm * aspect`` high; ``gap_mm == 0`` gives a comb (neighbours share a
    wall), a positive gap gives separate boxes.

    ``style`` is one of :data:`COMB_STYLES` or '' (closed without a gap,
    separate with one); an open comb has its baseline at ``y_mm + height_mm``
    and ticks ``tick`` (inner) and ``end_tick`` (the two ends) times the box
    height tall.  ``colour`` '' prints the field (boxes and label) in the
    layout's colour.  ``kind`` says what :func:`random_values` writes
    (:data:`VALUE_KINDS`).
    """

    name: str
    label: str
    n_boxes: int
    x_mm: float
    y_mm: float
    box_mm: float = 6.0
    aspect: float = 1.2
    gap_mm: float = 0.0
    style: str = ""
    colour: str = ""
    tick: float = 0.3
    end_tick: float = 0.55
    kind: str = ""

    def __post_init__(self) -> None:
        if self.n_boxes < 1:
            raise ValueError(f"field {self.name!r} needs at least one box")
        if self.style not in ("", *COMB_STYLES):
            raise ValueError(f"field {self.name!r}: unknown comb style {self.style!r}; "
                             f"use one of {COMB_STYLES}")
        if self.style in ("closed", "open") and self.gap_mm != 0:
            raise ValueError(f"field {self.name!r}: a {self.style} comb has no gaps")
        if self.style == "separate" and self.gap_mm <= 0:
            raise ValueError(f"field {self.name!r}: separate boxes need gap_mm > 0")
        if not (0 < self.tick <= 1 and 0 < self.end_tick <= 1):
            raise ValueError(f"field {self.name!r}: tick heights are fractions of the box height")
        if self.kind not in VALUE_KINDS:
            raise ValueError(f"field {self.name!r}: unknown kind {self.kind!r}")
        _check_colour(self.colour, f"field {self.name!r}")

    @property
    def comb(self) -> str:
        """The comb style in effect: :attr:`style`, or closed/separate by the gap."""
        return self.style or ("separate" if self.gap_mm > 0 else "closed")

    @property
    def height_mm(self) -> float:
        """Box height in mm."""
        return self.box_mm * self.aspect

    @property
    def width_mm(self) -> float:
        """Width of the whole field in mm."""
        return self.n_boxes * self.box_mm + (self.n_boxes - 1) * self.gap_mm

    def lefts_mm(self) -> list[float]:
        """The left wall (or tick) of every box, in mm."""
        return [self.x_mm + i * (self.box_mm + self.gap_mm) for i in range(self.n_boxes)]


@dataclass(frozen=True)
class Text:
    """A printed text line; ``(x_mm, y_mm)`` is the left end of its baseline.

    ``align="centre"`` centres the text on ``x_mm`` instead.
    """

    text: str
    x_mm: float
    y_mm: float
    height_mm: float = 2.5
    bold: bool = False
    colour: str = ""
    align: str = "left"


@dataclass(frozen=True)
class Rect:
    """An outlined rectangle (notes area, checkbox, frame)."""

    x_mm: float
    y_mm: float
    w_mm: float
    h_mm: float
    line_mm: float = LINE_MM
    colour: str = ""


@dataclass(frozen=True)
class Line:
    """A straight printed line (signature line, rule)."""

    x0_mm: float
    y0_mm: float
    x1_mm: float
    y1_mm: float
    line_mm: float = LINE_MM
    colour: str = ""


@dataclass(frozen=True)
class Table:
    """A ruled table with header texts in its first row."""

    x_mm: float
    y_mm: float
    col_mm: tuple[float, ...]
    row_mm: float
    n_rows: int
    header: tuple[str, ...] = ()
    colour: str = ""

    def cell_mm(self, row: int, col: int) -> tuple[float, float, float, float]:
        """``(x0, y0, x1, y1)`` of a cell, between its rules' centre lines (row 0 = header)."""
        x0 = self.x_mm + sum(self.col_mm[:col])
        y0 = self.y_mm + row * self.row_mm
        return x0, y0, x0 + self.col_mm[col], y0 + self.row_mm


@dataclass(frozen=True)
class Logo:
    """A round emblem: two rings, a filled disc and a leaf, centred at ``(cx_mm, cy_mm)``."""

    cx_mm: float
    cy_mm: float
    r_mm: float
    colour: str = ""


Furniture = Text | Rect | Line | Table | Logo


@dataclass(frozen=True)
class FormLayout:
    """A printed form.

    ``fields`` must be in reading order: rows top to bottom (boxes whose
    vertical centres lie within half a box height form one row), left to right
    within a row.  A box finder that numbers fields f01, f02, ... by that rule
    gives field ``fields[i]`` the name ``f{i + 1:02d}`` (see :func:`fnames`).
    ``colour`` is the colour everything is printed in unless it names its own.
    Fields in the ``"table"`` style must lie inside a cell of one of the
    layout's tables.
    """

    name: str
    page_mm: tuple[float, float]
    fields: tuple[FieldSpec, ...]
    title: str = ""
    furniture: tuple[Furniture, ...] = ()
    colour: str = "black"

    def __post_init__(self) -> None:
        names = [f.name for f in self.fields]
        if len(set(names)) != len(names):
            raise ValueError(f"duplicate field names in layout {self.name!r}")
        if list(self.fields) != _reading_order(self.fields):
            raise ValueError(f"fields of layout {self.name!r} are not in reading order")
        _check_colour(self.colour, f"layout {self.name!r}", empty=False)
        for item in self.furniture:
            _check_colour(item.colour, f"furniture {item!r}")
        tables = [item for item in self.furniture if isinstance(item, Table)]
        for spec in self.fields:
            if spec.comb == "table" and not any(_in_a_cell(spec, t) for t in tables):
                raise ValueError(f"table field {spec.name!r} of layout {self.name!r} "
                                 "is not inside a table cell")

    def field(self, name: str) -> FieldSpec:
        """The field called ``name``."""
        for spec in self.fields:
            if spec.name == name:
                return spec
        raise KeyError(name)

    def colour_of(self, item: FieldSpec | Furniture) -> str:
        """The colour ``item`` is printed in."""
        return item.colour or self.colour


def _in_a_cell(spec: FieldSpec, table: Table) -> bool:
    """Whether the field's outline lies within one cell of ``table`` (rules may be shared)."""
    eps = 1e-6
    for row in range(table.n_rows):
        for col in range(len(table.col_mm)):
            x0, y0, x1, y1 = table.cell_mm(row, col)
            if (x0 - eps <= spec.x_mm and spec.x_mm + spec.width_mm <= x1 + eps
                    and y0 - eps <= spec.y_mm and spec.y_mm + spec.height_mm <= y1 + eps):
                return True
    return False


def _reading_order(fields: Sequence[FieldSpec]) -> list[FieldSpec]:
    """Sort fields into rows (vertical centres within half a box height) then left to right."""
    rows: list[list[FieldSpec]] = []
    for spec in sorted(fields, key=lambda f: f.y_mm + f.height_mm / 2):
        centre = spec.y_mm + spec.height_mm / 2
        if rows:
            ref = rows[-1][0]
            if abs(centre - (ref.y_mm + ref.height_mm / 2)) <= ref.height_mm / 2:
                rows[-1].append(spec)
                continue
        rows.append([spec])
    return [spec for row in rows for spec in sorted(row, key=lambda f: f.x_mm)]


def fnames(layout: FormLayout) -> dict[str, str]:
    """Map each field name to the box finder's reading-order name (``f01``, ``f02``, ...)."""
    return {spec.name: f"f{i + 1:02d}" for i, spec in enumerate(layout.fields)}


def recolour(layout: FormLayout, colour: str, *, furniture: bool = True) -> FormLayout:
    """``layout`` printed in ``colour``.

    With ``furniture=False`` only the fields (boxes and labels) change colour and
    the rest stays as it was (black text and marks a template can register on).
    Items that name their own colour keep it.
    """
    _check_colour(colour, "recolour", empty=False)
    if furniture:
        return replace(layout, colour=colour)
    fields = tuple(spec if spec.colour else replace(spec, colour=colour) for spec in layout.fields)
    return replace(layout, fields=fields)


ORCHARD_VARIETIES = ("Amberlin", "Coldmere Russet", "Maybright")
"""Invented apple varieties counted on the orchard card (crates_1..crates_3)."""


def orchard_card() -> FormLayout:
    """The Larkhollow Orchard Cooperative harvest weigh-in card (A5 landscape).

    Fields in reading order: ``grower_number`` (5), ``picking_date`` (8,
    DDMMYYYY), ``block_number`` (2), ``row_number`` (3), ``crates_1`` ..
    ``crates_3`` (3 each, one per variety in :data:`ORCHARD_VARIETIES`),
    ``total_crates`` (3), ``net_weight_kg`` (4, whole kilograms) and
    ``net_weight_tenths`` (1 box after a printed decimal point, one box width
    away, so that it reads as a field of its own).
    """
    fields = (
        FieldSpec("grower_number", "Grower no.", 5, 14, 30),
        FieldSpec("picking_date", "Picking date (DD MM YYYY)", 8, 62, 30),
        FieldSpec("block_number", "Block", 2, 14, 50),
        FieldSpec("row_number", "Row", 3, 36, 50),
        FieldSpec("crates_1", f"Crates {ORCHARD_VARIETIES[0]}", 3, 14, 70),
        FieldSpec("crates_2", f"Crates {ORCHARD_VARIETIES[1]}", 3, 52, 70),
        FieldSpec("crates_3", f"Crates {ORCHARD_VARIETIES[2]}", 3, 90, 70),
        FieldSpec("total_crates", "Total crates", 3, 14, 90),
        FieldSpec("net_weight_kg", "Net weight (kg)", 4, 52, 90),
        FieldSpec("net_weight_tenths", "", 1, 82, 90),
    )
    furniture: tuple[Furniture, ...] = (
        Logo(16, 13, 6.5),
        Text("Larkhollow Orchard Cooperative", 26, 12, 5.0, bold=True),
        Text("Harvest weigh-in card  -  one card per picking load", 26, 19, 2.6),
        Text("Write one digit per box, in ink.", 148, 12.2, 2.4),
        Rect(140, 6, 56, 10),
        Text("D  D   M  M   Y   Y   Y  Y", 63, 41, 1.6),
        Text(".", 78.2, 98.4, 6.0, bold=True),
        Text("Remarks", 122, 48, 2.6),
        Rect(122, 50, 76, 48),
        Text("Quality class (tick one)", 14, 108, 2.4),
        Rect(60, 104.5, 3.5, 3.5), Text("I", 65, 108, 2.4),
        Rect(72, 104.5, 3.5, 3.5), Text("II", 77, 108, 2.4),
        Rect(84, 104.5, 3.5, 3.5), Text("Juice", 89, 108, 2.4),
        Table(14, 114, (40, 32, 32, 40), 7.0, 2,
              ("Bin / trailer", "Tare", "Gross", "Weighbridge")),
        Text("Checker's initials", 14, 138, 2.4), Line(46, 138, 86, 138),
        Text("Grower signature", 100, 138, 2.4), Line(130, 138, 196, 138),
        Text("Larkhollow Orchard Cooperative - keep this card with the load", 14, 145, 1.8),
    )
    return FormLayout("orchard_card", (210.0, 148.0), fields,
                      "Larkhollow Orchard Cooperative - Harvest weigh-in card", furniture)


def bench_page() -> FormLayout:
    """An A4 page with 60 digit boxes in 12 fields, for the reading benchmark.

    Six rows of two fields; combs and separate boxes, box widths 5 to 7 mm.
    Fields are named ``b01`` .. ``b12`` in reading order.
    """
    rows = (  # (y_mm, box_mm, gap_mm, n_left, n_right)
        (40, 6.0, 0.0, 6, 4),
        (66, 6.0, 0.0, 5, 5),
        (92, 6.0, 1.5, 8, 2),
        (118, 7.0, 0.0, 3, 7),
        (144, 6.0, 2.0, 5, 5),
        (170, 5.0, 0.0, 4, 6),
    )
    fields = []
    for y, box, gap, n_left, n_right in rows:
        for x, n in ((20.0, n_left), (115.0, n_right)):
            i = len(fields) + 1
            fields.append(FieldSpec(f"b{i:02d}", f"Entry {i}", n, x, y, box, 1.2, gap))
    furniture: tuple[Furniture, ...] = (
        Logo(28, 20, 8),
        Text("Larkhollow Orchard Cooperative", 42, 18, 6.0, bold=True),
        Text("Tally sheet - digit reading check", 42, 26, 3.0),
        Rect(20, 196, 170, 40),
        Text("Notes", 22, 202, 3.0),
        Table(20, 246, (50, 40, 40, 40), 8.0, 3, ("Picker", "Crates", "Bins", "Checked")),
        Rect(20, 280, 4, 4), Text("Entered in ledger", 27, 283.5, 3.0),
        Text("Signature", 110, 283.5, 3.0), Line(130, 284, 190, 284),
    )
    return FormLayout("bench_page", (210.0, 297.0), tuple(fields),
                      "Larkhollow Orchard Cooperative - Tally sheet", furniture)


# ---------------------------------------------------------------- values

def random_values(layout: FormLayout, *, rng: np.random.Generator) -> dict[str, str]:
    """Plausible field values for ``layout``.

    The orchard card gets consistent values (a 2026 harvest date, crate counts
    summing to the total, a net weight of 16.5..19.5 kg per crate, grower
    numbers with leading zeros, some variety counts left blank); any other
    layout gets, in a field with a ``kind``, a value of that kind (a 2026
    harvest date or part of one, a working-day time, a count), and else random
    digit strings, mostly filling the field, sometimes shorter (written
    right-aligned) or blank.

    Returns
    -------
    dict
        field name -> digits ('' = blank field), never longer than the field.
    """
    if layout.name == "orchard_card":
        return _orchard_values(rng)
    values = {}
    for spec in layout.fields:
        if spec.kind:
            values[spec.name] = _kind_value(spec, rng)
            continue
        u = rng.random()
        n = spec.n_boxes if u < 0.85 else (0 if u < 0.9 else int(rng.integers(1, spec.n_boxes + 1)))
        values[spec.name] = "".join(str(d) for d in rng.integers(0, 10, n))
    return values


def _orchard_values(rng: np.random.Generator) -> dict[str, str]:
    """Consistent values for one orchard weigh-in card."""
    season_start = dt.date(2026, 8, 10)
    season_days = (dt.date(2026, 10, 31) - season_start).days + 1
    day = season_start + dt.timedelta(days=int(rng.integers(0, season_days)))
    crates = []
    for _ in ORCHARD_VARIETIES:
        count = int(rng.integers(0, 41)) if rng.random() < 0.7 else 0
        crates.append(count)
    if sum(crates) == 0:
        crates[int(rng.integers(0, 3))] = int(rng.integers(1, 41))
    crate_text = [("" if rng.random() < 0.7 else "0") if c == 0 else str(c) for c in crates]
    weight = round(sum(crates) * float(rng.uniform(16.5, 19.5)), 1)
    block = int(rng.integers(1, 25))
    return {
        "grower_number": f"{int(rng.integers(1, 2000)):05d}",
        "picking_date": day.strftime("%d%m%Y"),
        "block_number": f"{block:02d}" if rng.random() < 0.5 else str(block),
        "row_number": str(int(rng.integers(1, 121))),
        "crates_1": crate_text[0],
        "crates_2": crate_text[1],
        "crates_3": crate_text[2],
        "total_crates": str(sum(crates)),
        "net_weight_kg": str(int(weight)),
        "net_weight_tenths": str(int(round(weight * 10)) % 10),
    }


def _kind_value(spec: FieldSpec, rng: np.random.Generator) -> str:
    """A value of ``spec.kind`` that fits the field (right-aligned when shorter)."""
    n = spec.n_boxes
    if spec.kind in ("date", "day", "month", "year"):
        day = dt.date(2026, 8, 10) + dt.timedelta(days=int(rng.integers(0, 83)))
        text = {"date": day.strftime("%d%m%Y"), "day": day.strftime("%d"),
                "month": day.strftime("%m"), "year": day.strftime("%Y")}[spec.kind]
        return text[-n:]
    if spec.kind == "hour":
        return f"{int(rng.integers(6, 20)):02d}"[-n:]
    if spec.kind == "minute":
        return f"{int(rng.integers(0, 60)):02d}"[-n:]
    # a count: blank now and then, else 1 .. a few hundred, as many digits as it takes
    if rng.random() < 0.1:
        return ""
    top = min(10 ** n - 1, 400)
    return str(int(math.exp(rng.uniform(0.0, math.log(top + 1)))) or 1)[:n]
