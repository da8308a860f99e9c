"""Find the printed digit boxes ("comb" fields) on a scanned page, without a template.

The page is cleaned of uneven lighting, its skew is measured and removed,
the straight horizontal printed lines are picked out, and the stretches
between two lines a box height apart and two walls are kept when they are
shaped like digit boxes.  Aligned neighbouring boxes make up a field, and
each field is fitted as a row of equal boxes at a regular pitch, which
repairs boxes that broken lines or handwriting hid.

Pipeline
--------
1. *Lighting*: the paper level is estimated on a 1 mm grid (a grey closing
   over 5 mm wipes out thin ink) and divided out, so paper is near 255.
2. *Ink*: after a light smoothing (0.1 mm), pixels darker than the paper by
   more than the larger of 4.5 noise deviations and 22 grey levels are ink.
3. *Skew*: the horizontal projection profile of the ink, seen at about
   100 dpi, is sharpest at the page's skew (sum of squared row counts,
   searched in 0.25 degree steps over +-``max_skew_deg`` and refined in
   0.02 degree steps); the page is rotated back about its centre, keeping
   its size.  Pages above 300 dpi are searched at 300 dpi.
4. *Lines*: an opening with a one-pixel-high kernel 35 % of ``min_box_mm``
   long keeps straight horizontal runs, a closing joins runs less than 2 mm
   apart; the segments at most 1.2 mm thick are the candidate lines, and
   collinear segments less than ``min_box_mm`` apart are joined (a broken
   line).
5. *Regions*: for two lines between ``0.9 * min_box_mm`` and ``max_box_mm``
   apart, a column of the band between them is a wall where ink covers 90 %
   of its height, or 55 % reaching both lines (a broken wall); walls are at most 1.2 mm thick.  The stretch between two
   walls is a region when it is at most 70 % ink, no row of it is ink over
   95 % of its width (a line across: the band of a label above a field) and
   lines cover half of its top and bottom edges.

Which regions are digit boxes
-----------------------------
* A *box* has an inner width and height in [``0.9 * min_box_mm``,
  ``max_box_mm``] and a height / width ratio in [0.7, 1.8].  Table cells
  and the notes frame are too wide, tick boxes too small, text and rings
  give no walls.
* *Chains*: a region is linked to its nearest right neighbour whose top and
  bottom agree within 12 % of the height, when the gap between them is at
  most 42 % of the box height (separate boxes with a small gap still form
  one field), or at most 2.5 heights with traces of the top and bottom
  lines over 30 % of the gap (boxes lost in between).  A chain is split where
  the gap between two consecutive boxes exceeds the median such gap by 17 %
  of the height and no line traces cross it (a comb next to a separate box
  is two fields).
* *Row fitting*: a field is a row of equal boxes: the width is the widest
  width shared by two of the chain's boxes, the pitch the one that lines up
  the boxes' centres best (tried from the width to the width plus the
  largest gap), and the row spans the chain.  A box edge is taken from a
  region edge within 10 % of a box width of where the row puts it.  So a box
  that a stroke from wall to wall cut in two, or two boxes run together
  through a broken wall, come out as the row says.  A chain with no box of
  box size is fitted with the size of the page's boxes of its height, when
  its span is a whole number of boxes and traces of the walls between them
  stand where they should.
* *Ends*: a field grows by up to two boxes at each end where the top and
  bottom lines run on over a box and a wall trace stands at its outer edge.
* *Checks*: lines must cover 70 % of a field's top and bottom edges; fields
  are kept in order of their count of well-formed boxes and may not overlap a
  field kept before.
* *Small fields*: a field of one or two boxes is kept only when its boxes'
  width and height are within 25 % of the median box of the page's fields of
  three or more boxes (of all boxes if there are none): a lone tick box of a
  clearly different size, or a pair of "boxes" in a printed emblem, is
  furniture, not a digit field.
* *Doubts*: a field to which boxes were added beyond its ends (its box count
  rests on the neighbours' pitch) carries a doubt in ``FieldBoxes.doubts``;
  boxes placed inside a field at its regular pitch (a wall covered by a
  stroke) are not doubtful. Page *warnings* are lines fainter than 80 grey
  levels below the paper and a skew beyond ``max_skew_deg``.

Field order
-----------
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

__all__ = ["Box", "FieldBoxes", "BoxFinding", "find_fields"]

MM_PER_INCH = 25.4

_WORK_DPI = 200.0          # boxes are searched at no more than this resolution
_SKEW_PX_PER_MM = 4.0      # resolution of the skew search (about 100 dpi)
_LIGHT_PX_PER_MM = 1.0     # grid of the paper-level estimate
_LIGHT_WINDOW_MM = 5.0     # grey closing window of the paper-level estimate
_JOIN_MM = 2.0             # gaps between straight horizontal runs joined
_POOL_MM = 0.3             # columns pooled when labelling line segments
_BAND_MARGIN_MM = 0.25     # rows beside each line left out of the wall test
_WALL_COVER = 0.9          # ink share of a column between two lines that makes a wall
_BROKEN_WALL_COVER = 0.55  # ... or that makes a broken wall reaching both lines
_MAX_WALL_MM = 1.2         # a wall or line is at most this thick
_MAX_INK = 0.7             # a box region is not mostly ink
_CROSSING = 0.95           # a region with a row this much ink has a line across it
_LINE_FRACTION = 0.35      # opening length as a fraction of min_box_mm
_ASPECT = (0.7, 1.8)       # height / width of a digit box
_ALIGN = 0.12              # tops and bottoms agree within this part of the height
_MAX_GAP = 0.42            # neighbours' gap under this part of the box height
_GAP_STEP = 0.17           # a gap this much (part of box height) over the median splits
_MISSING_GAP = 2.5         # farthest neighbour (box heights) joined by running lines
_RULED = 0.5               # share of a region's top and bottom edge that lines must cover
_FIELD_RULED = 0.7         # ... and of a whole field's top and bottom edge
_LINES_RUN_ON = 0.3        # share of a gap line traces must cover to join two regions
_MAX_EXTEND = 2            # boxes added at most at each end of a field
_LINE_BAND_MM = 0.6        # band beside a region searched for its top or bottom line
_SAME_WIDTH = 0.1          # boxes of one field agree in width within this part
_WALL_TRACE = 0.5          # ink share of a column that marks the trace of a broken wall
_SMALL_FIELD = 2           # fields of at most this many boxes must have the page's box size
_SMALL_TOLERANCE = 0.25    # ... within this part
_FAINT_LINES = 80          # median line darkness (grey levels) below this: "lines faint"


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
    """

    image: np.ndarray
    dpi: float
    skew_deg: float
    fields: list[FieldBoxes] = field(default_factory=list)
    problem: str | None = None
    warnings: list[str] = field(default_factory=list)  # about the whole page
    transform: np.ndarray = field(default_factory=lambda: np.eye(2, 3), repr=False)

    def __bool__(self) -> bool:
        return self.problem is None

    def to_page(self, x, y):
        """Map deskewed-image coordinates ``(x, y)`` (scalars or arrays) to page coordinates."""
        inverse = cv2.invertAffineTransform(self.transform)
        return _apply(inverse, x, y)

    def from_page(self, x, y):
        """Map page coordinates ``(x, y)`` (scalars or arrays) to deskewed-image coordinates."""
        return _apply(self.transform, x, y)


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


