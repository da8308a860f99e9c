"""Demo and test forms: layouts, rendering with handwriting, scan distortions, saving.

A :class:`FormLayout` describes a printed form in millimetres: its digit
fields (rows of boxes) in reading order and the other printed furniture
(text, a notes rectangle, signature lines, a table, a logo, checkboxes) that
a box finder must not take for digit boxes.  :func:`render_form` prints the
form at a given resolution and writes digits into the boxes, recording where
every box's inner rectangle lies; :func:`scan_distort` imitates a scanner
(placement, blur, uneven light, noise, faded or broken lines) and moves the
recorded rectangles along; :func:`save_scan` writes the usual scan formats.

Pixel coordinates are continuous: pixel (row r, column c) covers
``[c, c + 1) x [r, r + 1)``, so its centre is ``(c + 0.5, r + 0.5)``.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path

import cv2
import numpy as np
from PIL import Image

from recognizer.synth.handwriting import Writer, draw_junk

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


# ---------------------------------------------------------------- rendering

Box = tuple[float, float, float, float]


@dataclass
class RenderedForm:
    """A form image with its ground truth.

    Attributes
    ----------
    image : numpy.ndarray
        (M, N) uint8, 0 = ink, 255 = paper.
    dpi : int
        Resolution of ``image``.
    values : dict
        Field name -> digits written ('' = blank field).
    boxes : dict
        Field name -> per box, left to right, the inner rectangle
        ``(x0, y0, x1, y1)`` in continuous pixel coordinates of ``image``
        (after a distortion: the axis-aligned bounds of the moved box).
    cells : dict
        Field name -> per box the character written ('' = empty box).
    printed, handwriting : numpy.ndarray or None
        The printed furniture and the handwriting alone, (M, N) uint8 like
        ``image`` (``image`` is their pixelwise minimum); None after
        :func:`scan_distort`.
    rules : numpy.ndarray or None
        (M, N) bool, the pixels of printed lines (not text); None after
        :func:`scan_distort`.
    """

    image: np.ndarray
    dpi: int
    values: dict[str, str]
    boxes: dict[str, list[Box]]
    cells: dict[str, list[str]]
    printed: np.ndarray | None = field(default=None, repr=False)
    handwriting: np.ndarray | None = field(default=None, repr=False)
    rules: np.ndarray | None = field(default=None, repr=False)


def mm_to_px(mm: float, dpi: int) -> float:
    """Convert millimetres to pixels at ``dpi``."""
    return mm * dpi / MM_PER_INCH


def render_form(layout: FormLayout, values: dict[str, str], *, dpi: int = 300,
                writer: Writer | None = None, digit_source: DigitSource | None = None,
                rng: np.random.Generator, line_px: int | None = None,
                stray_marks: float = 0.0) -> RenderedForm:
    """Print ``layout`` at ``dpi`` and write ``values`` into its boxes.

    Parameters
    ----------
    layout : FormLayout
    values : dict
        Field name -> digit string, at most ``n_boxes`` long, written
        right-aligned (leading boxes stay empty); missing names are blank,
        names the layout lacks are refused (ValueError).
    dpi : int
        Resolution, 150..600 sensible.
    writer : Writer, optional
        Handwriting style; a random ordinary writer from ``rng`` if omitted.
    digit_source : callable, optional
        ``(digit, rng) -> (h, w) uint8`` ink image (ink = 255 on 0), used
        instead of the writer (e.g. real MNIST digits).
    rng : numpy.random.Generator
    line_px : int, optional
        Width of printed lines in pixels; default 0.3 mm at ``dpi``.
    stray_marks : float
        Probability that an empty box gets a stray dot, dash or smudge
        (:func:`recognizer.synth.handwriting.draw_junk`); its cell stays ''.

    Returns
    -------
    RenderedForm
        Digits fill about 60-80 % of the box height, with jitter in position
        and size; a few percent of them touch or cross a box wall.
    """
    width_px = int(round(mm_to_px(layout.page_mm[0], dpi)))
    height_px = int(round(mm_to_px(layout.page_mm[1], dpi)))
    line = line_px if line_px is not None else max(1, int(round(mm_to_px(LINE_MM, dpi))))
    printed = np.full((height_px, width_px), 255, np.uint8)
    rules = np.zeros((height_px, width_px), bool)
    for item in layout.furniture:
        _draw_furniture(printed, rules, item, dpi, line)
    boxes: dict[str, list[Box]] = {}
    for spec in layout.fields:
        boxes[spec.name] = _draw_field(printed, rules, spec, dpi, line)
        if spec.label:
            _put_text(printed, spec.label, spec.x_mm, spec.y_mm - 1.3, 2.2, dpi)
    if writer is None and digit_source is None:
        writer = Writer.random(rng)
    source = digit_source or _writer_source(writer)
    handwriting = np.full_like(printed, 255)
    darkness = float(rng.uniform(0.8, 1.0))
    unknown = set(values) - set(boxes)
    if unknown:
        raise ValueError(f"no fields {sorted(unknown)} in layout {layout.name!r}")
    cells: dict[str, list[str]] = {}
    clean_values: dict[str, str] = {}
    for spec in layout.fields:
        text = values.get(spec.name, "")
        if len(text) > spec.n_boxes or text and not (text.isascii() and text.isdigit()):
            raise ValueError(f"value {text!r} does not fit field {spec.name!r}")
        clean_values[spec.name] = text
        cells[spec.name] = [""] * (spec.n_boxes - len(text)) + list(text)
        for box, char in zip(boxes[spec.name], cells[spec.name]):
            if char:
                _write_digit(handwriting, box, source(int(char), rng), darkness, rng)
            elif rng.random() < stray_marks:
                _write_junk(handwriting, box, darkness, rng)
    image = np.minimum(printed, handwriting)
    return RenderedForm(image, dpi, clean_values, boxes, cells, printed, handwriting, rules)


def _writer_source(writer: Writer) -> DigitSource:
    """A digit source drawing with ``writer`` at a size suited to 300 dpi boxes."""
    return lambda digit, rng: writer.draw(digit, rng=rng, size=96)


def _band(centre: float, width: int) -> tuple[int, int]:
    """Pixel index range [a, b) of a line ``width`` px wide centred at ``centre`` px."""
    a = int(round(centre - width / 2.0))
    return a, a + width


def _hline(page: np.ndarray, rules: np.ndarray, y: float, x0: float, x1: float, w: int) -> None:
    a, b = _band(y, w)
    c0, c1 = int(round(x0 - w / 2.0)), int(round(x1 - w / 2.0)) + w
    page[max(a, 0):b, max(c0, 0):c1] = 0
    rules[max(a, 0):b, max(c0, 0):c1] = True


def _vline(page: np.ndarray, rules: np.ndarray, x: float, y0: float, y1: float, w: int) -> None:
    a, b = _band(x, w)
    r0, r1 = int(round(y0 - w / 2.0)), int(round(y1 - w / 2.0)) + w
    page[max(r0, 0):r1, max(a, 0):b] = 0
    rules[max(r0, 0):r1, max(a, 0):b] = True


def _rect(page: np.ndarray, rules: np.ndarray, x0: float, y0: float, x1: float, y1: float,
          w: int) -> None:
    """Outline the rectangle with corners (x0, y0), (x1, y1) in px (wall centre lines)."""
    _hline(page, rules, y0, x0, x1, w)
    _hline(page, rules, y1, x0, x1, w)
    _vline(page, rules, x0, y0, y1, w)
    _vline(page, rules, x1, y0, y1, w)


def _draw_field(page: np.ndarray, rules: np.ndarray, spec: FieldSpec, dpi: int,
                w: int) -> list[Box]:
    """Draw the walls of a field's boxes; return their inner rectangles in px."""
    px = partial(mm_to_px, dpi=dpi)
    y0, y1 = px(spec.y_mm), px(spec.y_mm + spec.height_mm)
    lefts = [spec.x_mm + i * (spec.box_mm + spec.gap_mm) for i in range(spec.n_boxes)]
    if spec.gap_mm == 0:
        _rect(page, rules, px(lefts[0]), y0, px(lefts[0] + spec.width_mm), y1, w)
        for x in lefts[1:]:
            _vline(page, rules, px(x), y0, y1, w)
    else:
        for x in lefts:
            _rect(page, rules, px(x), y0, px(x + spec.box_mm), y1, w)
    top, bottom = _band(y0, w)[1], _band(y1, w)[0]
    return [(float(_band(px(x), w)[1]), float(top), float(_band(px(x + spec.box_mm), w)[0]),
             float(bottom)) for x in lefts]


