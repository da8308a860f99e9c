"""Labelled samples from a batch: the boxes people corrected or confirmed, for retraining.

Each box is cut again exactly as the reader cut it
(:func:`recognizer.page.cells.cut_cell`, then
:func:`recognizer.digits.preprocess.to_model_input`), from its stored crop or
the original scan (:class:`StoredPages`), so the model learns from what it
will see.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from recognizer.batch.images import crop_margin
from recognizer.batch.queries import PageSource, page_digits, page_dpi, page_source
from recognizer.batch.store import Batch, PageImage
from recognizer.digits.model import NOT_A_DIGIT
from recognizer.digits.retrain import LabelledCells
from recognizer.forms.registration import Registrar, match_templates
from recognizer.forms.template import Template
from recognizer.page.boxes import Box, find_fields, warp_like
from recognizer.page.cells import Cell, cut_cell
from recognizer.page.dropout import split_dropout
from recognizer.scans.files import DEFAULT_PDF_DPI, Page, ScanProblem, load_page, printable_name

__all__ = [
    "SampleRef", "StoredPages", "labelled_samples", "batch_cells", "gather_cells", "find_original", "reader_page",
]


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
        The model input of each box, cut again as the reader cuts it
        (:class:`StoredPages`: :func:`recognizer.page.cells.cut_cell` at the
        page's dpi; white ink on black, MNIST layout). None when the box comes
        out blank on re-cutting, cannot be cut again (no usable crop, original
        scan or exact page), or its re-cut crop is not the stored crop (the
        page and the box no longer agree): nothing to learn from.
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
        SELECT d.id, d.value, d.state, d.box, f.name, f.boxes, f.page_id, p.page, p.dpi, fl.path,
               (SELECT a.reviewer FROM actions a WHERE a.field_id = f.id AND a.undone_by IS NULL
                ORDER BY a.id DESC LIMIT 1) AS reviewer
        FROM digits d JOIN fields f ON f.id = d.field_id JOIN pages p ON p.id = f.page_id
        JOIN files fl ON fl.id = p.file_id
        WHERE d.state IN ('corrected', 'confirmed') AND NOT d.blank AND d.value IS NOT NULL
        ORDER BY d.id
        """
    )
    crops = [batch.digit_crop(r["id"]) for r in rows]
    pages = StoredPages(batch)
    cells = []
    for r, crop in zip(rows, crops):
        cell = pages.cell(r["page_id"], json.loads(r["boxes"])[r["box"]])
        cells.append(None if cell is None or cell.blank or not _same_crop(cell.crop, crop) else cell.mnist)
    labels = np.array([int(r["value"]) if r["value"] else NOT_A_DIGIT for r in rows], dtype=np.int64)
    refs = [SampleRef(r["id"], r["path"], r["page"], r["name"], r["box"], r["state"], r["reviewer"]) for r in rows]
    return crops, cells, labels, refs


def _same_crop(cut: np.ndarray, stored: np.ndarray) -> bool:
    """A crop cut again is the stored one: same size, and (cut from a scan or page decoded anew) the
    same pixels but for a grey level or two on a few (common practice, no source)."""
    if cut.shape != stored.shape:
        return False
    return bool(np.mean(np.abs(cut.astype(np.int16) - stored)) <= 2.0)


@dataclass
class _Page:
    """What :class:`StoredPages` keeps of one page: its dpi, its boxes' digits, and the full page
    once it was needed (``False``: not looked for yet; None: not to be had)."""

    dpi: float | None
    digits: dict[tuple[int, int, int, int], int]
    full: np.ndarray | None | bool = False


