"""Cut the digit boxes out of a page, clean them and make model-ready cells.

For each box found by :mod:`recognizer.page.boxes`:

1. *Crop*: the inner box plus a 0.8 mm margin (the ruling lines included) is
   kept as scanned, for the person who reviews the reading.
2. *Ink*: the paper level of the crop (its 80th percentile) and its noise
   (spread of the brighter pixels) are measured, so faint pencil and uneven
   light are judged against the paper around them; after a light smoothing
   a pixel is ink when darker than the paper by the larger of 4 noise
   deviations and 20 grey levels, and an ink blot must somewhere be twice as
   dark as that.  Ink is kept as grey levels (darkness / typical stroke
   darkness, clipped to 0..1), like the antialiased MNIST digits.
3. *Box lines*: rows (columns) in a 0.5 mm band along each edge of the inner
   box that are ink over 60 % of their length are remnants of the box's own
   line; they are cleared except where a stroke goes on inwards, so a digit
   crossing the line keeps its connected part.  Ink touching the edge that
   stays wholly within the band (bits of a broken line, corners) goes too.
4. *Specks*: ink blots under 0.12 mm^2 are dropped (dust, noise).
5. *Blank test*: a box is blank when its ink adds up to less than 0.25 mm^2 or
   spans less than 1.2 mm: a speck of dust is blank, a faint "1" is not.
6. *Model input*: :func:`recognizer.digits.preprocess.to_model_input`, the
   one path from a box's ink to the digit model, used by reading, training
   and retraining alike.

Sizes are in mm and scale with the resolution; the thresholds are common
practice tuned on demo scans, no source.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from recognizer.digits.preprocess import to_model_input
from recognizer.page.boxes import MM_PER_INCH, Box, _positive, as_gray_page
from recognizer.page.ruling import median_of_counts, percentile_of_counts

__all__ = ["Cell", "cut_cell", "cut_cells", "remove_box_lines", "is_blank"]

_MARGIN_MM = 0.8        # margin kept around the inner box in the crop
_SMOOTH_MM = 0.08       # smoothing before the ink test
_PAPER_PERCENTILE = 90  # paper level of a crop
_NOISE_SIGMAS = 4.0     # ink is darker than paper by this many noise deviations ...
_MIN_STEP = 20.0        # ... and by at least this many grey levels
_EDGE_BAND_MM = 0.5     # band along the box edges searched for line remnants
_LINE_COVER = 0.6       # a band row this much ink is a line remnant
_SPECK_MM2 = 0.12       # smaller ink blots are dust
_BLANK_AREA_MM2 = 0.25  # less ink than this is a blank box ...
_BLANK_EXTENT_MM = 1.2  # ... and so is ink spanning less than this


@dataclass
class Cell:
    """One box cut from a page.

    Attributes
    ----------
    crop : numpy.ndarray
        (h + 2m, w + 2m) uint8 grey crop as scanned: the inner box and a
        0.8 mm margin ``m`` with the box lines; paper outside the page.
    ink : numpy.ndarray
        (h, w) float32 ink inside the box after removal of the box lines and
        specks, 1 = ink, 0 = paper, grey levels between.
    blank : bool
        No written mark in the box.
    mnist : numpy.ndarray or None
        (28, 28) float32 in 0..1, white ink on black in MNIST layout; None
        when ``blank``.
    """

    crop: np.ndarray
    ink: np.ndarray
    blank: bool
    mnist: np.ndarray | None


def _px_per_mm(dpi: float) -> float:
    return _positive(dpi, "dpi") / MM_PER_INCH


def cut_cells(image: np.ndarray, boxes: Sequence[Box], *, dpi: float,
              transform: np.ndarray | None = None) -> list[Cell]:
    """Cut every box of ``boxes`` out of ``image``; see :func:`cut_cell`."""
    page = as_gray_page(image, name="image")
    return [cut_cell(page, box, dpi=dpi, transform=transform) for box in boxes]


def cut_cell(image: np.ndarray, box: Box, *, dpi: float, transform: np.ndarray | None = None) -> Cell:
    """Cut one box out of a page and clean it.

    Parameters
    ----------
    image : (M, N) uint8 ndarray
        The (deskewed) page the box refers to, 0 = ink.
    box : Box
        Inner rectangle of the box, pixel edges; may reach off the page.
    dpi : float
        Resolution of ``image``.
    transform : (2, 3) ndarray, optional
        When given, ``image`` is the page before deskewing and ``transform``
        (pixel edges) maps it onto the deskewed page the box refers to: the
        crop alone is turned out of it (:attr:`recognizer.page.boxes.BoxFinding.transform`),
        as it would be cut from the whole page turned.

    Returns
    -------
    Cell
    """
    page = as_gray_page(image, name="image")
    px_per_mm = _px_per_mm(dpi)
    if box.width < 1 or box.height < 1:
        raise ValueError(f"empty box {box}")
    margin = max(1, int(round(_MARGIN_MM * px_per_mm)))
    if transform is None:
        crop = _crop(page, box.x0 - margin, box.y0 - margin, box.x1 + margin, box.y1 + margin)
    else:
        crop = _turned_crop(page, transform, box.x0 - margin, box.y0 - margin, box.x1 + margin, box.y1 + margin)
    darkness, mask = _ink(crop, margin, px_per_mm)
    inner = (slice(margin, margin + box.height), slice(margin, margin + box.width))
    band = max(1, int(round(_EDGE_BAND_MM * px_per_mm)))
    keep = _cleaned(mask[inner], band, _LINE_COVER, px_per_mm)
    ink = _grey_ink(darkness[inner], keep)
    blank = is_blank(ink, dpi=dpi)
    return Cell(crop, ink, blank, None if blank else to_model_input(ink))


def _crop(page: np.ndarray, x0: int, y0: int, x1: int, y1: int) -> np.ndarray:
    """``page[y0:y1, x0:x1]`` with paper (255) where the rectangle leaves the page."""
    out = np.full((y1 - y0, x1 - x0), 255, np.uint8)
    h, w = page.shape
    a0, b0, a1, b1 = max(x0, 0), max(y0, 0), min(x1, w), min(y1, h)
    if a0 < a1 and b0 < b1:
        out[b0 - y0:b1 - y0, a0 - x0:a1 - x0] = page[b0:b1, a0:a1]
    return out


def _turned_crop(page: np.ndarray, transform: np.ndarray, x0: int, y0: int, x1: int, y1: int) -> np.ndarray:
    """``warp(page, transform)[y0:y1, x0:x1]`` (:func:`recognizer.page.ruling.warp`), turning the crop alone."""
    moved = np.array(transform, np.float64)
    moved[:, 2] -= (x0, y0)
    index = moved.copy()  # pixel-edge -> pixel-index convention for OpenCV, as ruling.warp
    index[:, 2] += index[:, :2].sum(axis=1) * 0.5 - 0.5
    return cv2.warpAffine(page, index, (x1 - x0, y1 - y0), flags=cv2.INTER_LINEAR,
                          borderMode=cv2.BORDER_CONSTANT, borderValue=255)


def _ink(crop: np.ndarray, margin: int, px_per_mm: float) -> tuple[np.ndarray, np.ndarray]:
    """Darkness below the local paper level (float32) and the ink mask (bool) of a crop."""
    sigma = _SMOOTH_MM * px_per_mm
    smooth = cv2.GaussianBlur(crop, (0, 0), sigma) if sigma >= 0.5 else crop
    # Percentiles and medians of uint8 pixels from their histogram (the same
    # figures as np.percentile / np.median, without sorting every crop).
    hist = np.bincount(smooth[margin:-margin, margin:-margin].ravel(), minlength=256)
    levels = np.arange(256)
    paper = percentile_of_counts(hist, _PAPER_PERCENTILE)
    bright = np.where(levels >= percentile_of_counts(hist, 40), hist, 0)
    noise = 1.4826 * median_of_counts(np.abs(levels - percentile_of_counts(bright, 50)), bright)
    darkness = np.maximum(paper - smooth.astype(np.float32), 0.0)
    step = max(_NOISE_SIGMAS * noise, _MIN_STEP)
    mask = darkness > step
    n, labels = cv2.connectedComponents(mask.astype(np.uint8), connectivity=8)
    if n > 1:  # keep the blots that are somewhere twice as dark as the step
        dark = np.zeros(n, bool)
        dark[labels[darkness >= 2 * step]] = True
        dark[0] = False
        mask = dark[labels]
    return darkness, mask


def remove_box_lines(mask: np.ndarray, *, band_px: int, coverage: float = _LINE_COVER
                     ) -> np.ndarray:
    """Clear what is left of the box's own lines along the edges of an inner-box ink mask.

    Parameters
    ----------
    mask : (h, w) bool ndarray
        Ink inside the box, True = ink.
    band_px : int
        Width of the band along each edge searched for line remnants.
    coverage : float
        A band row (column) that is ink over this share of its length is a
        line remnant.

    Returns
    -------
    numpy.ndarray
        (h, w) bool.  Remnant rows are cleared except in the columns where a
        stroke goes on inwards (the stroke keeps its connected part); ink
        touching the edge that stays wholly within the band is cleared too.
    """
    out = np.array(mask, bool)
    if out.ndim != 2:
        raise ValueError(f"mask must be 2-D, got shape {out.shape}")
    return _cleaned(out, int(band_px), coverage, None)


def _cleaned(mask: np.ndarray, band: int, coverage: float, px_per_mm: float | None) -> np.ndarray:
    """:func:`remove_box_lines` on ``mask`` (changed in place), and given ``px_per_mm`` the specks
    dropped too, in one labelling of the blots. A box too small for its bands keeps its lines."""
    if band < 1 or min(mask.shape) <= 2 * band + 1:
        return mask if px_per_mm is None else _kept_blots(mask, 0, px_per_mm)
    return _kept_blots(_clear_line_rows(mask, band, coverage), band, px_per_mm)


def _clear_line_rows(mask: np.ndarray, band: int, coverage: float) -> np.ndarray:
    """The line-remnant rows of :func:`remove_box_lines`, cleared in ``mask`` (changed in place)."""
    # each edge in turn brought to the top: np.rot90(mask, turn) for turn 0..3, as plain views
    for view in (mask, mask.T[::-1], mask[::-1, ::-1], mask[::-1].T):
        rows = np.flatnonzero(view[:band].mean(axis=1) >= coverage)
        if rows.size:
            inside = rows.max() + 1
            below = view[inside] | view[min(inside + 1, view.shape[0] - 1)]
            goes_on = below.copy()  # and a column either side (np.roll's wrap-around kept)
            goes_on[1:] |= below[:-1]
            goes_on[0] |= below[-1]
            goes_on[:-1] |= below[1:]
            goes_on[-1] |= below[0]
            view[:inside] &= goes_on
    return mask


def _kept_blots(mask: np.ndarray, band: int, px_per_mm: float | None) -> np.ndarray:
    """``mask`` without the ink blots that touch the edge and lie wholly within ``band`` of the
    edges (none when ``band`` is 0) and, given ``px_per_mm``, the blots under ``_SPECK_MM2`` (dust)."""
    n, labels, stats, _ = cv2.connectedComponentsWithStats(mask.astype(np.uint8), connectivity=8)
    keep = np.ones(n, bool)
    keep[0] = False
    if n > 1 and band > 0:
        reaches_in = np.zeros(n, bool)
        reaches_in[labels[band:-band, band:-band]] = True
        bits = np.zeros(n, bool)
        for edge in (labels[0], labels[-1], labels[:, 0], labels[:, -1]):
            bits[edge] = True
        keep &= ~(bits & ~reaches_in)
    if px_per_mm is not None:
        keep &= stats[:, cv2.CC_STAT_AREA] >= _SPECK_MM2 * px_per_mm ** 2
    return keep[labels]


def _grey_ink(darkness: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Grey ink in 0..1 on the kept blots and their edge pixels, scaled by the stroke darkness."""
    if not keep.any():
        return np.zeros(keep.shape, np.float32)
    values = darkness[keep]
    at = 0.75 * (values.size - 1)  # np.percentile(values, 75), without its overhead (a cell is small)
    low = math.floor(at)
    ends = [low, min(low + 1, values.size - 1)]
    a, b = (float(v) for v in np.partition(values, ends)[ends])
    stroke = a + (b - a) * (at - low)
    near = cv2.dilate(keep.astype(np.uint8), np.ones((3, 3), np.uint8)) > 0
    return np.where(near, np.clip(darkness / max(stroke, 1.0), 0.0, 1.0), 0.0).astype(np.float32)


def is_blank(ink: np.ndarray, *, dpi: float) -> bool:
    """Whether a cleaned box holds no written mark.

    Parameters
    ----------
    ink : (h, w) float ndarray
        Ink in 0..1 (1 = ink), as :attr:`Cell.ink`.
    dpi : float
        Resolution of ``ink``.

    Returns
    -------
    bool
        True when the ink adds up to less than 0.25 mm^2, or the ink darker
        than half spans less than 1.2 mm both ways.
    """
    px_per_mm = _px_per_mm(dpi)
    ink = np.asarray(ink, np.float32)
    if ink.ndim != 2:
        raise ValueError(f"ink must be 2-D, got shape {ink.shape}")
    ys, xs = np.nonzero(ink > 0.5)
    if ys.size == 0 or float(ink.sum()) < _BLANK_AREA_MM2 * px_per_mm ** 2:
        return True
    extent = max(ys.max() - ys.min() + 1, xs.max() - xs.min() + 1) / px_per_mm
    return bool(extent < _BLANK_EXTENT_MM)