def find_fields(page: np.ndarray, *, dpi: float, min_box_mm: float = 3.5,
                max_box_mm: float = 15.0, max_skew_deg: float = 5.0) -> BoxFinding:
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

    Returns
    -------
    BoxFinding
        Falsy, with ``problem`` set, when the page is blank, too small or
        holds no digit boxes.  Never raises on odd page content.
    """
    gray = as_gray_page(page)
    dpi = _positive(dpi, "dpi")
    min_box_mm = _positive(min_box_mm, "min_box_mm")
    max_box_mm = _positive(max_box_mm, "max_box_mm")
    if max_box_mm <= min_box_mm:
        raise ValueError(f"max_box_mm ({max_box_mm}) must exceed min_box_mm ({min_box_mm})")
    max_skew_deg = float(max_skew_deg)
    if not 0 <= max_skew_deg <= 45:
        raise ValueError(f"max_skew_deg must lie in 0..45, got {max_skew_deg}")

    px_per_mm = dpi / MM_PER_INCH
    if min(gray.shape) < 2 * min_box_mm * px_per_mm:
        return BoxFinding(gray, dpi, 0.0, problem=(
            f"the image ({gray.shape[1]} x {gray.shape[0]} px at {dpi:g} dpi) is too small "
            "to hold digit boxes"))
    # Everything but the deskewed page itself is worked out at no more than
    # _WORK_DPI; boxes found there are scaled back to the page.
    scale = min(1.0, _WORK_DPI / dpi)
    small = gray if scale == 1.0 else cv2.resize(gray, None, fx=scale, fy=scale, interpolation=cv2.INTER_AREA)
    work_px_per_mm = px_per_mm * scale
    flat = _flatten_lighting(small, work_px_per_mm)
    paper, ink_step = _ink_step(flat)
    if ink_step is None:
        return BoxFinding(gray, dpi, 0.0, problem="the page is blank (no ink found)")

    found_skew = _estimate_skew(flat, paper - ink_step, work_px_per_mm, max_skew_deg)
    skew = float(np.clip(found_skew, -max_skew_deg, max_skew_deg))
    transform = np.eye(2, 3)
    if abs(skew) >= 0.02:
        transform = _rotation(gray.shape, -skew)
        gray = _warp(gray, transform)
        flat = _warp(flat, _rotation(flat.shape, -skew))

    ink = _ink_mask(flat, paper - ink_step, work_px_per_mm)
    lines = _horizontal_lines(ink, work_px_per_mm, min_box_mm)
    rects = _cells(ink, lines, work_px_per_mm, min_box_mm, max_box_mm)
    fields = _group(rects, lines, ink, work_px_per_mm, min_box_mm, max_box_mm)
    finding = BoxFinding(gray, dpi, skew, transform=transform)
    if not fields:
        finding.problem = "no digit boxes found on this page"
        return finding
    finding.fields = _name_fields([([_scale_box(b, 1.0 / scale) for b in f], d) for f, d in fields])
    finding.warnings = _line_warnings(flat, lines, paper)
    if abs(found_skew) > max_skew_deg + 0.1:
        finding.warnings.append(f"the page may be skewed by more than {max_skew_deg:g} degrees")
    return finding


# ---------------------------------------------------------------- lighting and ink

def _flatten_lighting(gray: np.ndarray, px_per_mm: float) -> np.ndarray:
    """Divide out the paper level: (M, N) uint8 with paper near 255 everywhere."""
    f = min(1.0, _LIGHT_PX_PER_MM / px_per_mm)
    small = cv2.resize(gray, None, fx=f, fy=f, interpolation=cv2.INTER_AREA)
    k = max(3, int(round(_LIGHT_WINDOW_MM * px_per_mm * f)) | 1)
    kernel = cv2.getStructuringElement(cv2.MORPH_RECT, (k, k))
    paper = cv2.morphologyEx(small, cv2.MORPH_CLOSE, kernel)
    paper = cv2.blur(paper, (k, k))
    paper = cv2.resize(paper, (gray.shape[1], gray.shape[0]), interpolation=cv2.INTER_LINEAR)
    np.maximum(paper, 1, out=paper)
    return cv2.divide(gray, paper, scale=255.0)


def _ink_step(flat: np.ndarray) -> tuple[float, float | None]:
    """Paper level and the darkening that counts as ink; ``None`` for a blank page."""
    sample = flat[::3, ::3]
    paper = float(np.median(sample))
    spread = 1.4826 * float(np.median(np.abs(sample.astype(np.float32) - paper)))
    step = max(4.5 * spread, 22.0)
    if paper - step < 10 or np.count_nonzero(sample < paper - step) < 20:
        return paper, None
    return paper, step


def _ink_mask(flat: np.ndarray, threshold: float, px_per_mm: float) -> np.ndarray:
    """(M, N) uint8 ink mask (255 = ink) after a light smoothing against noise."""
    sigma = 0.1 * px_per_mm
    smooth = cv2.GaussianBlur(flat, (0, 0), sigma) if sigma >= 0.5 else flat
    # uint8 values below ``threshold`` are those at or below ceil(threshold) - 1
    _, mask = cv2.threshold(smooth, math.ceil(threshold) - 1, 255, cv2.THRESH_BINARY_INV)
    return mask


# ---------------------------------------------------------------- skew

def _estimate_skew(flat: np.ndarray, threshold: float, px_per_mm: float,
                   max_skew_deg: float) -> float:
    """Skew of the page in degrees (counter-clockwise as seen), from the projection profile."""
    f = min(1.0, _SKEW_PX_PER_MM / px_per_mm)
    small = cv2.resize(flat, None, fx=f, fy=f, interpolation=cv2.INTER_AREA)
    ys, xs = np.nonzero(small < threshold + 0.5 * (255 - threshold))
    if len(ys) < 20 or max_skew_deg == 0:
        return 0.0
    xs = xs.astype(np.float64) - small.shape[1] / 2.0
    ys = ys.astype(np.float64) - small.shape[0] / 2.0

    def sharpness(deg: float) -> float:
        t = math.radians(deg)
        rows = np.round(ys * math.cos(t) + xs * math.sin(t)).astype(np.int64)
        counts = np.bincount(rows - rows.min())
        return float(np.dot(counts, counts))

    reach = max_skew_deg + 0.5
    coarse = np.arange(-reach, reach + 1e-9, 0.25)
    best = float(coarse[int(np.argmax([sharpness(a) for a in coarse]))])
    fine = np.arange(best - 0.3, best + 0.3 + 1e-9, 0.02)
    scores = np.array([sharpness(a) for a in fine])
    top = scores >= scores.max() * (1 - 2e-3)  # the peak is flat at this resolution
    angle = float(np.average(fine[top], weights=scores[top] - scores.min() + 1e-9))
    return angle


def _rotation(shape: tuple[int, int], angle_deg: float) -> np.ndarray:
    """2x3 map (pixel edges) rotating by ``angle_deg`` counter-clockwise about the image centre."""
    height, width = shape
    return cv2.getRotationMatrix2D((width / 2.0, height / 2.0), angle_deg, 1.0)


def _warp(image: np.ndarray, matrix: np.ndarray) -> np.ndarray:
    """Apply ``matrix`` (pixel-edge coordinates) to ``image``, paper outside."""
    index = matrix.copy()  # pixel-edge -> pixel-index convention for OpenCV
    index[:, 2] += index[:, :2].sum(axis=1) * 0.5 - 0.5
    return cv2.warpAffine(image, index, (image.shape[1], image.shape[0]),
                          flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT,
                          borderValue=255)


# ---------------------------------------------------------------- lines and cells

def _kernel_len(mm: float, px_per_mm: float) -> int:
    return max(3, int(round(mm * px_per_mm)))


def _horizontal_lines(ink: np.ndarray, px_per_mm: float, min_box_mm: float) -> np.ndarray:
    """(M, N) uint8 mask (255) of straight horizontal runs of ink, small gaps joined."""
    run = np.ones((1, _kernel_len(_LINE_FRACTION * min_box_mm, px_per_mm)), np.uint8)
    join = np.ones((1, _kernel_len(_JOIN_MM, px_per_mm)), np.uint8)
    return cv2.morphologyEx(cv2.morphologyEx(ink, cv2.MORPH_OPEN, run), cv2.MORPH_CLOSE, join)


@dataclass(frozen=True)
class _Rect:
    """A rectangle in pixel edges at the working resolution (a line, a region, a box)."""

    x0: int
    y0: int
    x1: int
    y1: int

    @property
    def w(self) -> int:
        return self.x1 - self.x0

    @property
    def h(self) -> int:
        return self.y1 - self.y0


def _segments(lines: np.ndarray, step: int) -> list[_Rect]:
    """Horizontal line segments: the rows of each run component covered over half its length.

    Components are labelled on the mask pooled over ``step`` columns (lines
    run along the rows; x ends are known to ``step`` pixels).  Handwriting stuck
    to a line adds rows covered only in part, which are left out.
    """
    height, width = lines.shape
    pooled = cv2.resize(lines, (max(1, width // step), height), interpolation=cv2.INTER_AREA)
    pooled = (pooled > 0).astype(np.uint8)
    scale = width / pooled.shape[1]
    _, labels, stats, _ = cv2.connectedComponentsWithStats(pooled, connectivity=8)
    out = []
    for i, (x, y, w, h, _area) in enumerate(stats[1:], start=1):
        cover = (labels[y:y + h, x:x + w] == i).mean(axis=1) >= 0.5
        rows = np.flatnonzero(cover)
        if rows.size == 0:
            continue
        starts = np.flatnonzero(np.diff(np.concatenate([[-2], rows])) > 1)
        x0, x1 = int(round(x * scale)), min(width, int(round((x + w) * scale)))
        for k, start in enumerate(starts):
            end = starts[k + 1] if k + 1 < len(starts) else rows.size
            out.append(_Rect(x0, int(y + rows[start]), x1, int(y + rows[end - 1] + 1)))
    return out


def _merge_collinear(segments: list[_Rect], tol: int, max_gap: float) -> list[_Rect]:
    """Join segments on one row (centres within ``tol``) less than ``max_gap`` apart: a broken line."""
    out: list[_Rect] = []
    for seg in sorted(segments, key=lambda r: (r.y0, r.x0)):
        for k, line in enumerate(out):
            if (abs(line.y0 + line.y1 - seg.y0 - seg.y1) <= 2 * tol
                    and seg.x0 - line.x1 <= max_gap and line.x0 - seg.x1 <= max_gap):
                out[k] = _Rect(min(line.x0, seg.x0), min(line.y0, seg.y0),
                               max(line.x1, seg.x1), max(line.y1, seg.y1))
                break
        else:
            out.append(seg)
    return out


def _cells(ink: np.ndarray, lines: np.ndarray, px_per_mm: float, min_box_mm: float,
           max_box_mm: float) -> list[_Rect]:
    """Regions between two horizontal lines and two walls, of digit box height.

    Collinear line segments are joined across gaps shorter than a box (broken
    lines).  For every pair of lines lying a box height apart, the columns of
    the band between them are walls when ink covers ``_WALL_COVER`` of the
    band's height (ignoring a thin margin at each line), or
    ``_BROKEN_WALL_COVER`` of it reaching both lines; the stretches between
    neighbouring walls are regions when they are not mostly ink, no line runs
    across them and the lines run along most of their top and bottom edges.
    A badly broken wall may be missed (two boxes run together) and a straight
    stroke may pass for a wall (a box split in two); fitting each field's row
    of boxes repairs both.
    """
    lo, hi = 0.9 * min_box_mm * px_per_mm, max_box_mm * px_per_mm
    margin = max(1, int(round(_BAND_MARGIN_MM * px_per_mm)))
    band_px = max(2, int(round(_LINE_BAND_MM * px_per_mm)))
    max_wall = max(3, int(round(_MAX_WALL_MM * px_per_mm)))
    step = max(1, int(round(_POOL_MM * px_per_mm)))
    segments = [r for r in _segments(lines, step) if r.h <= max_wall]
    segments = _merge_collinear(segments, max(1, int(round(0.3 * px_per_mm))),
                                min_box_mm * px_per_mm)
    segments = [r for r in segments if r.w >= lo]
    segments.sort(key=lambda r: r.y0)
    rects = set()
    for i, top in enumerate(segments):
        for bottom in segments[i + 1:]:
            height = bottom.y0 - top.y1
            if height > hi:
                break
            xa, xb = max(top.x0, bottom.x0), min(top.x1, bottom.x1)
            if height < lo or xb - xa < lo:
                continue
            # the whole length of both lines (one may have lost its end), and the end walls
            xa = max(0, min(top.x0, bottom.x0) - band_px)
            xb = min(ink.shape[1], max(top.x1, bottom.x1) + band_px)
            band = ink[top.y1 + margin:bottom.y0 - margin, xa:xb] > 0
            for x0, x1 in _between_walls(band, max_wall):
                inside = band[:, x0:x1]
                r = _Rect(xa + x0, top.y1, xa + x1, bottom.y0)
                if (inside.mean() <= _MAX_INK and inside.mean(axis=1).max() < _CROSSING
                        and _ruled(lines, r.x0, r.x1, r.y0, r.y1, band_px)):
                    rects.add(r)
    return sorted(rects, key=lambda r: (r.y0, r.x0))


def _between_walls(band: np.ndarray, max_wall: int) -> list[tuple[int, int]]:
    """Column ranges ``[x0, x1)`` between neighbouring walls of a (rows, columns) ink band.

    Whole walls and broken walls are found apart; a run of either wider than
    ``max_wall`` is a dark blob (a bold digit against a wall), not a wall.
    """
    cover = band.mean(axis=0)
    ends = max(1, band.shape[0] // 30)
    reach = band[:ends].any(axis=0) & band[-ends:].any(axis=0)
    reach = reach | np.roll(reach, 1) | np.roll(reach, -1)
    wall = _thin_runs(cover >= _WALL_COVER, max_wall)
    wall |= _thin_runs((cover >= _BROKEN_WALL_COVER) & reach, max_wall)
    starts, stops = _runs(wall)
    return [(int(a), int(b)) for a, b in zip(stops[:-1], starts[1:]) if b - a >= 2]


def _runs(flags: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Starts and stops (exclusive) of the runs of True in a 1-D bool array."""
    edges = np.flatnonzero(np.diff(np.concatenate([[0], flags.astype(np.int8), [0]])))
    return edges[0::2], edges[1::2]