class StoredPages:
    """Boxes cut again exactly as the reader cut them, at full resolution.

    The one home of re-cutting (retraining samples here, learning during the
    batch, re-reading with another model in :mod:`recognizer.review.reread`).
    A box is cut, in this order of preference, from

    1. its stored crop (:meth:`Batch.digit_crop`): the box and the margin the
       reader cut around it, kept exactly (older batches) or lean, plain only
       where that leaves the cell as it was, which was checked when it was
       stored (:func:`recognizer.batch.images.lean_crop`). The cell depends on
       the crop alone, so this is the reader's model input, bit for bit,
       without the scan; used when the crop has the margin the cutter uses
       today;
    2. the original scan, when it is still where it was read (its absolute
       location, else the path as given, else that path beside the batch) and
       its size and sha256 are the ones recorded: the page is loaded and
       deskewed (or registered to its template) again as the reader does and
       must come out the size of the stored page;
    3. the stored page image, when it is the page exactly (a batch older than
       format 5, or a bitonal page).

    Otherwise the box has no cell (None), and :attr:`missing` names the scan
    file that was needed and why it could not be used. The last few pages are
    kept.
    """

    def __init__(self, batch: Batch, *, keep: int = 4, originals: bool = True) -> None:
        self.batch = batch
        self.keep = keep
        self.originals = originals
        #: Scan files needed but not found or changed: path as given -> the reason.
        self.missing: dict[str, str] = {}
        #: Scan files found and used somewhere other than their recorded location: sha256 -> (path as
        #: given, where the file is now). (Writing the new place into the batch is the caller's choice.)
        self.moved: dict[str, tuple[str, Path]] = {}
        #: How many cells came from each source: "crop", "original", "page".
        self.sources: dict[str, int] = {"crop": 0, "original": 0, "page": 0}
        self._pages: OrderedDict[int, _Page] = OrderedDict()

    def cell(self, page_id: int, edges: Sequence[int]) -> Cell | None:
        """The cell of the box ``edges`` (x0, y0, x1, y1) on page ``page_id``; None when it cannot be cut."""
        page = self._page(page_id)
        if page.dpi is None:
            return None
        box = Box(*(int(v) for v in edges))
        digit_id = page.digits.get((box.x0, box.y0, box.x1, box.y1))
        if digit_id is not None:
            cell = _from_crop(self.batch.digit_crop(digit_id), box, page.dpi)
            if cell is not None:
                self.sources["crop"] += 1
                return cell
        if page.full is False:
            page.full = self._full_page(page_id)
        if page.full is None:
            return None
        return cut_cell(page.full, box, dpi=page.dpi)

    def _page(self, page_id: int) -> _Page:
        if page_id in self._pages:
            self._pages.move_to_end(page_id)
        else:
            self._pages[page_id] = _Page(page_dpi(self.batch, page_id), page_digits(self.batch, page_id))
            while len(self._pages) > self.keep:
                self._pages.popitem(last=False)
        return self._pages[page_id]

    def _full_page(self, page_id: int) -> np.ndarray | None:
        """The page as the reader cut it, from the original scan or an exact stored image; None without."""
        stored = self.batch.stored_page(page_id)
        if stored is None:
            return None
        if self.originals:
            image = self._original(page_id, stored)
            if image is not None:
                self.sources["original"] += 1
                return image
        if stored.exact:
            self.sources["page"] += 1
            return stored.image
        return None

    def _original(self, page_id: int, stored: PageImage) -> np.ndarray | None:
        source = page_source(self.batch, page_id)
        if source.sha256 is None or source.page is None or source.dpi is None:
            return None
        path, reason = find_original(source, self.batch.path)
        if path is None:
            self.missing[source.path] = reason
            return None
        settings = self.batch.settings
        page = load_page(path, source.page, pdf_dpi=settings.pdf_dpi or DEFAULT_PDF_DPI)
        templates = self.batch.templates()
        if isinstance(page, ScanProblem) or (source.template and source.template not in templates):
            self.missing[source.path] = "it no longer reads as it did"
            return None
        image = reader_page(page, templates.get(source.template) if source.template else None)
        if image is None or image.shape != (stored.height, stored.width):
            self.missing[source.path] = "it no longer reads as it did"
            return None
        now = os.path.abspath(path)
        if source.location != printable_name(now):
            self.moved[source.sha256] = (source.path, Path(now))
        return image


def find_original(source: PageSource, batch_path: str | os.PathLike) -> tuple[Path | None, str]:
    """The scan file a page came from, if it is still there unchanged (size and sha256 as recorded);
    else None and why not ("not found", "changed since it was read")."""
    candidates = [Path(p) for p in (source.location, source.path) if p]
    if source.path and not Path(source.path).is_absolute():
        candidates.append(Path(batch_path).parent / source.path)
    changed = False
    for path in dict.fromkeys(candidates):
        try:
            if not path.is_file():
                continue
            if source.size is not None and path.stat().st_size != source.size:
                changed = True
                continue
            h = hashlib.sha256()
            with open(path, "rb") as fh:
                for chunk in iter(lambda: fh.read(1 << 20), b""):
                    h.update(chunk)
        except OSError:
            continue
        if h.hexdigest() == source.sha256:
            return path, ""
        changed = True
    return None, "changed since it was read" if changed else "not found"


def reader_page(page: Page, template: Template | None) -> np.ndarray | None:
    """The full-resolution page the reader cut the boxes from (:class:`recognizer.reading.page.PageReader`):
    registered to ``template``, or deskewed as the boxes were found; for a form printed in a
    dropout colour, the pen's ink deskewed alike. None when the page no longer registers."""
    if template is not None:
        match = match_templates(page.image, dpi=page.dpi, registrars=[Registrar(template)],
                                dpi_known=page.dpi_origin in ("file", "render"))
        return match.finding.image if match and match.finding is not None else None
    layers = split_dropout(page.colour) if page.colour is not None else None
    if layers is not None:
        return warp_like(find_fields(layers.printed, dpi=page.dpi), layers.ink)
    return find_fields(page.image, dpi=page.dpi).image


def _from_crop(crop: np.ndarray, box: Box, dpi: float) -> Cell | None:
    """The cell of ``box`` cut from its stored crop, when the crop has the margin the cutter uses
    (then the cell is the reader's exactly); None otherwise."""
    m = crop_margin(crop.shape, box)
    if m is None:
        return None
    cell = cut_cell(crop, Box(m, m, m + box.width, m + box.height), dpi=dpi)
    return cell if cell.crop.shape == crop.shape else None


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
