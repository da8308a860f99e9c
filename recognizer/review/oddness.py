"""Which crops of a group read as the same digit look least like the rest: the sort wall's order.

A group of crops read as, say, 7 is mostly 7s; a misread (a 1 with a long
serif, a 2 without its foot) is a crop unlike the group's typical shape. The
score here is a plain, explainable one:

1. Every crop as the model saw it: the box cut again from its stored crop
   exactly as the reader cuts it (:func:`crop_cell`; the stored crop is the
   page region round the box, so :func:`recognizer.page.cells.cut_cell` on it
   gives the reader's own 28x28 model input, pixel for pixel). The MNIST
   layout has already taken out size and position.
2. Each input blurred a little (Gaussian, sigma 1 pixel), so that a stroke a
   pixel thicker or a pixel to the side is not "odd".
3. The group's *typical shape*: the mean of the blurred inputs, computed
   again without the fifth of the crops farthest from the first mean (so a
   few misreads do not pull the typical shape towards themselves).
4. A crop's *oddness*: its Euclidean distance to the typical shape divided by
   the median distance of the group (at least a small floor, so that a group
   of near-identical crops does not magnify rounding). 1 is an ordinary member; a crop at
   :data:`ODD_RATIO` times the usual distance or more, in a group of at least
   :data:`MIN_GROUP` crops, is marked *odd*.

Why pixels, not the model's hidden features: the wall needs no model for it
(a batch whose model file is missing still sorts), the typical shape it shows
is the very mean the score measures against, and the model-input layout
already removes what pixel distances are worst at (size, position). The
distance ratio and the trimming are choices of ours, checked on made-up
groups (``tests/recognizer/review/test_oddness.py``), not taken from a source.

No Qt here; the window only shows the result.
"""

from __future__ import annotations

from collections.abc import MutableMapping, Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from recognizer.batch.queries import FieldView, load_field, page_dpi
from recognizer.batch.store import Batch
from recognizer.page.boxes import Box
from recognizer.page.cells import cut_cell

__all__ = ["ODD_RATIO", "MIN_GROUP", "Oddness", "RankedCrop", "GroupRanking", "oddness", "crop_cell", "rank_group"]

#: A crop this many times the group's median distance from the typical shape, or more, is marked odd.
ODD_RATIO = 2.5
#: Fewest crops in a group for "odd" to mean anything (with fewer there is no typical shape to speak of).
MIN_GROUP = 4
#: Share of the crops farthest from the first mean left out of the typical shape.
TRIM = 0.2
_BLUR_SIGMA = 1.0
#: The least "usual distance" (blurred model-input pixels, L2): below it crops differ by rounding only.
_MIN_USUAL = 0.5


@dataclass(frozen=True)
class Oddness:
    """The scores of one group of model inputs.

    Attributes
    ----------
    scores : ndarray, float64, (n,)
        Distance to the typical shape over the group's median distance (0 for a group of one).
    odd : ndarray, bool, (n,)
        ``scores >= ODD_RATIO`` in a group of at least :data:`MIN_GROUP`.
    typical : ndarray, float32, (28, 28)
        The typical shape, 0..1, white ink on black (the model-input layout), unblurred.
    order : ndarray, int, (n,)
        Indices from the oddest to the most ordinary (ties in input order).
    """

    scores: np.ndarray
    odd: np.ndarray
    typical: np.ndarray
    order: np.ndarray


def _blurred(cells: np.ndarray) -> np.ndarray:
    return np.stack([cv2.GaussianBlur(c, (0, 0), _BLUR_SIGMA) for c in cells]).reshape(len(cells), -1)


def oddness(cells: np.ndarray) -> Oddness:
    """Score every crop of one group by how unlike the group's typical shape it is.

    Parameters
    ----------
    cells : (n, 28, 28) float ndarray
        The group's model inputs (0..1, white ink on black, MNIST layout).
    """
    cells = np.asarray(cells, np.float32)
    n = len(cells)
    if n == 0:
        z = np.zeros(0)
        return Oddness(z, z.astype(bool), np.zeros((28, 28), np.float32), z.astype(int))
    flat = _blurred(cells)
    keep = np.ones(n, bool)
    if n >= MIN_GROUP:
        first = np.linalg.norm(flat - flat.mean(axis=0), axis=1)
        drop = int(np.floor(TRIM * n))
        if drop:
            keep[np.argsort(-first, kind="stable")[:drop]] = False
    centre = flat[keep].mean(axis=0)
    distance = np.linalg.norm(flat - centre, axis=1).astype(np.float64)
    distance[distance < 1e-4] = 0.0  # the same crop twice: rounding, not a difference
    scores = distance / max(float(np.median(distance)), _MIN_USUAL) if n > 1 else np.zeros(1)
    odd = (scores >= ODD_RATIO) if n >= MIN_GROUP else np.zeros(n, bool)
    order = np.argsort(-scores, kind="stable")
    typical = cells[keep].mean(axis=0).astype(np.float32)
    return Oddness(scores, odd, typical, order)