def _thin_runs(flags: np.ndarray, max_len: int) -> np.ndarray:
    """``flags`` with the runs longer than ``max_len`` cleared."""
    out = np.zeros_like(flags)
    for a, b in zip(*_runs(flags)):
        if b - a <= max_len:
            out[a:b] = True
    return out


# ---------------------------------------------------------------- fields

@dataclass(frozen=True)
class _Limits:
    """Size limits of a digit box, in pixels at the working resolution."""

    lo: float
    hi: float

    def fits(self, r: _Rect) -> bool:
        return (self.lo <= r.w <= self.hi and self.lo <= r.h <= self.hi
                and _ASPECT[0] <= r.h / r.w <= _ASPECT[1])


@dataclass(frozen=True)
class _Reference:
    """Size of the boxes of one field: height, width and pitch (0 when unknown)."""

    h: float
    w: float
    pitch: float


def _aligned(a: _Rect, b: _Rect) -> bool:
    tol = _ALIGN * max(a.h, b.h)
    return abs(a.y0 - b.y0) <= tol and abs(a.y1 - b.y1) <= tol


def _ruled(mask: np.ndarray, x0: int, x1: int, y0: int, y1: int, band: int,
           share: float = _RULED, *, either: bool = False) -> bool:
    """Whether ``mask`` runs along ``share`` of ``x0..x1`` just above ``y0`` and below ``y1``.

    Both edges must be covered so, or with ``either`` the two on average.
    """
    if x1 <= x0:
        return True
    top = mask[max(0, y0 - band):y0, x0:x1].any(axis=0).mean()
    bottom = mask[y1:y1 + band, x0:x1].any(axis=0).mean()
    return ((top + bottom) / 2 if either else min(top, bottom)) >= share


