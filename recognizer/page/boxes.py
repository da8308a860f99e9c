"""Find the printed digit boxes ("comb" fields) on a scanned page, without a template.

The page is cleaned of uneven lighting, its skew is measured and removed,
the straight horizontal printed lines are picked out, and the stretches
between two lines a box height apart and two walls are kept when they are
shaped like digit boxes.  Aligned neighbouring boxes make up a field, and
each field is fitted as a row of equal boxes at a regular pitch, which
repairs boxes that broken lines or handwriting hid.

Stages
------
:func:`find_fields` works on the page at no more than 200 dpi (boxes found
there are scaled back to the page's resolution):

1. the page-level steps of :mod:`recognizer.page.ruling`: uneven lighting
   divided out, ink, the skew measured and removed (the page is rotated back
   about its centre: the working copy at once, the page itself only when
   asked for, :attr:`BoxFinding.image`), the straight horizontal printed
   lines, and the regions between two lines and two walls;
2. :mod:`recognizer.page.box_rows`: which regions are digit boxes -- chains of
   regions fitted as rows of equal boxes, checked, with doubts about fields
   whose boxes were added beyond their ends.  Closed boxes side by side,
   separate boxes with gaps and combs inside table cells (the cells are too
   wide to be boxes) are all found so;
3. :mod:`recognizer.page.combs`: open combs (a baseline with short ticks
   between the digit positions, no top line), each cell between two ticks a
   box from the baseline up to the height a closed box of that pitch would
   have; groups on either side of a printed separator (``/``, ``:``, ``.``)
   are fields of their own;
4. here: a field lower than the fields of its row with boxes of its width
   (its light top line taken at the handwriting) grown to their height
   (:func:`_even_heights`); the fields put in reading order and named (below), and the page
   *warnings* (lines fainter than 80 grey levels below the paper, a skew
   beyond ``max_skew_deg``).

Field order
-----------
Every comb style alike (an open comb's boxes have the height given above).
Rows run top to bottom: fields are taken in order of their vertical centre and
a field joins the current row when its centre lies within half a box height
(of the row's first field) of the row's first field's centre; within a row
fields run left to right.  Fields are named ``f01``, ``f02``, ... in that order
(three digits when there are more than 99).

Coordinates
-----------
Box coordinates are pixel edges in the *deskewed* page image
(:attr:`BoxFinding.image`): pixel (row r, column c) covers
``[c, c + 1) x [r, r + 1)``; ``x1, y1`` are exclusive.
:meth:`BoxFinding.to_page` maps them back onto the page as given.
"""

from __future__ import annotations

import math
import warnings as _warnings
from dataclasses import dataclass, field

import cv2
import numpy as np

from recognizer.page import box_rows, combs, ruling
from recognizer.page.ruling import Rect

__all__ = ["MM_PER_INCH", "Box", "FieldBoxes", "BoxFinding", "PreparedPage", "as_gray_page", "find_fields",
           "prepare_page", "warp_like"]


MM_PER_INCH = 25.4

_WORK_DPI = 200.0          # boxes are searched at no more than this resolution
_SAME_WIDTH = 0.1          # fields of one row with boxes this alike in width ...
_SAME_EDGE = 0.12          # ... sharing an edge within this part of their height ...
_SHORT_FIELD = 0.85        # ... have one height: a field under this part of it is grown


@dataclass(frozen=True)
class Box:
    """Inner rectangle of one printed box, inside its ruling lines.

    Pixel-edge coordinates in the deskewed page image; ``x1`` and ``y1`` are
    exclusive, so the box covers ``image[y0:y1, x0:x1]``.
    """

    x0: int
    y0: int
    x1: int
    y1: int

    @property
    def width(self) -> int:
        return self.x1 - self.x0

    @property
    def height(self) -> int:
        return self.y1 - self.y0

    @property
    def centre(self) -> tuple[float, float]:
        """``(x, y)`` of the box's centre in pixel-edge coordinates."""
        return (self.x0 + self.x1) / 2.0, (self.y0 + self.y1) / 2.0