def _draw_furniture(page: np.ndarray, rules: np.ndarray, item: Furniture, dpi: int,
                    w: int) -> None:
    """Print one piece of non-digit furniture."""
    px = partial(mm_to_px, dpi=dpi)
    if isinstance(item, Text):
        _put_text(page, item.text, item.x_mm, item.y_mm, item.height_mm, dpi, item.bold)
    elif isinstance(item, Rect):
        lw = max(1, int(round(px(item.line_mm))))
        _rect(page, rules, px(item.x_mm), px(item.y_mm), px(item.x_mm + item.w_mm),
              px(item.y_mm + item.h_mm), lw)
    elif isinstance(item, Line):
        lw = max(1, int(round(px(item.line_mm))))
        if item.y0_mm == item.y1_mm:
            _hline(page, rules, px(item.y0_mm), px(item.x0_mm), px(item.x1_mm), lw)
        else:
            _vline(page, rules, px(item.x0_mm), px(item.y0_mm), px(item.y1_mm), lw)
    elif isinstance(item, Table):
        x_edges = np.concatenate([[0.0], np.cumsum(item.col_mm)]) + item.x_mm
        y_edges = item.y_mm + item.row_mm * np.arange(item.n_rows + 1)
        for y in y_edges:
            _hline(page, rules, px(y), px(x_edges[0]), px(x_edges[-1]), w)
        for x in x_edges:
            _vline(page, rules, px(x), px(y_edges[0]), px(y_edges[-1]), w)
        for x, text in zip(x_edges, item.header):
            _put_text(page, text, x + 1.5, item.y_mm + item.row_mm * 0.68, 2.2, dpi)
    elif isinstance(item, Logo):
        centre = (int(round(px(item.cx_mm))), int(round(px(item.cy_mm))))
        r = px(item.r_mm)
        cv2.circle(page, centre, int(round(r)), 0, max(1, int(round(r * 0.09))), cv2.LINE_AA)
        cv2.circle(page, centre, int(round(r * 0.78)), 0, max(1, w), cv2.LINE_AA)
        cv2.circle(page, (centre[0], centre[1] + int(r * 0.12)), int(round(r * 0.45)), 0, -1,
                   cv2.LINE_AA)
        leaf = (centre[0] + int(r * 0.22), centre[1] - int(r * 0.45))
        cv2.ellipse(page, leaf, (int(r * 0.25), int(r * 0.1)), -35, 0, 360, 0, -1, cv2.LINE_AA)
    else:
        raise TypeError(f"unknown furniture {item!r}")