def _lines_continue(lines: np.ndarray, a: _Rect, b: _Rect, band: int) -> bool:
    """Whether traces of the top and the bottom line run across the gap from ``a`` to ``b``."""
    return _ruled(lines, a.x1, b.x0, min(a.y0, b.y0), max(a.y1, b.y1), band, _LINES_RUN_ON)


def _chains(rects: list[_Rect], lines: np.ndarray, band: int) -> list[list[_Rect]]:
    """Link each region to its nearest aligned right neighbour, when close enough.

    The neighbour must be close (``_MAX_GAP`` of the height) or, up to
    ``_MISSING_GAP`` heights away, joined to it by traces of top and bottom
    lines (boxes between them were lost).
    """
    order = sorted(rects, key=lambda r: r.x0)
    nxt: dict[int, int] = {}
    for i, a in enumerate(order):
        right = [j for j in range(i + 1, len(order))
                 if order[j].x0 >= a.x1 - 1 and _aligned(a, order[j])]
        if not right:
            continue
        j = min(right, key=lambda k: order[k].x0)
        b = order[j]
        gap = b.x0 - a.x1
        if j not in nxt.values() and (gap <= _MAX_GAP * min(a.h, b.h) or (
                gap <= _MISSING_GAP * a.h and _lines_continue(lines, a, b, band))):
            nxt[i] = j
    chains = []
    for i in sorted(set(range(len(order))) - set(nxt.values())):
        chain = [order[i]]
        while i in nxt:
            i = nxt[i]
            chain.append(order[i])
        chains.append(chain)
    return chains