@dataclass(frozen=True)
class FieldBoxes:
    """One field: its reading-order name, boxes left to right and row index (0-based)."""

    name: str
    boxes: tuple[Box, ...]
    row: int
    doubts: tuple[str, ...] = ()


@dataclass
class BoxFinding:
    """The digit fields found on one page.

    Attributes
    ----------
    image : numpy.ndarray
        (M, N) uint8 deskewed page, 0 = ink; all box coordinates refer to it.
        Given as None with ``page`` set, it is made from ``page`` and
        ``transform`` when first asked for (reading a page only cuts its
        boxes, :func:`recognizer.page.cells.cut_cells` with ``transform``, and
        never needs the whole page turned).
    dpi : float
        Resolution of ``image``.
    skew_deg : float
        Skew found and removed, degrees counter-clockwise as seen on the page.
    fields : list of FieldBoxes
        In reading order (see the module notes).
    problem : str or None
        None when the page is usable, else the reason in plain words.
    warnings : list of str
        Doubtful things about the whole page (faint lines, a skew beyond the
        limit); a caller should have all the page's fields checked. Doubts
        about one field are in that field's ``FieldBoxes.doubts``.
    transform : numpy.ndarray
        (2, 3) float64 affine map from page coordinates to ``image``
        coordinates (pixel edges).
    page : numpy.ndarray or None
        The page as given (before deskewing), when ``image`` is made from it
        on demand; ``image`` then has its size.
    """

    image: np.ndarray | None
    dpi: float
    skew_deg: float
    fields: list[FieldBoxes] = field(default_factory=list)
    problem: str | None = None
    warnings: list[str] = field(default_factory=list)  # about the whole page
    transform: np.ndarray = field(default_factory=lambda: np.eye(2, 3), repr=False)
    page: np.ndarray | None = field(default=None, repr=False)

    def __bool__(self) -> bool:
        return self.problem is None

    @property
    def deskewed(self) -> bool:
        """Whether ``image`` is the page turned (False: ``image`` is ``page`` itself)."""
        return not np.allclose(self.transform, np.eye(2, 3))

    def cells_source(self) -> tuple[np.ndarray, np.ndarray | None]:
        """What to cut the boxes from: ``(image, None)``, or ``(page, transform)`` while ``image`` is not made."""
        if self._image is None and self.page is not None:
            return self.page, self.transform
        return self.image, None

    def to_page(self, x, y):
        """Map deskewed-image coordinates ``(x, y)`` (scalars or arrays) to page coordinates."""
        inverse = cv2.invertAffineTransform(self.transform)
        return _apply(inverse, x, y)

    def from_page(self, x, y):
        """Map page coordinates ``(x, y)`` (scalars or arrays) to deskewed-image coordinates."""
        return _apply(self.transform, x, y)


def _image(self: BoxFinding) -> np.ndarray:
    if self._image is None and self.page is not None:
        self._image = ruling.warp(self.page, self.transform) if self.deskewed else self.page
    return self._image


def _set_image(self: BoxFinding, value: np.ndarray | None) -> None:
    self._image = value


# ``image`` (a dataclass field) is read through this property: made from ``page`` on first use.
BoxFinding.image = property(_image, _set_image, doc="The deskewed page (see the class notes).")  # type: ignore[assignment]


#: The problem of a page on which no digit boxes were found.
NO_BOXES = "no digit boxes found on this page"


def warp_like(finding: BoxFinding, image: np.ndarray) -> np.ndarray:
    """Another image of the same page (a colour layer), deskewed as ``finding.image`` was."""
    if not finding.deskewed:
        return image
    return ruling.warp(image, finding.transform)


