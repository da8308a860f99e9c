"""Printing a made-up form at any resolution and writing digits into its boxes.

:func:`render_form` draws a :class:`~recognizer.synth.layouts.FormLayout`,
writes each field's digits with a handwriting source (our stroke-model
writers, or real digit images), and records where every box's inner
rectangle lies: the truth the tests compare with.  Fields are printed in their
comb style (closed or separate boxes, open combs, boxes in table cells; see
:mod:`recognizer.synth.layouts`) and colour; a form printed in a colour, or
written with a blue pen, also comes as an RGB image (:mod:`recognizer.synth.colour`).

Pixel coordinates are continuous: pixel (row r, column c) covers
``[c, c + 1) x [r, r + 1)``, so its centre is ``(c + 0.5, r + 0.5)``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import partial

import cv2
import numpy as np

from recognizer.synth.colour import INK_RGB, PRINT_RGB, multiply, tint, to_grey
from recognizer.synth.handwriting import Writer, draw_stray_mark, fit_glyph
from recognizer.synth.layouts import (
    LINE_MM, MM_PER_INCH, DigitSource, FieldSpec, FormLayout, Furniture, Line, Logo, Rect, Table, Text,
)

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
    rgb : numpy.ndarray or None
        (M, N, 3) uint8 colour page when the form was rendered in colour (a
        printed colour other than black, a blue pen, or ``colour=True``);
        ``image`` is then its grey (as Pillow converts it).  Kept by the
        captures that keep colour.
    printed_rgb, handwriting_rgb : numpy.ndarray or None
        The two colour layers (``rgb`` is their product); None after a capture.
    styles : dict
        Field name -> comb style in effect (:data:`~recognizer.synth.layouts.COMB_STYLES`).
    colours : dict
        Field name -> the colour its boxes are printed in.
    ink : str
        The pen: ``"black"`` or ``"blue"``.

    ``boxes`` (and every dict here) lists the fields in reading order, so
    :meth:`fnames` gives the box finder's names.
    """

    image: np.ndarray
    dpi: int
    values: dict[str, str]
    boxes: dict[str, list[Box]]
    cells: dict[str, list[str]]
    printed: np.ndarray | None = field(default=None, repr=False)
    handwriting: np.ndarray | None = field(default=None, repr=False)
    rules: np.ndarray | None = field(default=None, repr=False)
    rgb: np.ndarray | None = field(default=None, repr=False)
    printed_rgb: np.ndarray | None = field(default=None, repr=False)
    handwriting_rgb: np.ndarray | None = field(default=None, repr=False)
    styles: dict[str, str] = field(default_factory=dict)
    colours: dict[str, str] = field(default_factory=dict)
    ink: str = "black"

    def fnames(self) -> dict[str, str]:
        """Field name -> the box finder's reading-order name (``f01``, ``f02``, ...)."""
        return {name: f"f{i + 1:02d}" for i, name in enumerate(self.boxes)}

    def truth(self) -> dict[str, tuple[str, list[Box]]]:
        """Box finder name -> (field name, inner rectangles left to right), in reading order."""
        names = self.fnames()
        return {names[k]: (k, list(v)) for k, v in self.boxes.items()}


def mm_to_px(mm: float, dpi: int) -> float:
    """Convert millimetres to pixels at ``dpi``."""
    return mm * dpi / MM_PER_INCH