def _split_chain(chain: list[_Rect], limits: _Limits, lines: np.ndarray,
                 band: int) -> list[list[_Rect]]:
    """Split a chain where two well-formed boxes stand too far apart for one field.

    Gaps are measured between consecutive well-formed boxes (skipping parts of
    boxes between them); a chain is split where such a gap exceeds the median
    one by ``_GAP_STEP`` heights and no line traces run across it.
    """
    good = [i for i, r in enumerate(chain) if limits.fits(r)]
    gaps = [chain[j].x0 - chain[i].x1 for i, j in zip(good, good[1:])]
    if len(gaps) < 2:
        return [chain]
    limit = float(np.median(gaps)) + _GAP_STEP * float(np.median([r.h for r in chain]))
    cuts = [j for (i, j), gap in zip(zip(good, good[1:]), gaps)
            if gap > limit and not _lines_continue(lines, chain[i], chain[j], band)]
    bounds = [0] + cuts + [len(chain)]
    return [chain[a:b] for a, b in zip(bounds, bounds[1:])]


def _box_width(good: list[_Rect]) -> float:
    """The widest width that two or more of a chain's boxes share (parts of split boxes are
    narrower); the widest width when no two agree."""
    widths = np.array([r.w for r in good], float)
    near = np.abs(widths[:, None] - widths[None, :]) <= _SAME_WIDTH * widths[:, None]
    counts = near.sum(axis=1)
    shared = counts >= min(2, int(counts.max()))
    best = max(np.flatnonzero(shared), key=lambda i: widths[i])  # the widest shared width
    return float(np.median(widths[near[best]]))


