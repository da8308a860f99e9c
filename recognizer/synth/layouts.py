"""Made-up form designs in millimetres, and made-up values for them.

A :class:`FormLayout` describes a printed form: its digit fields (rows of
boxes) in reading order and the other printed furniture (text, a notes
rectangle, signature lines, a table, a logo, checkboxes) that a box finder
must not take for digit boxes. :func:`orchard_card` is the Larkhollow Orchard
Cooperative's weigh-in card; :func:`bench_page` the A4 benchmark page.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

MM_PER_INCH = 25.4
LINE_MM = 0.3
"""Width of printed lines (box walls, rules) in mm."""

DigitSource = Callable[[int, np.random.Generator], np.ndarray]



# ---------------------------------------------------------------- layouts

@dataclass(frozen=True)
class FieldSpec:
    """A row of digit boxes.

    ``x_mm, y_mm`` is the top-left corner of the first box (the centre line of
    its walls), in mm from the page's top-left.  Boxes are ``box_mm`` wide and
    ``box_mm * aspect`` high; ``gap_mm == 0`` gives a comb (neighbours share a
    wall), a positive gap gives separate boxes.
    """

    name: str
    label: str
    n_boxes: int
    x_mm: float
    y_mm: float
    box_mm: float = 6.0
    aspect: float = 1.2
    gap_mm: float = 0.0

    @property
    def height_mm(self) -> float:
        """Box height in mm."""
        return self.box_mm * self.aspect

    @property
    def width_mm(self) -> float:
        """Width of the whole field in mm."""
        return self.n_boxes * self.box_mm + (self.n_boxes - 1) * self.gap_mm


@dataclass(frozen=True)
class Text:
    """A printed text line; ``(x_mm, y_mm)`` is the left end of its baseline."""

    text: str
    x_mm: float
    y_mm: float
    height_mm: float = 2.5
    bold: bool = False


@dataclass(frozen=True)
class Rect:
    """An outlined rectangle (notes area, checkbox, frame)."""

    x_mm: float
    y_mm: float
    w_mm: float
    h_mm: float
    line_mm: float = LINE_MM


@dataclass(frozen=True)
class Line:
    """A straight printed line (signature line, rule)."""

    x0_mm: float
    y0_mm: float
    x1_mm: float
    y1_mm: float
    line_mm: float = LINE_MM


@dataclass(frozen=True)
class Table:
    """A ruled table with header texts in its first row."""

    x_mm: float
    y_mm: float
    col_mm: tuple[float, ...]
    row_mm: float
    n_rows: int
    header: tuple[str, ...] = ()


@dataclass(frozen=True)
class Logo:
    """A round emblem: two rings, a filled disc and a leaf, centred at ``(cx_mm, cy_mm)``."""

    cx_mm: float
    cy_mm: float
    r_mm: float


Furniture = Text | Rect | Line | Table | Logo


@dataclass(frozen=True)
class FormLayout:
    """A printed form.

    ``fields`` must be in reading order: rows top to bottom (boxes whose
    vertical centres lie within half a box height form one row), left to right
    within a row.  A box finder that numbers fields f01, f02, ... by that rule
    gives field ``fields[i]`` the name ``f{i + 1:02d}`` (see :func:`fnames`).
    """

    name: str
    page_mm: tuple[float, float]
    fields: tuple[FieldSpec, ...]
    title: str = ""
    furniture: tuple[Furniture, ...] = ()

    def __post_init__(self) -> None:
        names = [f.name for f in self.fields]
        if len(set(names)) != len(names):
            raise ValueError(f"duplicate field names in layout {self.name!r}")
        if list(self.fields) != _reading_order(self.fields):
            raise ValueError(f"fields of layout {self.name!r} are not in reading order")

    def field(self, name: str) -> FieldSpec:
        """The field called ``name``."""
        for spec in self.fields:
            if spec.name == name:
                return spec
        raise KeyError(name)


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
    layout gets random digit strings, mostly filling the field, sometimes
    shorter (written right-aligned) or blank.

    Returns
    -------
    dict
        field name -> digits ('' = blank field), never longer than the field.
    """
    if layout.name == "orchard_card":
        return _orchard_values(rng)
    values = {}
    for spec in layout.fields:
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