def _apply(matrix: np.ndarray, x, y):
    """Apply a 2x3 affine ``matrix`` to ``(x, y)``; floats in, floats out, arrays in, arrays out."""
    xs, ys = np.asarray(x, np.float64), np.asarray(y, np.float64)
    u = matrix[0, 0] * xs + matrix[0, 1] * ys + matrix[0, 2]
    v = matrix[1, 0] * xs + matrix[1, 1] * ys + matrix[1, 2]
    if u.ndim == 0:
        return float(u), float(v)
    return u, v


def as_gray_page(image: np.ndarray, *, name: str = "page") -> np.ndarray:
    """Check that ``image`` is a page image; convert colour with a warning.

    Parameters
    ----------
    image : numpy.ndarray
        (M, N) uint8, or (M, N, 3|4) uint8 colour (RGB order), which is converted
        to grey with a :class:`UserWarning`.
    name : str
        Argument name used in error messages.

    Returns
    -------
    numpy.ndarray
        (M, N) uint8, C-contiguous.

    Raises
    ------
    TypeError
        ``image`` is not a uint8 array.
    ValueError
        ``image`` has neither 2 dimensions nor 3 with 3 or 4 channels.
    """
    if not isinstance(image, np.ndarray):
        raise TypeError(f"{name} must be a numpy array, not {type(image).__name__}")
    if image.dtype != np.uint8:
        raise TypeError(f"{name} must be uint8 (0 = ink, 255 = paper), not {image.dtype}")
    if image.ndim == 3 and image.shape[2] in (3, 4):
        _warnings.warn(f"{name} is a colour image; converting it to grey", UserWarning,
                       stacklevel=3)
        code = cv2.COLOR_RGB2GRAY if image.shape[2] == 3 else cv2.COLOR_RGBA2GRAY
        image = cv2.cvtColor(np.ascontiguousarray(image), code)
    if image.ndim != 2:
        raise ValueError(f"{name} must be a 2-D grey image, got shape {image.shape}")
    return np.ascontiguousarray(image)


def _positive(value: float, name: str) -> float:
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"{name} must be a positive number, got {value!r}")
    return value


@dataclass
class PreparedPage:
    """The first steps of :func:`find_fields` on one page: working resolution, lighting and ink level.

    Made by :func:`prepare_page`, so that a reader can take them on another
    thread (the one decoding the next page) and hand them to
    :func:`find_fields`. ``problem`` is set (and ``flat`` None) for a page
    too small or blank; ``flat`` is the page at the working resolution with
    the lighting divided out, ``scale`` that resolution over the page's,
    ``paper`` its paper level and ``ink_step`` the darkening that counts as
    ink (:func:`recognizer.page.ruling.ink_step`). The skew is measured by
    :func:`find_fields` itself: on two cores that balances the two threads
    of a one-process read (``bench/bench_read.py``).
    """

    page: np.ndarray
    dpi: float
    min_box_mm: float
    max_skew_deg: float
    problem: str | None = None
    flat: np.ndarray | None = field(default=None, repr=False)
    scale: float = 1.0
    paper: float = 0.0
    ink_step: float = 0.0


def prepare_page(page: np.ndarray, *, dpi: float, min_box_mm: float = 3.5,
                 max_skew_deg: float = 5.0) -> PreparedPage:
    """The page-level first steps of :func:`find_fields` (same parameters); see :class:`PreparedPage`."""
    gray = as_gray_page(page)
    dpi = _positive(dpi, "dpi")
    min_box_mm = _positive(min_box_mm, "min_box_mm")
    max_skew_deg = float(max_skew_deg)
    if not 0 <= max_skew_deg <= 45:
        raise ValueError(f"max_skew_deg must lie in 0..45, got {max_skew_deg}")
    prepared = PreparedPage(gray, dpi, min_box_mm, max_skew_deg)
    px_per_mm = dpi / MM_PER_INCH
    if min(gray.shape) < 2 * min_box_mm * px_per_mm:
        prepared.problem = (f"the image ({gray.shape[1]} x {gray.shape[0]} px at {dpi:g} dpi) is too small "
                            "to hold digit boxes")
        return prepared
    # Everything but the deskewed page itself is worked out at no more than
    # _WORK_DPI; boxes found there are scaled back to the page.
    scale = min(1.0, _WORK_DPI / dpi)
    small = gray if scale == 1.0 else cv2.resize(gray, None, fx=scale, fy=scale, interpolation=cv2.INTER_AREA)
    work_px_per_mm = px_per_mm * scale
    flat = ruling.flatten_lighting(small, work_px_per_mm)
    paper, ink_step = ruling.ink_step(flat)
    if ink_step is None:
        prepared.problem = "the page is blank (no ink found)"
        return prepared
    prepared.flat, prepared.scale, prepared.paper, prepared.ink_step = flat, scale, paper, ink_step
    return prepared