def _references(chains: list[list[_Rect]], limits: _Limits) -> list[_Reference]:
    """Box sizes of the chains that hold well-formed boxes."""
    refs = []
    for chain in chains:
        good = [r for r in chain if limits.fits(r)]
        if not good:
            continue
        w = _box_width(good)
        h = float(np.median([r.h for r in good]))
        pitch = _pitch([r for r in good if abs(r.w - w) <= _SAME_WIDTH * w], w, h)
        refs.append(_Reference(h, w, pitch or 0.0))
    return refs


def _pitch(boxes: list[_Rect], w: float, h: float) -> float | None:
    """Pitch of a row of equal boxes from the periodicity of their centres; None for one box.

    Only pitches from ``w`` to ``w`` plus the largest gap between neighbours
    are tried, a range too narrow to hold twice a pitch, so lost boxes between
    the given ones do not matter.
    """
    if len(boxes) < 2:
        return None
    centres = np.array([(r.x0 + r.x1) / 2.0 for r in boxes])
    pitches = np.arange(w, w + _MAX_GAP * h + 1.0, 0.25)
    resultant = np.abs(np.exp(2j * np.pi * centres[None, :] / pitches[:, None]).mean(axis=1))
    return float(pitches[int(np.argmax(resultant))])


def _pitch_from_edges(part: list[_Rect], box: _Rect, w: float, h: float) -> float:
    """Pitch that puts the most region edges of ``part`` on box edges laid out from ``box``.

    For a chain with a single well-formed box: the outer walls of boxes cut in
    parts by strokes still bound regions, so their edges mark the row.
    """
    parts = [r for r in part if r.w >= 0.35 * w]  # not the strips between separate boxes
    lefts = np.array([r.x0 for r in parts], float)
    rights = np.array([r.x1 for r in parts], float)
    tol = max(2.0, 0.05 * w)
    best, best_score = w, -1.0
    for pitch in np.arange(w, w + _MAX_GAP * h + 1.0, 0.5):
        d_left = np.abs((lefts - box.x0 + pitch / 2) % pitch - pitch / 2)
        d_right = np.abs((rights - box.x1 + pitch / 2) % pitch - pitch / 2)
        d = np.concatenate([d_left, d_right])
        score = np.count_nonzero(d <= tol) - d[d <= tol].sum() / (tol * d.size + 1)
        if score > best_score:
            best, best_score = float(pitch), score
    return best


