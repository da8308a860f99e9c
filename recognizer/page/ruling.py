"""The page-level steps of box finding: lighting, ink, skew, ruling lines and the regions between them.

:func:`recognizer.page.boxes.find_fields` runs these steps on the page (at no
more than 200 dpi); :mod:`recognizer.page.box_rows` then decides which of the
regions are digit boxes. Everything here works in pixels at that working
resolution, on ``(M, N)`` uint8 images; rectangles are :class:`Rect` in
pixel edges.

Steps
-----
1. *Lighting*: the paper level is estimated on a 1 mm grid (a grey closing
   over 5 mm wipes out thin ink) and divided out, so paper is near 255.
2. *Ink*: after a light smoothing (0.1 mm), pixels darker than the paper by
   more than the larger of 4.5 noise deviations and 22 grey levels are ink.
3. *Skew*: the horizontal projection profile of the ink, seen at about
   100 dpi, is sharpest at the page's skew (sum of squared row counts,
   searched in 0.25 degree steps over +-``max_skew_deg`` and refined in
   0.02 degree steps); the page is rotated back about its centre, keeping
   its size.
4. *Lines*: an opening with a one-pixel-high kernel 35 % of ``min_box_mm``
   long keeps straight horizontal runs, a closing joins runs less than 2 mm
   apart; the segments at most 1.2 mm thick are the candidate lines, and
   collinear segments less than ``min_box_mm`` apart are joined (a broken
   line).
5. *Regions*: for two lines between ``0.9 * min_box_mm`` and ``max_box_mm``
   apart, a column of the band between them is a wall where ink covers 90 %
   of its height, or 55 % reaching both lines (a broken wall); walls are
   at most 1.2 mm thick.  The stretch between two walls is a region when
   it is at most 70 % ink, no row of it is ink over 95 % of its width (a
   line across: the band of a label above a field) and lines cover half of
   its top and bottom edges.

The page warnings about the lines (:func:`line_warnings`): lines fainter than
80 grey levels below the paper.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

__all__ = [
    "LINE_BAND_MM",
    "Rect",
    "estimate_skew",
    "flatten_lighting",
    "horizontal_lines",
    "ink_mask",
    "ink_step",
    "line_segments",
    "line_warnings",
    "max_wall_px",
    "median_of_counts",
    "percentile_of_counts",
    "regions",
    "rotation",
    "runs",
    "ruled",
    "thin_runs",
    "warp",
]

_SKEW_PX_PER_MM = 4.0      # resolution of the skew search (about 100 dpi)
_COARSE_STRIDE = 4         # the coarse skew search scores every 4th ink pixel
_FINE_POINTS = 20_000      # the fine skew search scores every 2nd ink pixel of pages with more
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
_RULED = 0.5               # share of a region's top and bottom edge that lines must cover
LINE_BAND_MM = 0.6         # band beside a region searched for its top or bottom line
_FAINT_LINES = 80          # median line darkness (grey levels) below this: "lines faint"


# ---------------------------------------------------------------- lighting and ink

def flatten_lighting(gray: np.ndarray, px_per_mm: float) -> np.ndarray:
    """Divide out the paper level: (M, N) uint8 with paper near 255 everywhere."""
    f = min(1.0, _LIGHT_PX_PER_MM / px_per_mm)
    small = cv2.resize(gray, None, fx=f, fy=f, interpolation=cv2.INTER_AREA)
    k = max(3, int(round(_LIGHT_WINDOW_MM * px_per_mm * f)) | 1)
    kernel = cv2.getStructuringElement(cv2.MORPH_RECT, (k, k))
    paper = cv2.morphologyEx(small, cv2.MORPH_CLOSE, kernel)
    paper = cv2.blur(paper, (k, k))
    np.maximum(paper, 1, out=paper)  # (and so is every value interpolated between them)
    paper = cv2.resize(paper, (gray.shape[1], gray.shape[0]), interpolation=cv2.INTER_LINEAR)
    return cv2.divide(gray, paper, scale=255.0)


def _shrunk(image: np.ndarray, f: float) -> np.ndarray:
    """``image`` averaged down by about ``f`` (at most 1).

    A factor near ``1/k`` for a whole ``k`` is taken as ``1/k`` on the image
    grown to a multiple of ``k`` (its far edges repeated): OpenCV averages
    whole blocks many times faster than fractional ones. Other factors are
    used as they are.
    """
    if f >= 1.0:
        return image
    k = int(round(1.0 / f))
    if k >= 2 and abs(1.0 / f - k) <= 0.1 * k:
        h, w = image.shape[:2]
        grown = cv2.copyMakeBorder(image, 0, -h % k, 0, -w % k, cv2.BORDER_REPLICATE)
        return cv2.resize(grown, (grown.shape[1] // k, grown.shape[0] // k), interpolation=cv2.INTER_AREA)
    return cv2.resize(image, None, fx=f, fy=f, interpolation=cv2.INTER_AREA)


def ink_step(flat: np.ndarray) -> tuple[float, float | None]:
    """Paper level and the darkening that counts as ink; ``None`` for a blank page."""
    # medians of the uint8 sample from its histogram: np.median's figures without sorting it
    hist = np.bincount(flat[::3, ::3].ravel(), minlength=256)
    levels = np.arange(256)
    paper = median_of_counts(levels, hist)
    spread = 1.4826 * median_of_counts(np.abs(levels - paper), hist)
    step = max(4.5 * spread, 22.0)
    if paper - step < 10 or int(hist[levels < paper - step].sum()) < 20:
        return paper, None
    return paper, step


def percentile_of_counts(counts: np.ndarray, q: float) -> float:
    """``np.percentile`` (linear interpolation) of the values ``0, 1, ...`` each repeated
    ``counts`` times (the histogram of a uint8 image, say), without sorting the values."""
    cum = np.cumsum(counts)
    n = int(cum[-1])
    at = q / 100.0 * (n - 1)
    low = math.floor(at)
    a, b = (float(v) for v in np.searchsorted(cum, np.array([low, min(low + 1, n - 1)]) + 1, side="left"))
    t = at - low
    return a + (b - a) * t if t < 0.5 else b - (b - a) * (1 - t)  # as numpy interpolates


def median_of_counts(values: np.ndarray, counts: np.ndarray) -> float:
    """``np.median`` of ``values`` each repeated ``counts`` times (counts of uint8 levels, say)."""
    order = np.argsort(values, kind="stable")
    cum = np.cumsum(counts[order])
    n = int(cum[-1])
    picked = values[order][np.searchsorted(cum, np.array([(n - 1) // 2, n // 2]) + 1, side="left")]
    return float(picked.astype(np.float64).mean())


def ink_mask(flat: np.ndarray, threshold: float, px_per_mm: float) -> np.ndarray:
    """(M, N) uint8 ink mask (255 = ink) after a light smoothing against noise."""
    sigma = 0.1 * px_per_mm
    smooth = cv2.GaussianBlur(flat, (0, 0), sigma) if sigma >= 0.5 else flat
    # uint8 values below ``threshold`` are those at or below ceil(threshold) - 1
    _, mask = cv2.threshold(smooth, math.ceil(threshold) - 1, 255, cv2.THRESH_BINARY_INV)
    return mask


# ---------------------------------------------------------------- skew

def estimate_skew(flat: np.ndarray, threshold: float, px_per_mm: float,
                  max_skew_deg: float) -> float:
    """Skew of the page in degrees (counter-clockwise as seen), from the projection profile.

    The coarse search (0.25 degree steps) scores every ``_COARSE_STRIDE``-th
    ink pixel only: it just has to land within a step of the peak, which the
    fine search (0.02 degree steps, within 0.2 degrees of it) then finds on
    every ink pixel, or every second one of a page with more than
    ``_FINE_POINTS`` (an A4 page holds about 45,000 at 100 dpi; on the 50
    pages of ``bench/bench_read.py`` the error stayed 0.02 degrees rms).
    """
    small = _shrunk(flat, _SKEW_PX_PER_MM / px_per_mm)
    ys, xs = np.nonzero(small < threshold + 0.5 * (255 - threshold))
    if len(ys) < 20 or max_skew_deg == 0:
        return 0.0
    # Whole-pixel offsets: points half-way between rows would all round one way at 0 degrees
    # (half to even), pairing rows and faking a sharp profile there on an odd number of rows.
    xs = xs.astype(np.float64) - small.shape[1] // 2
    ys = ys.astype(np.float64) - small.shape[0] // 2

    reach = max_skew_deg + 0.5
    coarse = np.arange(-reach, reach + 1e-9, 0.25)
    step = _COARSE_STRIDE if len(ys) >= 20 * _COARSE_STRIDE else 1
    best = float(coarse[int(np.argmax(_sharpness(coarse, ys[::step], xs[::step])))])
    fine = np.arange(best - 0.2, best + 0.2 + 1e-9, 0.02)
    step = 2 if len(ys) > _FINE_POINTS else 1
    scores = _sharpness(fine, ys[::step], xs[::step])
    top = scores >= scores.max() * (1 - 2e-3)  # the peak is flat at this resolution
    angle = float(np.average(fine[top], weights=scores[top] - scores.min() + 1e-9))
    return angle


def _sharpness(angles: np.ndarray, ys: np.ndarray, xs: np.ndarray) -> np.ndarray:
    """Sum of squared row counts of the points ``(xs, ys)`` turned by each angle (degrees)."""
    out = np.empty(len(angles), np.float64)
    turned, other = np.empty_like(ys), np.empty_like(xs)
    rows = np.empty(ys.shape, np.int64)
    for k, deg in enumerate(angles):
        t = math.radians(float(deg))
        np.multiply(ys, math.cos(t), out=turned)
        np.multiply(xs, math.sin(t), out=other)
        np.add(turned, other, out=turned)
        np.rint(turned, out=turned)  # rounds half to even, as np.round
        rows[:] = turned
        rows -= rows.min()
        counts = np.bincount(rows)
        out[k] = float(np.dot(counts, counts))
    return out


def rotation(shape: tuple[int, int], angle_deg: float) -> np.ndarray:
    """2x3 map (pixel edges) rotating by ``angle_deg`` counter-clockwise about the image centre."""
    height, width = shape
    return cv2.getRotationMatrix2D((width / 2.0, height / 2.0), angle_deg, 1.0)


def warp(image: np.ndarray, matrix: np.ndarray) -> np.ndarray:
    """Apply ``matrix`` (pixel-edge coordinates) to ``image``, paper outside."""
    index = matrix.copy()  # pixel-edge -> pixel-index convention for OpenCV
    index[:, 2] += index[:, :2].sum(axis=1) * 0.5 - 0.5
    return cv2.warpAffine(image, index, (image.shape[1], image.shape[0]),
                          flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT,
                          borderValue=255)


# ---------------------------------------------------------------- lines and regions

def _kernel_len(mm: float, px_per_mm: float) -> int:
    return max(3, int(round(mm * px_per_mm)))


def horizontal_lines(ink: np.ndarray, px_per_mm: float, min_box_mm: float) -> np.ndarray:
    """(M, N) uint8 mask (255) of straight horizontal runs of ink, small gaps joined."""
    run = np.ones((1, _kernel_len(_LINE_FRACTION * min_box_mm, px_per_mm)), np.uint8)
    join = np.ones((1, _kernel_len(_JOIN_MM, px_per_mm)), np.uint8)
    return cv2.morphologyEx(cv2.morphologyEx(ink, cv2.MORPH_OPEN, run), cv2.MORPH_CLOSE, join)


@dataclass(frozen=True)
class Rect:
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


def _segments(lines: np.ndarray, step: int) -> list[Rect]:
    """Horizontal line segments: the rows of each run component covered over half its length.

    Components are labelled on the mask pooled over ``step`` columns (lines
    run along the rows; x ends are known to ``step`` pixels).  Handwriting stuck
    to a line adds rows covered only in part, which are left out.
    """
    height, width = lines.shape
    pooled = cv2.resize(lines, (max(1, width // step), height), interpolation=cv2.INTER_AREA)
    pooled = (pooled > 0).astype(np.uint8)
    scale = width / pooled.shape[1]
    out = []
    # No component crosses an empty row: each band of rows with ink is labelled alone (the
    # lines are a small part of the page), top to bottom as one labelling would order them.
    for top, bottom in zip(*runs(pooled.any(axis=1))):
        _, labels, stats, _ = cv2.connectedComponentsWithStats(pooled[top:bottom], connectivity=8)
        for i, (x, y, w, h, _area) in enumerate(stats[1:], start=1):
            cover = (labels[y:y + h, x:x + w] == i).mean(axis=1) >= 0.5
            rows = np.flatnonzero(cover)
            if rows.size == 0:
                continue
            starts = np.flatnonzero(np.diff(np.concatenate([[-2], rows])) > 1)
            x0, x1 = int(round(x * scale)), min(width, int(round((x + w) * scale)))
            for k, start in enumerate(starts):
                end = starts[k + 1] if k + 1 < len(starts) else rows.size
                out.append(Rect(x0, int(top + y + rows[start]), x1, int(top + y + rows[end - 1] + 1)))
    return out


def _merge_collinear(segments: list[Rect], tol: int, max_gap: float) -> list[Rect]:
    """Join segments on one row (centres within ``tol``) less than ``max_gap`` apart: a broken line."""
    lines = np.zeros((len(segments), 4), np.int64)  # x0, y0, x1, y1 of the lines so far, in order
    n = 0
    for seg in sorted(segments, key=lambda r: (r.y0, r.x0)):
        if n:  # the first line so far that this segment continues
            x0, y0, x1, y1 = lines[:n].T
            joins = np.flatnonzero((np.abs(y0 + y1 - seg.y0 - seg.y1) <= 2 * tol)
                                   & (seg.x0 - x1 <= max_gap) & (x0 - seg.x1 <= max_gap))
            if joins.size:
                k = joins[0]
                lines[k] = (min(x0[k], seg.x0), min(y0[k], seg.y0), max(x1[k], seg.x1), max(y1[k], seg.y1))
                continue
        lines[n] = (seg.x0, seg.y0, seg.x1, seg.y1)
        n += 1
    return [Rect(*(int(v) for v in line)) for line in lines[:n]]


def max_wall_px(px_per_mm: float) -> int:
    """Thickest wall or line, in pixels (at least 3)."""
    return max(3, int(round(_MAX_WALL_MM * px_per_mm)))


def line_segments(lines: np.ndarray, px_per_mm: float, min_box_mm: float) -> list[Rect]:
    """The straight horizontal lines of a :func:`horizontal_lines` mask, top to bottom.

    Segments at most ``_MAX_WALL_MM`` thick, collinear ones less than
    ``min_box_mm`` apart joined (a broken line), at least ``0.9 * min_box_mm``
    long.
    """
    lo = 0.9 * min_box_mm * px_per_mm
    step = max(1, int(round(_POOL_MM * px_per_mm)))
    segments = [r for r in _segments(lines, step) if r.h <= max_wall_px(px_per_mm)]
    segments = _merge_collinear(segments, max(1, int(round(0.3 * px_per_mm))),
                                min_box_mm * px_per_mm)
    segments = [r for r in segments if r.w >= lo]
    segments.sort(key=lambda r: r.y0)
    return segments


def regions(ink: np.ndarray, lines: np.ndarray, px_per_mm: float, min_box_mm: float,
            max_box_mm: float, *, segments: list[Rect] | None = None) -> list[Rect]:
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
    of boxes repairs both.  ``segments``, when given, are the
    :func:`line_segments` of ``lines`` worked out already.
    """
    lo, hi = 0.9 * min_box_mm * px_per_mm, max_box_mm * px_per_mm
    margin = max(1, int(round(_BAND_MARGIN_MM * px_per_mm)))
    band_px = max(2, int(round(LINE_BAND_MM * px_per_mm)))
    max_wall = max_wall_px(px_per_mm)
    if segments is None:
        segments = line_segments(lines, px_per_mm, min_box_mm)
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
                r = Rect(xa + x0, top.y1, xa + x1, bottom.y0)
                if (inside.mean() <= _MAX_INK and inside.mean(axis=1).max() < _CROSSING
                        and ruled(lines, r.x0, r.x1, r.y0, r.y1, band_px)):
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
    wall = thin_runs(cover >= _WALL_COVER, max_wall)
    wall |= thin_runs((cover >= _BROKEN_WALL_COVER) & reach, max_wall)
    starts, stops = runs(wall)
    return [(int(a), int(b)) for a, b in zip(stops[:-1], starts[1:]) if b - a >= 2]