_FONT = cv2.FONT_HERSHEY_SIMPLEX
_FONT_CAP_PX = cv2.getTextSize("H", _FONT, 1.0, 1)[0][1]


def _put_text(page: np.ndarray, text: str, x_mm: float, y_mm: float, height_mm: float,
              dpi: int, bold: bool = False) -> None:
    """Print ASCII ``text`` with its baseline starting at (x_mm, y_mm); cap height ``height_mm``."""
    scale = mm_to_px(height_mm, dpi) / _FONT_CAP_PX
    thickness = max(1, int(round(scale * (2.6 if bold else 1.6))))
    origin = (int(round(mm_to_px(x_mm, dpi))), int(round(mm_to_px(y_mm, dpi))))
    cv2.putText(page, text, origin, _FONT, scale, 0, thickness, cv2.LINE_AA)


def _write_digit(layer: np.ndarray, box: Box, ink: np.ndarray, darkness: float,
                 rng: np.random.Generator) -> None:
    """Scale the ink image into ``box`` with jitter and darken ``layer`` where it falls."""
    ys, xs = np.nonzero(ink > 32)
    if len(ys) == 0:
        return
    ink = ink[ys.min(): ys.max() + 1, xs.min(): xs.max() + 1]
    bx0, by0, bx1, by1 = box
    box_w, box_h = bx1 - bx0, by1 - by0
    crossing = rng.random() < 0.04  # now and then a digit runs over a wall
    fill = rng.uniform(0.85, 1.05) if crossing else rng.uniform(0.6, 0.8)
    h = fill * box_h
    w = h * ink.shape[1] / ink.shape[0]
    if w > 0.9 * box_w:
        w, h = 0.9 * box_w, 0.9 * box_w * ink.shape[0] / ink.shape[1]
    h_px, w_px = max(2, int(round(h))), max(1, int(round(w)))
    scaled = cv2.resize(ink, (w_px, h_px), interpolation=cv2.INTER_AREA
                        if h_px < ink.shape[0] else cv2.INTER_LINEAR)
    slack_x, slack_y = (box_w - w_px) / 2, (box_h - h_px) / 2
    dx = rng.uniform(-0.5, 0.5) * slack_x
    dy = rng.uniform(-0.5, 0.5) * slack_y
    if crossing:
        dy += rng.choice([-1.0, 1.0]) * rng.uniform(0.5, 1.0) * max(slack_y, 0.08 * box_h)
    x0 = int(round(bx0 + slack_x + dx))
    y0 = int(round(by0 + slack_y + dy))
    _paste_ink(layer, scaled, x0, y0, darkness)


