"""Labelled samples from a batch: the boxes people corrected or confirmed, for retraining.

Each box is cut again from the stored page exactly as the reader cuts it
(:func:`recognizer.page.cells.cut_cell`, then
:func:`recognizer.digits.preprocess.to_model_input`), so the model learns from
what it will see.
"""

from __future__ import annotations

import json
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from recognizer.batch.queries import page_dpi
from recognizer.batch.store import Batch, decode_png
from recognizer.digits.model import NOT_A_DIGIT
from recognizer.digits.retrain import LabelledCells
from recognizer.page.boxes import Box
from recognizer.page.cells import Cell, cut_cell

__all__ = ["SampleRef", "StoredPages", "labelled_samples", "batch_cells", "gather_cells"]


@dataclass(frozen=True)
class SampleRef:
    """Where a labelled sample came from."""

    digit_id: int
    file: str
    page: int
    field: str
    box: int
    state: str
    reviewer: str | None


def labelled_samples(
    batch: Batch,
) -> tuple[list[np.ndarray], list[np.ndarray | None], np.ndarray, list[SampleRef]]:
    """Every box a person corrected or confirmed, as a labelled sample for retraining.

    Returns
    -------
    crops : list of (h, w) uint8 ndarray
        The box crops as read (0 = ink, 255 = paper).
    cells : list of (28, 28) float32 ndarray, 0..1, or None
        The model input of each box, cut again from the stored page image as
        the reader cuts it (:func:`recognizer.page.cells.cut_cell` at the page's
        dpi; white ink on black, MNIST layout). None when the box comes out
        blank on re-cutting, or its re-cut crop is not the size of the stored
        crop (the page and the box no longer agree): nothing to learn from.
    labels : (n,) int64 ndarray
        Class index: 0-9 for a digit, :data:`recognizer.digits.model.NOT_A_DIGIT`
        for a mark a person said is not a digit (value set to empty).
    refs : list of SampleRef
        File, page, field, box, state and the reviewer of the last action.

    Boxes of a field whose value was set as a whole with a different number of
    digits carry no per-box label and are left out, as are empty boxes.
    """
    rows = batch.rows(
        """
        SELECT d.id, d.crop_png, d.value, d.state, d.box, f.name, f.boxes, f.page_id, p.page, p.dpi, fl.path,
               (SELECT a.reviewer FROM actions a WHERE a.field_id = f.id AND a.undone_by IS NULL
                ORDER BY a.id DESC LIMIT 1) AS reviewer
        FROM digits d JOIN fields f ON f.id = d.field_id JOIN pages p ON p.id = f.page_id
        JOIN files fl ON fl.id = p.file_id
        WHERE d.state IN ('corrected', 'confirmed') AND NOT d.blank AND d.value IS NOT NULL
        ORDER BY d.id
        """
    )
    crops = [decode_png(r["crop_png"], batch.path) for r in rows]
    pages = StoredPages(batch)
    cells = []
    for r, crop in zip(rows, crops):
        cell = pages.cell(r["page_id"], json.loads(r["boxes"])[r["box"]])
        cells.append(None if cell is None or cell.blank or cell.crop.shape != crop.shape else cell.mnist)
    labels = np.array([int(r["value"]) if r["value"] else NOT_A_DIGIT for r in rows], dtype=np.int64)
    refs = [SampleRef(r["id"], r["path"], r["page"], r["name"], r["box"], r["state"], r["reviewer"]) for r in rows]
    return crops, cells, labels, refs


class StoredPages:
    """Boxes cut again from a batch's stored page images, exactly as the reader cuts them.

    The one home of re-cutting (retraining samples here, re-reading with
    another model in :mod:`recognizer.review.reread`). The last few page images
    are kept decoded.
    """

    def __init__(self, batch: Batch, *, keep: int = 4) -> None:
        self.batch = batch
        self.keep = keep
        self._pages: OrderedDict[int, tuple[np.ndarray | None, float]] = OrderedDict()

    def cell(self, page_id: int, edges: Sequence[int]) -> Cell | None:
        """The cell of the box ``edges`` (x0, y0, x1, y1) on page ``page_id``; None without a stored image."""
        if page_id in self._pages:
            self._pages.move_to_end(page_id)
        else:
            self._pages[page_id] = (self.batch.page_image(page_id), page_dpi(self.batch, page_id))
            while len(self._pages) > self.keep:
                self._pages.popitem(last=False)
        image, dpi = self._pages[page_id]
        return None if image is None else cut_cell(image, Box(*edges), dpi=dpi)


def batch_cells(batch: Batch) -> LabelledCells:
    """The corrected and confirmed boxes of one batch, cut again as the reader cuts them.

    Parameters
    ----------
    batch : Batch
        Open (read-only is enough).

    Returns
    -------
    LabelledCells
        Boxes whose cell comes out blank on re-cutting are left out.
    """
    _crops, cells, labels, refs = labelled_samples(batch)
    keep = [i for i, cell in enumerate(cells) if cell is not None]
    return LabelledCells(
        cells=np.stack([cells[i] for i in keep]).astype(np.float32) if keep else np.zeros((0, 28, 28), np.float32),
        labels=labels[keep].astype(np.int64),
        refs=[refs[i] for i in keep],
        sources=[str(batch.path)] * len(keep),
    )


def gather_cells(batches: Sequence[Batch]) -> LabelledCells:
    """:func:`batch_cells` of several batches, joined."""
    parts = [batch_cells(b) for b in batches]
    return LabelledCells(
        cells=np.concatenate([p.cells for p in parts]) if parts else np.zeros((0, 28, 28), np.float32),
        labels=np.concatenate([p.labels for p in parts]) if parts else np.zeros(0, np.int64),
        refs=[r for p in parts for r in p.refs],
        sources=[s for p in parts for s in p.sources],
    )