def find_fields(page: np.ndarray, *, dpi: float, min_box_mm: float = 3.5,
                max_box_mm: float = 15.0, max_skew_deg: float = 5.0,
                prepared: PreparedPage | None = None) -> BoxFinding:
    """Find the digit fields on a page.

    Parameters
    ----------
    page : (M, N) uint8 ndarray
        The page, 0 = black ink, 255 = white paper (colour is converted with a
        warning).
    dpi : float
        Resolution of ``page``; 150..600 are expected.
    min_box_mm, max_box_mm : float
        Smallest and largest inner side of a digit box, in mm.
    max_skew_deg : float
        Largest skew searched, degrees either way.
    prepared : PreparedPage, optional
        :func:`prepare_page` of this very ``page`` with these parameters,
        already made (on another thread); made here otherwise.

    Returns
    -------
    BoxFinding
        Falsy, with ``problem`` set, when the page is blank, too small or
        holds no digit boxes.  Never raises on odd page content.
    """
    min_box_mm = _positive(min_box_mm, "min_box_mm")
    max_box_mm = _positive(max_box_mm, "max_box_mm")
    if max_box_mm <= min_box_mm:
        raise ValueError(f"max_box_mm ({max_box_mm}) must exceed min_box_mm ({min_box_mm})")
    if prepared is None:
        prepared = prepare_page(page, dpi=dpi, min_box_mm=min_box_mm, max_skew_deg=max_skew_deg)
    elif (prepared.page.shape != np.shape(page)[:2] or prepared.dpi != float(dpi)
          or prepared.min_box_mm != min_box_mm or prepared.max_skew_deg != float(max_skew_deg)):
        raise ValueError("prepared was made from another page or with other settings")
    gray, dpi = prepared.page, prepared.dpi
    if prepared.problem is not None:
        return BoxFinding(gray, dpi, 0.0, problem=prepared.problem)
    assert prepared.flat is not None
    work_px_per_mm = dpi / MM_PER_INCH * prepared.scale
    flat, max_skew_deg = prepared.flat, prepared.max_skew_deg
    found_skew = ruling.estimate_skew(flat, prepared.paper - prepared.ink_step, work_px_per_mm, max_skew_deg)
    skew = float(np.clip(found_skew, -max_skew_deg, max_skew_deg))
    transform = np.eye(2, 3)
    if abs(skew) >= 0.02:  # the page itself is turned only if someone asks for it (BoxFinding.image)
        transform = ruling.rotation(gray.shape, -skew)
        flat = ruling.warp(flat, ruling.rotation(flat.shape, -skew))
    ink = ruling.ink_mask(flat, prepared.paper - prepared.ink_step, work_px_per_mm)
    lines = ruling.horizontal_lines(ink, work_px_per_mm, min_box_mm)
    segments = ruling.line_segments(lines, work_px_per_mm, min_box_mm)  # once, for both kinds of comb
    rects = ruling.regions(ink, lines, work_px_per_mm, min_box_mm, max_box_mm, segments=segments)
    fields = box_rows.fit_fields(rects, lines, ink, work_px_per_mm, min_box_mm, max_box_mm)
    fields = combs.add_open_combs(fields, ink, lines, work_px_per_mm, min_box_mm, max_box_mm,
                                  segments=segments)
    finding = BoxFinding(None, dpi, skew, transform=transform, page=gray)
    if not fields:
        finding.problem = NO_BOXES
        return finding
    fields = _even_heights(fields)
    finding.fields = _name_fields([([_scale_box(b, 1.0 / prepared.scale) for b in f], d) for f, d in fields])
    finding.warnings = ruling.line_warnings(flat, lines, prepared.paper)
    if abs(found_skew) > max_skew_deg + 0.1:
        finding.warnings.append(f"the page may be skewed by more than {max_skew_deg:g} degrees")
    return finding