def runs(flags: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Starts and stops (exclusive) of the runs of True in a 1-D bool array."""
    edges = np.flatnonzero(np.diff(np.concatenate([[0], flags.astype(np.int8), [0]])))
    return edges[0::2], edges[1::2]


def thin_runs(flags: np.ndarray, max_len: int) -> np.ndarray:
    """``flags`` with the runs longer than ``max_len`` cleared."""
    out = np.zeros_like(flags)
    for a, b in zip(*runs(flags)):
        if b - a <= max_len:
            out[a:b] = True
    return out


def ruled(mask: np.ndarray, x0: int, x1: int, y0: int, y1: int, band: int,
          share: float = _RULED, *, either: bool = False) -> bool:
    """Whether ``mask`` runs along ``share`` of ``x0..x1`` just above ``y0`` and below ``y1``.

    Both edges must be covered so, or with ``either`` the two on average.
    """
    if x1 <= x0:
        return True
    top = mask[max(0, y0 - band):y0, x0:x1].any(axis=0).mean()
    bottom = mask[y1:y1 + band, x0:x1].any(axis=0).mean()
    return ((top + bottom) / 2 if either else min(top, bottom)) >= share


def line_warnings(flat: np.ndarray, lines: np.ndarray, paper: float) -> list[str]:
    """``["the printed lines are faint"]`` when the lines are fainter than the module notes allow, else ``[]``."""
    sample = flat[::2, ::2][lines[::2, ::2] > 0]
    if sample.size and paper - float(np.median(sample)) < _FAINT_LINES:
        return ["the printed lines are faint"]
    return []