def crop_cell(crop: np.ndarray, edges: Sequence[int], dpi: float) -> np.ndarray | None:
    """The model input of a box from its stored crop, as the reader cut it (None: blank).

    ``crop`` is the stored crop of the box (the box and an equal margin round
    it, :attr:`recognizer.page.cells.Cell.crop`), ``edges`` the box's edges on
    its page, ``dpi`` the page's resolution.
    """
    w, h = int(edges[2]) - int(edges[0]), int(edges[3]) - int(edges[1])
    margin = (crop.shape[1] - w) // 2
    if w < 1 or h < 1 or margin < 0 or crop.shape != (h + 2 * margin, w + 2 * margin):
        return None  # not a crop of this box: left unscored rather than guessed
    cell = cut_cell(crop, Box(margin, margin, margin + w, margin + h), dpi=dpi)
    return cell.mnist


@dataclass(frozen=True)
class RankedCrop:
    """One crop of a group, where it is and how odd it is.

    ``rank`` counts the odd crops from 1 (the oddest), 0 for the others;
    ``score`` is None for a crop that could not be scored (shown last).
    """

    digit_id: int
    page_id: int
    field_id: int
    box: int
    score: float | None
    odd: bool
    rank: int


@dataclass(frozen=True)
class GroupRanking:
    """A group's crops from the least like its typical shape to the most, and that typical shape."""

    crops: tuple[RankedCrop, ...]
    typical: np.ndarray | None

    @property
    def odd_count(self) -> int:
        return sum(1 for c in self.crops if c.odd)


def rank_group(batch: Batch, digits: Sequence[tuple[int, int, int]], *,
               cells: MutableMapping[int, np.ndarray | None] | None = None) -> GroupRanking:
    """Order the crops of one group, the least like the group's typical shape first.

    Parameters
    ----------
    batch : Batch
    digits : sequence of (digit id, field id, box index)
        The group's crops (e.g. from :class:`recognizer.review.ReviewQueue` items).
    cells : mutable mapping, optional
        Model inputs already cut, by digit id; the ones cut here are added.
        A box's crop never changes, so a caller may keep it for the batch's
        life (cutting is about 1.5 ms a crop; the wall is built again often).

    Returns
    -------
    GroupRanking
        Crops that cannot be scored (a blank cut, a crop of another shape)
        come last, in the order given; ``typical`` is None when none could be scored.
    """
    views: dict[int, FieldView] = {}
    dpis: dict[int, float | None] = {}
    known = {} if cells is None else cells
    places, inputs, scored = [], [], []
    for digit_id, field_id, box in digits:
        view = views.get(field_id)
        if view is None:
            view = views[field_id] = load_field(batch, field_id)
        if view.page_id not in dpis:
            dpis[view.page_id] = page_dpi(batch, view.page_id)
        places.append((digit_id, view.page_id, field_id, box))
        if digit_id not in known:
            dpi = dpis[view.page_id]
            known[digit_id] = None
            if dpi and 0 <= box < len(view.boxes):
                known[digit_id] = crop_cell(batch.digit_crop(digit_id), view.boxes[box], dpi)
        if known[digit_id] is not None:
            inputs.append(known[digit_id])
            scored.append(len(places) - 1)
    result = oddness(np.stack(inputs)) if inputs else None
    crops: list[RankedCrop] = []
    if result is not None:
        rank = 0
        for j in result.order:
            odd = bool(result.odd[j])
            rank += odd
            crops.append(RankedCrop(*places[scored[j]], score=float(result.scores[j]), odd=odd,
                                    rank=rank if odd else 0))
    done = set(scored)
    crops += [RankedCrop(*place, score=None, odd=False, rank=0) for i, place in enumerate(places) if i not in done]
    return GroupRanking(tuple(crops), None if result is None else result.typical)