def _write_junk(layer: np.ndarray, box: Box, darkness: float, rng: np.random.Generator) -> None:
    """Put a stray mark somewhere in ``box``."""
    x0, y0, x1, y1 = (int(round(v)) for v in box)
    junk = draw_junk(rng=rng, size=64)
    _paste_ink(layer, cv2.resize(junk, (x1 - x0, y1 - y0), interpolation=cv2.INTER_AREA),
               x0, y0, darkness)


def _paste_ink(layer: np.ndarray, ink: np.ndarray, x0: int, y0: int, darkness: float) -> None:
    """Darken ``layer`` by ``ink`` (255 = full ink) placed with its top-left at (x0, y0)."""
    h, w = ink.shape
    r0, c0 = max(y0, 0), max(x0, 0)
    r1, c1 = min(y0 + h, layer.shape[0]), min(x0 + w, layer.shape[1])
    if r0 >= r1 or c0 >= c1:
        return
    patch = ink[r0 - y0: r1 - y0, c0 - x0: c1 - x0].astype(np.float32)
    tone = (255.0 - patch * darkness).astype(np.uint8)
    np.minimum(layer[r0:r1, c0:c1], tone, out=layer[r0:r1, c0:c1])


# ---------------------------------------------------------------- scanning

def scan_distort(form: RenderedForm, *, rng: np.random.Generator, skew_deg: float = 0.0,
                 shift_mm: tuple[float, float] = (0.0, 0.0), scale: float = 1.0,
                 noise: float = 0.0, blur: float = 0.0, lighting: float = 0.0,
                 faint_lines: float = 0.0, broken_lines: float = 0.0) -> RenderedForm:
    """Imitate scanning a printed, filled-in form.

    Parameters
    ----------
    form : RenderedForm
        From :func:`render_form` (``faint_lines`` and ``broken_lines`` need its
        ``printed``, ``handwriting`` and ``rules`` layers).
    rng : numpy.random.Generator
    skew_deg : float
        Rotation of the page about its centre, degrees counter-clockwise as
        seen on the image.
    shift_mm : (float, float)
        Displacement (right, down) in mm.
    scale : float
        Enlargement about the page centre (image size unchanged).
    noise : float
        0..1: gaussian noise of standard deviation ``12 * noise`` grey levels
        plus ``0.02 % * noise`` salt-and-pepper pixels.
    blur : float
        Gaussian blur sigma in pixels at 300 dpi (scaled with the dpi).
    lighting : float
        0..1: depth of the uneven-illumination gradient (paper darkened by up to
        this fraction towards one side or corner).
    faint_lines : float
        0..1: how much printed lines are lightened (1 = vanish).
    broken_lines : float
        0..1: roughly the fraction of printed line length lost in gaps.

    Returns
    -------
    RenderedForm
        New image (same size and dpi) and moved box rectangles; the layers are None.
    """
    if form.printed is not None and form.handwriting is not None and form.rules is not None:
        printed = _fade_rules(form.printed, form.rules, faint_lines, broken_lines, form.dpi, rng)
        image = np.minimum(printed, form.handwriting)
    elif faint_lines or broken_lines:
        raise ValueError("faint_lines/broken_lines need an undistorted form from render_form")
    else:
        image = form.image
    height, width = image.shape
    shift_px = (mm_to_px(shift_mm[0], form.dpi), mm_to_px(shift_mm[1], form.dpi))
    matrix = _affine(width, height, skew_deg, scale, shift_px)
    if not np.allclose(matrix, np.eye(2, 3)):
        image = cv2.warpAffine(image, matrix, (width, height), flags=cv2.INTER_LINEAR,
                               borderMode=cv2.BORDER_CONSTANT, borderValue=255)
    if blur > 0:
        image = cv2.GaussianBlur(image, (0, 0), blur * form.dpi / 300.0)
    out = _light_and_noise(image, lighting, noise, rng)
    boxes = {name: [_move_box(box, matrix) for box in rects] for name, rects in form.boxes.items()}
    return RenderedForm(out, form.dpi, dict(form.values), boxes,
                        {k: list(v) for k, v in form.cells.items()})