def _even_heights(fields: list[tuple[list[Rect], tuple[str, ...]]]) -> list[tuple[list[Rect], tuple[str, ...]]]:
    """Fields lower than the fields of their row with boxes of their width take those fields' height.

    A light or faint top (or bottom) line next to heavy handwriting can be
    taken at the ink: the field comes out shorter than the others standing on
    the same baseline (or hanging from the same top line), and its digits are
    cut off. Boxes of one width printed on one line have one height (common
    practice, no source), so such a field is grown, away from the edge it
    shares, to the median height of those fields (widths within 10 %, the
    shared edge within 12 % of their height, the field under 85 % of it).
    """
    shapes = [(float(np.median([b.w for b in boxes])), min(b.y0 for b in boxes), max(b.y1 for b in boxes))
              for boxes, _ in fields]  # (box width, top, bottom) of each field
    out = []
    for i, (boxes, doubts) in enumerate(fields):
        width, top, bottom = shapes[i]
        height = bottom - top
        below, above = [], []  # heights of the other fields sharing the bottom, the top
        for j, (o_width, o_top, o_bottom) in enumerate(shapes):
            if j == i or abs(o_width - width) > _SAME_WIDTH * width:
                continue
            o_height = o_bottom - o_top
            if abs(o_bottom - bottom) <= _SAME_EDGE * o_height:
                below.append(o_height)
            elif abs(o_top - top) <= _SAME_EDGE * o_height:
                above.append(o_height)
        for heights, grow_up in ((below, True), (above, False)):
            taller = int(round(float(np.median(heights)))) if heights else 0
            if taller and height < _SHORT_FIELD * taller:
                boxes = [Rect(b.x0, bottom - taller, b.x1, b.y1) if grow_up else Rect(b.x0, b.y0, b.x1, top + taller)
                         for b in boxes]
                break
        out.append((boxes, doubts))
    return out


def _scale_box(r: Rect, factor: float) -> Box:
    if factor == 1.0:
        return Box(r.x0, r.y0, r.x1, r.y1)
    return Box(int(round(r.x0 * factor)), int(round(r.y0 * factor)),
               int(round(r.x1 * factor)), int(round(r.y1 * factor)))


def _name_fields(found: list[tuple[list[Box], tuple[str, ...]]]) -> list[FieldBoxes]:
    """Order fields into rows and name them (see the module notes)."""
    doubts = {id(f): d for f, d in found}
    fields = [f for f, _ in found]

    def centre(f: list[Box]) -> float:
        return float(np.mean([b.centre[1] for b in f]))

    def height(f: list[Box]) -> float:
        return float(np.median([b.height for b in f]))

    rows: list[list[list[Box]]] = []
    for f in sorted(fields, key=centre):
        if rows and abs(centre(f) - centre(rows[-1][0])) <= height(rows[-1][0]) / 2:
            rows[-1].append(f)
        else:
            rows.append([f])
    width = max(2, len(str(len(fields))))
    named = []
    for row_index, row in enumerate(rows):
        for f in sorted(row, key=lambda f: f[0].x0):
            named.append(FieldBoxes(f"f{len(named) + 1:0{width}d}", tuple(f), row_index, doubts[id(f)]))
    return named