def render_form(layout: FormLayout, values: dict[str, str], *, dpi: int = 300,
                writer: Writer | None = None, digit_source: DigitSource | None = None,
                rng: np.random.Generator, line_px: int | None = None,
                stray_marks: float = 0.0, colour: bool | None = None,
                ink: str = "black") -> RenderedForm:
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
        (:func:`recognizer.synth.handwriting.draw_stray_mark`); its cell stays ''.
    colour : bool, optional
        Also make the RGB page (``rgb``).  By default (None) only when something
        is printed in a colour other than black or ``ink`` is blue; a form
        printed all in black with a black pen is then exactly as before colour
        existed.  ``False`` with colours in the layout is refused.
    ink : str
        The pen, ``"black"`` or ``"blue"``.

    Returns
    -------
    RenderedForm
        Digits fill about 60-80 % of the box height, with jitter in position
        and size; a few percent of them touch or cross a box wall.  The
        random draws do not depend on colours, so the same seed writes the same
        digits on a black and on a dropout-coloured print of a design.
    """
    width_px = int(round(mm_to_px(layout.page_mm[0], dpi)))
    height_px = int(round(mm_to_px(layout.page_mm[1], dpi)))
    line = line_px if line_px is not None else max(1, int(round(mm_to_px(LINE_MM, dpi))))
    if ink not in INK_RGB:
        raise ValueError(f"unknown ink {ink!r}; use one of {tuple(INK_RGB)}")
    used = {layout.colour_of(item) for item in (*layout.furniture, *layout.fields)}
    in_colour = bool(used - {"black"}) or ink != "black"
    if colour is False and in_colour:
        raise ValueError(f"layout {layout.name!r} in {sorted(used)} with {ink} ink needs colour")
    canvases: dict[str, np.ndarray] = {}

    def canvas(item: FieldSpec | Furniture) -> np.ndarray:
        name = layout.colour_of(item)
        if name not in canvases:
            canvases[name] = np.full((height_px, width_px), 255, np.uint8)
        return canvases[name]

    rules = np.zeros((height_px, width_px), bool)
    for item in layout.furniture:
        _draw_furniture(canvas(item), rules, item, dpi, line)
    boxes: dict[str, list[Box]] = {}
    for spec in layout.fields:
        boxes[spec.name] = _draw_field(canvas(spec), rules, spec, dpi, line)
        if spec.label:
            _put_text(canvas(spec), spec.label, spec.x_mm, spec.y_mm - 1.3, 2.2, dpi)
    printed = canvases.get("black", np.full((height_px, width_px), 255, np.uint8))
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
                _write_stray_mark(handwriting, box, darkness, rng)
    styles = {spec.name: spec.comb for spec in layout.fields}
    colours = {spec.name: layout.colour_of(spec) for spec in layout.fields}
    if not (in_colour or colour):
        image = np.minimum(printed, handwriting)
        return RenderedForm(image, dpi, clean_values, boxes, cells, printed, handwriting, rules,
                            styles=styles, colours=colours, ink=ink)
    printed_rgb = np.full((height_px, width_px, 3), 255, np.uint8)
    for name, layer in canvases.items():
        printed_rgb = multiply(printed_rgb, tint(layer, PRINT_RGB[name]))
    handwriting_rgb = tint(handwriting, INK_RGB[ink])
    rgb = multiply(printed_rgb, handwriting_rgb)
    return RenderedForm(to_grey(rgb), dpi, clean_values, boxes, cells, to_grey(printed_rgb),
                        to_grey(handwriting_rgb), rules, rgb, printed_rgb, handwriting_rgb,
                        styles, colours, ink)


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
    """Draw the walls of a field's boxes; return their inner rectangles in px.

    An open comb gets a baseline under all positions and ticks at both sides of
    each; its rectangles reach from the baseline up to where a box's top wall
    would be.
    """
    px = partial(mm_to_px, dpi=dpi)
    y0, y1 = px(spec.y_mm), px(spec.y_mm + spec.height_mm)
    lefts = [spec.x_mm + i * (spec.box_mm + spec.gap_mm) for i in range(spec.n_boxes)]
    if spec.comb == "open":
        _hline(page, rules, y1, px(lefts[0]), px(lefts[0] + spec.width_mm), w)
        edges = [*lefts, lefts[-1] + spec.box_mm]
        for i, x in enumerate(edges):
            tall = spec.end_tick if i in (0, len(edges) - 1) else spec.tick
            _vline(page, rules, px(x), y1 - px(tall * spec.height_mm), y1, w)
    elif spec.gap_mm == 0:
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
        _put_text(page, item.text, item.x_mm, item.y_mm, item.height_mm, dpi, item.bold,
                  item.align)
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
              dpi: int, bold: bool = False, align: str = "left") -> None:
    """Print ASCII ``text`` with its baseline starting at (x_mm, y_mm); cap height ``height_mm``.

    ``align="centre"`` centres the text's ink on ``x_mm`` instead.
    """
    scale = mm_to_px(height_mm, dpi) / _FONT_CAP_PX
    thickness = max(1, int(round(scale * (2.6 if bold else 1.6))))
    x_px = mm_to_px(x_mm, dpi)
    if align == "centre":
        x_px -= cv2.getTextSize(text, _FONT, scale, thickness)[0][0] / 2.0
    elif align != "left":
        raise ValueError(f"unknown text alignment {align!r}")
    origin = (int(round(x_px)), int(round(mm_to_px(y_mm, dpi))))
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
    scaled = fit_glyph(ink, box_w, box_h, fill=fill, widest=0.9)
    h_px, w_px = scaled.shape
    slack_x, slack_y = (box_w - w_px) / 2, (box_h - h_px) / 2
    dx = rng.uniform(-0.5, 0.5) * slack_x
    dy = rng.uniform(-0.5, 0.5) * slack_y
    if crossing:
        dy += rng.choice([-1.0, 1.0]) * rng.uniform(0.5, 1.0) * max(slack_y, 0.08 * box_h)
    x0 = int(round(bx0 + slack_x + dx))
    y0 = int(round(by0 + slack_y + dy))
    _paste_ink(layer, scaled, x0, y0, darkness)


def _write_stray_mark(layer: np.ndarray, box: Box, darkness: float, rng: np.random.Generator) -> None:
    """Put a stray mark somewhere in ``box``."""
    x0, y0, x1, y1 = (int(round(v)) for v in box)
    junk = draw_stray_mark(rng=rng, size=64)
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