def _affine(width: int, height: int, skew_deg: float, scale: float,
            shift_px: tuple[float, float]) -> np.ndarray:
    """2x3 forward matrix (source -> destination) in OpenCV's pixel-index coordinates.

    Rotation by ``skew_deg`` (counter-clockwise on the image) and scaling are
    about the page centre, then the page moves by ``shift_px`` (right, down).
    """
    centre = ((width - 1) / 2.0, (height - 1) / 2.0)  # pixel-index centre
    matrix = cv2.getRotationMatrix2D(centre, skew_deg, scale)
    matrix[:, 2] += shift_px
    return matrix


def _move_box(box: Box, matrix: np.ndarray) -> Box:
    """Axis-aligned bounds of ``box`` (continuous px) moved by ``matrix`` (index convention)."""
    x0, y0, x1, y1 = box
    corners = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]]) - 0.5
    moved = corners @ matrix[:, :2].T + matrix[:, 2] + 0.5
    lo, hi = moved.min(axis=0), moved.max(axis=0)
    return (float(lo[0]), float(lo[1]), float(hi[0]), float(hi[1]))


def _light_and_noise(image: np.ndarray, lighting: float, noise: float,
                     rng: np.random.Generator) -> np.ndarray:
    """Apply uneven illumination and sensor noise to a uint8 page; returns uint8."""
    if lighting <= 0 and noise <= 0:
        return image
    pixels = image.astype(np.float32)
    height, width = image.shape
    if lighting > 0:
        gain = _illumination(max(2, width // 16), max(2, height // 16), lighting, rng)
        pixels *= cv2.resize(gain, (width, height), interpolation=cv2.INTER_LINEAR)
    if noise > 0:
        pixels += rng.standard_normal(pixels.shape, dtype=np.float32) * np.float32(12.0 * noise)
        n_specks = int(rng.binomial(pixels.size, 0.0002 * noise))
        where = rng.integers(0, pixels.size, n_specks)
        pixels.reshape(-1)[where] = rng.choice(np.array([0.0, 255.0], np.float32), n_specks)
    np.add(pixels, 0.5, out=pixels)
    return np.clip(pixels, 0, 255, out=pixels).astype(np.uint8)


def _illumination(width: int, height: int, depth: float, rng: np.random.Generator) -> np.ndarray:
    """(height, width) float32 gain in [1 - depth, 1]: a linear ramp plus a soft shadow."""
    angle = rng.uniform(0.0, 2 * np.pi)
    ys = np.linspace(-1.0, 1.0, height, dtype=np.float32)[:, None]
    xs = np.linspace(-1.0, 1.0, width, dtype=np.float32)[None, :]
    ramp = (xs * np.cos(angle) + ys * np.sin(angle) + 1.5) / 3.0
    cx, cy = rng.uniform(-1.2, 1.2, 2)
    shadow = np.exp(-((xs - cx) ** 2 + (ys - cy) ** 2) / 0.8)
    shade = 0.6 * ramp + 0.4 * shadow
    shade = (shade - shade.min()) / max(float(shade.max() - shade.min()), 1e-6)
    return (1.0 - depth * shade).astype(np.float32)


def _fade_rules(printed: np.ndarray, rules: np.ndarray, faint: float, broken: float, dpi: int,
                rng: np.random.Generator) -> np.ndarray:
    """Lighten printed lines by ``faint`` and cut gaps covering about ``broken`` of their length."""
    if faint <= 0 and broken <= 0:
        return printed
    out = printed.copy()
    if faint > 0:
        out[rules] = 255 - ((255 - out[rules].astype(np.float32)) * (1.0 - faint)).astype(np.uint8)
    if broken > 0:
        ys, xs = np.nonzero(rules)
        line_px = max(1.0, mm_to_px(LINE_MM, dpi))
        gap_px = mm_to_px(1.0, dpi)
        n_gaps = int(broken * len(ys) / line_px / gap_px)
        if n_gaps and len(ys):
            pick = rng.integers(0, len(ys), n_gaps)
            holes = np.zeros(rules.shape, np.uint8)
            radii = rng.uniform(0.25, 0.75, n_gaps) * gap_px
            for y, x, r in zip(ys[pick], xs[pick], radii):
                cv2.circle(holes, (int(x), int(y)), int(round(r)), 1, -1)
            out[(holes > 0) & rules] = 255
    return out


# ---------------------------------------------------------------- saving

_PIL_FORMATS = {".png": "PNG", ".jpg": "JPEG", ".jpeg": "JPEG", ".tif": "TIFF",
                ".tiff": "TIFF", ".bmp": "BMP", ".pdf": "PDF"}


def save_scan(image_or_pages: np.ndarray | Sequence[np.ndarray], path: str | Path, *,
              dpi: int, quality: int = 90, optimize: bool = True) -> None:
    """Write one page or several as a scan file; the format follows the suffix.

    Parameters
    ----------
    image_or_pages : numpy.ndarray or sequence of numpy.ndarray
        (M, N) uint8 page(s), 0 = ink.  Several pages need .tif/.tiff or .pdf.
    path : str or pathlib.Path
        .png, .jpg/.jpeg, .tif/.tiff, .bmp or .pdf.
    dpi : int
        Stored in the file's metadata; for PDF each page measures
        ``pixels / dpi * 72`` points.
    quality : int
        JPEG quality (also for the JPEG-coded pages inside a PDF).  PDFs carry
        no dates, so saving the same pages again gives the same bytes.
    optimize : bool
        Spend time on the smallest PNG or JPEG (the committed sample scans);
        False writes a 300-dpi page many times faster (benchmarks).
    """
    path = Path(path)
    fmt = _PIL_FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise ValueError(f"unsupported scan format {path.suffix!r}")
    pages = [image_or_pages] if isinstance(image_or_pages, np.ndarray) else list(image_or_pages)
    if not pages:
        raise ValueError("no pages to save")
    if len(pages) > 1 and fmt not in ("TIFF", "PDF"):
        raise ValueError(f"{path.suffix} holds one page; use .tif or .pdf for {len(pages)}")
    images = [Image.fromarray(np.asarray(p, np.uint8), mode="L") for p in pages]
    options: dict[str, object] = {}
    if fmt == "PDF":
        # no creation/modification dates, so that the same pages give the same file
        options = {"resolution": float(dpi), "quality": quality, "creationDate": None,
                   "modDate": None, "creator": "Inkcount"}
    elif fmt == "JPEG":
        options = {"dpi": (dpi, dpi), "quality": quality, "optimize": optimize}
    elif fmt == "TIFF":
        options = {"dpi": (dpi, dpi), "compression": "tiff_adobe_deflate"}
    elif fmt == "PNG":
        options = {"dpi": (dpi, dpi), "optimize": optimize}
    else:
        options = {"dpi": (dpi, dpi)}
    if len(images) > 1:
        options.update(save_all=True, append_images=images[1:])
    images[0].save(path, fmt, **options)
