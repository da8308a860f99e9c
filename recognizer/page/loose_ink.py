"""Handwritten numbers outside the digit boxes found: a sign that boxes were lost.

A form printed in a dropout colour and scanned in black and white (1 bit, as a
fax or a document scanner's default makes it) keeps only fragments of its
boxes, or none; the box finder then finds a few boxes or none, and the numbers
written in the lost boxes stand on the page as loose handwriting.  A page
read so would lose fields without a word.  :func:`loose_numbers` finds that
handwriting: runs of digit-sized marks side by side on a line, outside every
box found.

Steps (at the page's own resolution):

1. Ink: pixels darker than mid-grey; the found fields' boxes, grown by 1 mm,
   are blanked out, so what is written in them does not count.
2. Marks: connected pieces of ink 3.5-12 mm tall and 0.4-10 mm wide (a
   handwritten digit in a 5-8 mm box; printed labels are mostly lower, page
   frames and lines far longer).  Pieces are joined when one lies above the
   other (a 5 whose top stroke is apart).
3. Runs: marks whose middles lie on one line (within half the taller's height)
   and with gaps under 8 mm, left to right; a run of at least
   :data:`MIN_RUN` marks counts.
4. Digits: each mark of a run goes through ``classify`` (the reader passes
   its digit model: a callable from the marks' ink crops to "is a digit with
   at least 0.9 confidence"); a run counts when at least
   :data:`DIGIT_SHARE` of its marks are digits.  Printed words are mostly read
   as "not a digit" or unsure; printed numbers are short.

The sizes and shares are common practice tuned on our generated forms, no
source.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from recognizer.page.boxes import MM_PER_INCH, FieldBoxes

__all__ = ["LooseRun", "loose_numbers", "MIN_RUN", "DIGIT_SHARE"]

MIN_RUN = 3
DIGIT_SHARE = 0.7
_HEIGHT_MM = (3.5, 12.0)
_WIDTH_MM = (0.4, 10.0)
_GAP_MM = 8.0
_FIELD_GROW_MM = 1.0


@dataclass(frozen=True)
class LooseRun:
    """A run of handwritten-looking marks outside the boxes: their boxes ``(x0, y0, x1, y1)`` in pixels,
    left to right, and how many of them read as digits."""

    marks: tuple[tuple[int, int, int, int], ...]
    digits: int


def _marks(ink: np.ndarray, dpi: float) -> list[tuple[int, int, int, int]]:
    px = dpi / MM_PER_INCH
    n, _, stats, _ = cv2.connectedComponentsWithStats(ink.astype(np.uint8), connectivity=8)
    pieces = []
    for x, y, w, h, area in stats[1:]:
        if h <= _HEIGHT_MM[1] * px and w <= _WIDTH_MM[1] * px and area >= 0.5 * px * px:
            pieces.append([int(x), int(y), int(x + w), int(y + h)])
    pieces.sort()
    joined: list[list[int]] = []
    for p in pieces:  # join a piece lying above or below another (overlapping columns, close rows)
        for q in joined:
            overlap = min(p[2], q[2]) - max(p[0], q[0])
            gap = max(p[1], q[1]) - min(p[3], q[3])
            if overlap > 0.5 * min(p[2] - p[0], q[2] - q[0]) and gap < 1.5 * px:
                q[:] = [min(p[0], q[0]), min(p[1], q[1]), max(p[2], q[2]), max(p[3], q[3])]
                break
        else:
            joined.append(p)
    lo_h, hi_h = _HEIGHT_MM[0] * px, _HEIGHT_MM[1] * px
    lo_w, hi_w = _WIDTH_MM[0] * px, _WIDTH_MM[1] * px
    return [tuple(m) for m in joined if lo_h <= m[3] - m[1] <= hi_h and lo_w <= m[2] - m[0] <= hi_w]


def _runs(marks: list[tuple[int, int, int, int]], dpi: float) -> list[list[tuple[int, int, int, int]]]:
    gap = _GAP_MM * dpi / MM_PER_INCH
    runs: list[list[tuple[int, int, int, int]]] = []
    for m in sorted(marks):
        mid, height = (m[1] + m[3]) / 2, m[3] - m[1]
        for run in runs:
            last = run[-1]
            same_line = abs((last[1] + last[3]) / 2 - mid) <= 0.5 * max(height, last[3] - last[1])
            if same_line and -0.5 * (m[2] - m[0]) <= m[0] - last[2] <= gap:
                run.append(m)
                break
        else:
            runs.append([m])
    return [r for r in runs if len(r) >= MIN_RUN]


def loose_numbers(image: np.ndarray, *, dpi: float, fields: Sequence[FieldBoxes],
                  classify: Callable[[list[np.ndarray]], np.ndarray]) -> list[LooseRun]:
    """Runs of handwritten digits outside the boxes of ``fields`` on ``image``.

    Parameters
    ----------
    image : (M, N) uint8 ndarray
        The page as the boxes were found on it, 0 = ink.
    dpi : float
    fields : sequence of FieldBoxes
        The fields found (their boxes, in ``image``'s pixels).
    classify : callable
        Given the marks' ink crops (uint8, ink = 255), a boolean array: which
        are digits read with good confidence.

    Returns
    -------
    list of LooseRun
        The runs where at least :data:`DIGIT_SHARE` of the marks are digits.
    """
    ink = image < 128
    grow = int(round(_FIELD_GROW_MM * dpi / MM_PER_INCH))
    h, w = ink.shape
    for f in fields:
        for b in f.boxes:
            ink[max(0, b.y0 - grow):min(h, b.y1 + grow), max(0, b.x0 - grow):min(w, b.x1 + grow)] = False
    out = []
    for run in _runs(_marks(ink, dpi), dpi):
        crops = [np.where(ink[y0:y1, x0:x1], 255, 0).astype(np.uint8) for x0, y0, x1, y1 in run]
        digits = int(np.count_nonzero(classify(crops)))
        if digits >= DIGIT_SHARE * len(run):
            out.append(LooseRun(tuple(run), digits))
    return out