def _fit_field(part: list[_Rect], limits: _Limits, refs: list[_Reference],
               ink: np.ndarray) -> tuple[list[_Rect], int, float]:
    """Lay a row of equal boxes over a chain of regions.

    Returns the boxes, how many of them were placed rather than seen, and the
    pitch (distance from one box's left edge to the next one's).

    Box width and pitch come from the chain's well-formed boxes (else from the
    page's boxes of the same height); every box edge is taken from a region
    edge within 10 % of a box width of where the row puts it, else placed.
    "Placed" boxes are those that regions cover by less than half.
    """
    h = float(np.median([r.h for r in part]))
    good = [r for r in part if limits.fits(r)]
    if good:
        w = _box_width(good)
        true = [r for r in good if abs(r.w - w) <= _SAME_WIDTH * w]
        pitch = _pitch(true, w, h) or _pitch_from_edges(part, true[0], w, h)
        base = true[0].x0
        origin = float(np.median([r.x0 - round((r.x0 - base) / pitch) * pitch for r in true]))
    else:
        similar = [ref for ref in refs if abs(ref.h - h) <= _ALIGN * h]
        if not similar:
            return [], 0, 0.0
        w = float(np.median([ref.w for ref in similar]))
        pitch = float(np.median([ref.pitch or ref.w for ref in similar]))
        span = part[-1].x1 - part[0].x0
        k = max(1, round((span + pitch - w) / pitch))
        if len(part) == 1 and k == 1 or abs(span - (k * pitch - pitch + w)) > 0.15 * w:
            return [], 0, 0.0  # a scrap, not boxes run together or one box cut in parts
        origin = float(part[0].x0)
    first = int(round((part[0].x0 - origin) / pitch))
    last = int(round((part[-1].x1 - w - origin) / pitch))
    if not 0 <= last - first < 100:
        return [], 0, 0.0
    tol = max(2.0, 0.1 * w)
    y0 = int(round(np.median([r.y0 for r in (good or part)])))
    y1 = int(round(np.median([r.y1 for r in (good or part)])))
    boxes, placed = [], 0
    for slot in range(first, last + 1):
        ex0 = origin + slot * pitch
        x0 = _snap(ex0, [r.x0 for r in part], tol)
        x1 = _snap(ex0 + w, [r.x1 for r in part], tol)
        seen = sum(max(0, min(r.x1, x1) - max(r.x0, x0)) for r in part)
        if seen < 0.5 * w:
            placed += 1
        if not good and slot > first and not _wall_trace(ink, x0, y0, y1, tol):
            return [], 0, 0.0
        boxes.append(_Rect(x0, y0, x1, y1))
    return [b for b in boxes if limits.fits(b)], placed, pitch


def _snap(expected: float, edges: list[int], tol: float) -> int:
    """The edge nearest to ``expected`` if within ``tol``, else ``expected`` rounded."""
    nearest = min(edges, key=lambda e: abs(e - expected))
    return nearest if abs(nearest - expected) <= tol else int(round(expected))


def _wall_trace(ink: np.ndarray, x: int, y0: int, y1: int, half: float) -> bool:
    """Whether some column up to ``2 * half`` px left of ``x`` is mostly ink between y0 and y1."""
    a = max(0, int(x - 2 * half))
    cover = (ink[y0:y1, a:x] > 0).mean(axis=0)
    return bool(cover.size) and float(cover.max()) >= _WALL_TRACE


