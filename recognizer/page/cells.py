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

from collections.abc import Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from recognizer.digits.preprocess import to_model_input
from recognizer.page.boxes import MM_PER_INCH, Box, _positive, as_gray_page

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


def cut_cells(image: np.ndarray, boxes: Sequence[Box], *, dpi: float) -> list[Cell]:
    """Cut every box of ``boxes`` out of ``image``; see :func:`cut_cell`."""
    page = as_gray_page(image, name="image")
    return [cut_cell(page, box, dpi=dpi) for box in boxes]


def cut_cell(image: np.ndarray, box: Box, *, dpi: float) -> Cell:
    """Cut one box out of a page and clean it.

    Parameters
    ----------
    image : (M, N) uint8 ndarray
        The (deskewed) page the box refers to, 0 = ink.
    box : Box
        Inner rectangle of the box, pixel edges; may reach off the page.
    dpi : float
        Resolution of ``image``.

    Returns
    -------
    Cell
    """
    page = as_gray_page(image, name="image")
    px_per_mm = _px_per_mm(dpi)
    if box.width < 1 or box.height < 1:
        raise ValueError(f"empty box {box}")
    margin = max(1, int(round(_MARGIN_MM * px_per_mm)))
    crop = _crop(page, box.x0 - margin, box.y0 - margin, box.x1 + margin, box.y1 + margin)
    darkness, mask = _ink(crop, margin, px_per_mm)
    inner = (slice(margin, margin + box.height), slice(margin, margin + box.width))
    band = max(1, int(round(_EDGE_BAND_MM * px_per_mm)))
    keep = _drop_specks(remove_box_lines(mask[inner], band_px=band), px_per_mm)
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


def _ink(crop: np.ndarray, margin: int, px_per_mm: float) -> tuple[np.ndarray, np.ndarray]:
    """Darkness below the local paper level (float32) and the ink mask (bool) of a crop."""
    sigma = _SMOOTH_MM * px_per_mm
    smooth = cv2.GaussianBlur(crop, (0, 0), sigma) if sigma >= 0.5 else crop
    inner = smooth[margin:-margin, margin:-margin].astype(np.float32)
    paper = float(np.percentile(inner, _PAPER_PERCENTILE))
    bright = inner[inner >= np.percentile(inner, 40)]
    noise = 1.4826 * float(np.median(np.abs(bright - np.median(bright))))
    darkness = np.maximum(paper - smooth.astype(np.float32), 0.0)
    step = max(_NOISE_SIGMAS * noise, _MIN_STEP)
    mask = darkness > step
    n, labels = cv2.connectedComponents(mask.astype(np.uint8), connectivity=8)
    if n > 1:
        peak = np.zeros(n, np.float32)
        np.maximum.at(peak, labels[mask], darkness[mask])
        mask &= (peak >= 2 * step)[labels]
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
    band = int(band_px)
    if band < 1 or min(out.shape) <= 2 * band + 1:
        return out
    for turn in range(4):  # each edge in turn brought to the top
        view = np.rot90(out, turn)
        rows = np.flatnonzero(view[:band].mean(axis=1) >= coverage)
        if rows.size:
            inside = rows.max() + 1
            goes_on = view[inside] | view[min(inside + 1, view.shape[0] - 1)]
            goes_on = goes_on | np.roll(goes_on, 1) | np.roll(goes_on, -1)
            view[:inside] &= goes_on
    return _drop_edge_bits(out, band)


def _drop_edge_bits(mask: np.ndarray, band: int) -> np.ndarray:
    """Clear ink blots that touch the edge and lie wholly within ``band`` of the edges."""
    n, labels = cv2.connectedComponents(mask.astype(np.uint8), connectivity=8)
    if n <= 1:
        return mask
    reaches_in = np.zeros(n, bool)
    reaches_in[np.unique(labels[band:-band, band:-band])] = True
    edge = np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]])
    bits = np.zeros(n, bool)
    bits[np.unique(edge)] = True
    bits &= ~reaches_in
    bits[0] = False
    mask[bits[labels]] = False
    return mask


def _drop_specks(mask: np.ndarray, px_per_mm: float) -> np.ndarray:
    """Clear ink blots smaller than ``_SPECK_MM2``."""
    n, labels, stats, _ = cv2.connectedComponentsWithStats(mask.astype(np.uint8), connectivity=8)
    big = stats[:, cv2.CC_STAT_AREA] >= _SPECK_MM2 * px_per_mm ** 2
    big[0] = False
    return big[labels]


def _grey_ink(darkness: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Grey ink in 0..1 on the kept blots and their edge pixels, scaled by the stroke darkness."""
    if not keep.any():
        return np.zeros(keep.shape, np.float32)
    stroke = float(np.percentile(darkness[keep], 75))
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