def _group(rects: list[_Rect], lines: np.ndarray, ink: np.ndarray, px_per_mm: float,
           min_box_mm: float, max_box_mm: float) -> list[tuple[list[_Rect], tuple[str, ...]]]:
    """Chain regions into fields, fit each field's row of boxes, drop what is not a digit box.

    Returns each field's boxes with its doubts: boxes added beyond the ends
    of a field change its box count, so such a field is doubtful; boxes
    placed inside a field at its regular pitch are not.
    """
    limits = _Limits(0.9 * min_box_mm * px_per_mm, max_box_mm * px_per_mm)
    band = max(2, int(round(_LINE_BAND_MM * px_per_mm)))
    chains = [part for chain in _chains(rects, lines, band)
              for part in _split_chain(chain, limits, lines, band)]
    refs = _references(chains, limits)
    fitted = []
    for part in chains:
        boxes, n, pitch = _fit_field(part, limits, refs, ink)
        if boxes and _ruled(lines, boxes[0].x0, boxes[-1].x1, boxes[0].y0, boxes[0].y1, band,
                            _FIELD_RULED):
            fitted.append((boxes, n, pitch, sum(limits.fits(r) for r in part)))
    fitted = _drop_odd_small_fields(fitted)
    fields: list[tuple[list[_Rect], tuple[str, ...]]] = []
    taken = np.zeros(lines.shape, bool)
    kept = []
    # fields seen with more well-formed boxes first; the others may not overlap them
    for boxes, _, pitch, _ in sorted(fitted, key=lambda f: -f[3]):
        if not any(taken[b.y0:b.y1, b.x0:b.x1].any() for b in boxes):
            for b in boxes:
                taken[b.y0:b.y1, b.x0:b.x1] = True
            kept.append((boxes, pitch))
    for boxes, pitch in kept:
        boxes, added = _extend(boxes, pitch, ink, band, taken)
        doubts = (f"{added} box{'es' if added > 1 else ''} at the end of the field added from the "
                  "neighbouring boxes (walls broken or covered)",) if added else ()
        fields.append((boxes, doubts))
    return fields


def _extend(boxes: list[_Rect], pitch: float, ink: np.ndarray, band: int,
            taken: np.ndarray) -> tuple[list[_Rect], int]:
    """Add boxes lost at a field's ends (their region leaked out through a broken line).

    A box is added one pitch beyond an end while ink covers half of its top
    and bottom edges taken together, a wall trace stands at its outer edge and
    no other box is there.
    """
    if len(boxes) < 2 or pitch <= 0:
        return boxes, 0
    w = int(round(float(np.median([b.w for b in boxes]))))
    y0 = int(round(np.median([b.y0 for b in boxes])))
    y1 = int(round(np.median([b.y1 for b in boxes])))
    tol = max(2.0, 0.1 * w)
    added = 0
    for step in (-1, 1):
        for _ in range(_MAX_EXTEND):
            end = boxes[0] if step < 0 else boxes[-1]
            x0 = int(round(end.x0 + step * pitch))
            x1 = x0 + w
            if x0 < 0 or x1 > ink.shape[1] or taken[y0:y1, x0:x1].any():
                break
            if not _ruled(ink, x0, x1, y0, y1, band, either=True):
                break
            outer = x0 if step < 0 else x1 + int(round(2 * tol))
            if not _wall_trace(ink, outer, y0, y1, tol):
                break
            box = _Rect(x0, y0, x1, y1)
            taken[y0:y1, x0:x1] = True
            boxes = [box] + boxes if step < 0 else boxes + [box]
            added += 1
    return boxes, added


def _drop_odd_small_fields(fitted: list[tuple]) -> list[tuple]:
    """Keep a field of one or two boxes only when its boxes have the page's usual size.

    ``fitted`` holds ``(boxes, ...)`` tuples; the usual size is the median box of
    the fields of more boxes, or of all fields when there are none.
    """
    big = [r for f in fitted if len(f[0]) > _SMALL_FIELD for r in f[0]]
    ref = big or [r for f in fitted for r in f[0]]
    if not ref:
        return []
    w = float(np.median([r.w for r in ref]))
    h = float(np.median([r.h for r in ref]))
    return [f for f in fitted if len(f[0]) > _SMALL_FIELD or all(
        abs(r.w - w) <= _SMALL_TOLERANCE * w and abs(r.h - h) <= _SMALL_TOLERANCE * h
        for r in f[0])]


def _scale_box(r: _Rect, factor: float) -> Box:
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


def _line_warnings(flat: np.ndarray, lines: np.ndarray, paper: float) -> list[str]:
    sample = flat[::2, ::2][lines[::2, ::2] > 0]
    if sample.size and paper - float(np.median(sample)) < _FAINT_LINES:
        return ["the printed lines are faint"]
    return []
