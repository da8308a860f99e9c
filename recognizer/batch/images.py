"""How a batch file keeps its images: page images at a display resolution, box crops lean and exact
where the reader's cell depends on them.

Page images
-----------
The page image is what the window shows: the whole page, the field strips
around a field. Review needs it legible, not exact, so it is kept at
:data:`DISPLAY_DPI` (150 dpi) in grey as lossy WebP (quality
:data:`PAGE_QUALITY`), with its *scale* (display pixels per pixel of the
page as read) and the page's full size beside it in ``page_images``. A
bitonal page (only black and white pixels: a fax, a G4 scan) is kept whole,
as a 1-bit PNG, which is lossless and small. Box coordinates always refer to
the page as read, at full resolution; :func:`full_size` scales a stored
image back to that grid, so boxes drawn on it land where they were.

Measured with ``bench/bench_batch_size.py`` (A4 at 300 dpi, the reading
benchmark's scan noise): a page was 1.85 MB as full-resolution PNG; at 150 dpi
WebP quality 80 it is about 37 KB (JPEG of the same quality 95 KB); WebP
quality 50-80 changes the size little (27-35 KB) and the 150 dpi grey levels
by about half a level on average. Scaled back, the page differs from the full
page by about 11 grey levels inside the boxes (edges softened; 12.6 from the
lean crops), and the shipped model reads all 1,324 written boxes of the
benchmark's 24 pages the same from it as from the full page.

Box crops
---------
Every box's crop (the box and its 0.8 mm margin as the reader cut it, see
:mod:`recognizer.page.cells`) stays at full resolution, and *lean*
(:func:`lean_crop`): the digit model's input is computed from the crop
alone, and cutting the cell again from the stored crop gives the reader's
cell bit for bit (blank or not, ink, model input;
:class:`recognizer.batch.samples.StoredPages`). Near the ink (within
0.5 mm) every pixel stays as scanned; farther away the paper is made plain
(the crop's paper level), black made black and the grey between kept in
steps of 32 levels, so the crop still looks as scanned. A lean crop is used
only after the cell cut from it was found equal to the cell cut from the
crop as read; otherwise the crop is kept as read. The crops of one field
are kept side by side in one image, the field's *crop sheet*
(:func:`make_sheet`, :func:`sheet_layout`; table ``crop_sheets``), stored as
the smaller of PNG (run-length deflate) and lossless WebP; the crop of a box
is cut back out of it exactly (:func:`sheet_crops`).

Measured with ``bench/bench_batch_size.py --all`` (20 grey and 4 bitonal A4
pages at 300 dpi, 60 boxes a page), bytes a page, all pages:

======================================  ==========  =======  ======  =======
batch file                              page image  crops    rest    total
======================================  ==========  =======  ======  =======
format 5: each crop exact, own image    40.0 KB     135.6    32.7    208.3
exact crops on sheets                   40.0        126.0    17.6    183.6
lean crops on sheets (format 6)         40.0        74.2     17.4    131.6
======================================  ==========  =======  ======  =======

(The rest: tables, probabilities, indexes, free space.) Exact crops cannot
come near the target of 150 KB: the scan's noise on the box lines and the
strokes' edges is most of their bytes. Lean crops give all 1,440 boxes the
cell of the exact crop to the bit; they are 2.2 grey levels from the scan on
average (4.7 in the crop farthest off). Tried and left: each lean crop its
own image (about 80 KB of crops, but rows of 1.3 KB fill the 2 KB SQLite
pages badly: 151 KB a page); plain parts in black and paper only (4 KB less,
but light box lines went white: 7 grey levels off on average); keeping
0.4 mm round the ink instead of 0.5 (2.6 KB less, closer to the cutter's
reach); one strip a field with the margins of touching boxes shared (exact
crops 10 % smaller than one image each, but lean crops of two boxes differ
where they overlap). A lean crop takes about 2 ms (two or three cuts of the
cell), done before the batch's lock is taken. The probabilities (11 float32,
44 bytes a written box) are 2.4 KB a page and stay exact.

Decoding (:func:`decode_image`) accepts PNG and WebP; the declared size is
checked from the header before decoding (:func:`recognizer.batch.checks.check_image`).
"""

from __future__ import annotations

import os
import threading
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import cv2
import numpy as np

from recognizer.batch import checks
from recognizer.batch.opening import BatchFileError
from recognizer.page.boxes import MM_PER_INCH, Box
from recognizer.page.cells import Cell, cut_cell
from recognizer.reading.page import DigitRead, PageRead

__all__ = ["DISPLAY_DPI", "PAGE_QUALITY", "encode_png", "encode_crop", "encode_page", "decode_image", "full_size",
           "is_lossless", "crop_margin", "lean_crop", "same_cell", "make_sheet", "sheet_layout", "sheet_size",
           "sheet_crops", "FieldCrops", "StoredImages", "stored_images", "field_crops", "PageImage", "SheetCache",
           "decode_png"]

#: Resolution the page images are kept at (a page read at or below it is kept at its own).
DISPLAY_DPI = 150.0
#: WebP quality of the stored page images.
PAGE_QUALITY = 80
_PNG_LEVEL = 3
#: Around the ink of a box, pixels within this distance (mm) stay as scanned in a lean crop: more
#: than the cutter's smoothing and the ink's grey edge reach (:mod:`recognizer.page.cells`).
_KEEP_MM = 0.5
#: A pixel this many grey levels darker than the paper counts as ink when a lean crop is made.
_INK_STEP = 20
_PAPER_PERCENTILE = 90
#: Away from the ink, a lean crop keeps grey levels in steps of this many (1.6 levels from the scan
#: on average on the benchmark's pages), and within :data:`_PLAIN_SNAP` of the paper (of black) it
#: is the paper (black).
_PLAIN_STEP = 32
_PLAIN_SNAP = 24


def encode_png(image: np.ndarray) -> bytes:
    """Lossless PNG bytes of an (M, N) uint8 image."""
    ok, buf = cv2.imencode(".png", np.ascontiguousarray(image, dtype=np.uint8),
                           [cv2.IMWRITE_PNG_COMPRESSION, _PNG_LEVEL])
    if not ok:
        raise ValueError(f"cannot encode an image of shape {np.shape(image)} as PNG")
    return buf.tobytes()


def _encode(image: np.ndarray, suffix: str, params: list[int]) -> bytes:
    ok, buf = cv2.imencode(suffix, np.ascontiguousarray(image, dtype=np.uint8), params)
    if not ok:
        raise ValueError(f"cannot encode an image of shape {np.shape(image)} as {suffix}")
    return buf.tobytes()


def encode_crop(image: np.ndarray) -> bytes:
    """A box crop, exactly: the smaller of PNG and lossless WebP."""
    png = _encode(image, ".png", [cv2.IMWRITE_PNG_COMPRESSION, 9, cv2.IMWRITE_PNG_STRATEGY,
                                  cv2.IMWRITE_PNG_STRATEGY_RLE])
    if min(np.shape(image)) < 1 or max(np.shape(image)) > 16383:
        return png
    webp = _encode(image, ".webp", [cv2.IMWRITE_WEBP_QUALITY, 101])  # above 100: lossless
    return webp if len(webp) < len(png) else png


def crop_margin(crop_shape: tuple[int, ...], box: Box) -> int | None:
    """The margin the cutter left round ``box`` in a crop of ``crop_shape``, or None when the crop is
    not the box with one whole margin on every side (a crop of another cut)."""
    mx, my = crop_shape[1] - box.width, crop_shape[0] - box.height
    if mx != my or mx < 2 or mx % 2:
        return None
    return mx // 2


def same_cell(a: Cell, b: Cell) -> bool:
    """Two cells are the same for everything cut from them: blank alike, ink and model input equal
    to the bit."""
    if a.blank != b.blank or a.crop.shape != b.crop.shape or not np.array_equal(a.ink, b.ink):
        return False
    return (a.mnist is None) == (b.mnist is None) and (a.mnist is None or np.array_equal(a.mnist, b.mnist))


def lean_crop(crop: np.ndarray, box: Box, dpi: float) -> np.ndarray:
    """A box crop made plain where that cannot change the box's cell, for storing.

    ``crop`` is the box ``box`` (its width and height) with the cutter's margin
    round it, as :func:`recognizer.page.cells.cut_cell` cut it at ``dpi``.
    Away from the ink in the box (farther than :data:`_KEEP_MM`), the paper is
    set to the crop's paper level, black to black, and the grey levels
    between (the box lines' edges) kept in steps of :data:`_PLAIN_STEP`, so
    the crop looks as it did; near the ink every pixel stays as scanned. If
    the cell would change so, the box's inside is kept whole and only the
    outer margin made plain. A plain crop is used only when the cell cut from
    it is the cell cut from ``crop``, bit for bit (:func:`same_cell`: blank
    alike, the same ink and model input); otherwise ``crop`` is returned as
    it is.
    """
    crop = np.ascontiguousarray(crop, dtype=np.uint8)
    margin = crop_margin(crop.shape, box) if crop.ndim == 2 and box.width > 0 and box.height > 0 else None
    if margin is None or dpi is None or not dpi > 0:
        return crop
    inner = Box(margin, margin, margin + box.width, margin + box.height)
    cell = cut_cell(crop, inner, dpi=dpi)
    if cell.crop.shape != crop.shape:
        return crop
    h, w = crop.shape
    inside = np.zeros((h, w), bool)
    inside[inner.y0:inner.y1, inner.x0:inner.x1] = True
    paper = float(np.percentile(crop[inside], _PAPER_PERCENTILE))
    grey = crop.astype(np.float32)
    plain = np.clip(np.round(grey / _PLAIN_STEP) * _PLAIN_STEP, 0, 255)
    plain = np.where(grey >= paper - _PLAIN_SNAP, round(paper), np.where(grey <= _PLAIN_SNAP, 0, plain))
    plain = plain.astype(np.uint8)
    reach = max(1, int(np.ceil(_KEEP_MM * float(dpi) / MM_PER_INCH)))
    kernel = np.ones((2 * reach + 1, 2 * reach + 1), np.uint8)
    near_ink = cv2.dilate(((grey < paper - _INK_STEP) & inside).astype(np.uint8), kernel) > 0
    for keep in (near_ink, near_ink | (cv2.dilate(inside.astype(np.uint8), kernel) > 0)):
        lean = np.where(keep, crop, plain)
        if same_cell(cut_cell(lean, inner, dpi=dpi), cell):
            return lean
    return crop


def make_sheet(crops: Sequence[np.ndarray], boxes: Sequence[Box]) -> tuple[np.ndarray, int] | None:
    """The crops of one field's boxes side by side in one image (see :func:`sheet_layout`), and their
    margin; None when they are not all the box with one and the same margin round it."""
    if not crops or len(crops) != len(boxes):
        return None
    margins = {crop_margin(np.shape(c), b) if np.ndim(c) == 2 else None for c, b in zip(crops, boxes)}
    if len(margins) != 1 or None in margins:
        return None
    margin = margins.pop()
    width, height = sheet_size(boxes, margin)
    sheet = np.full((height, width), 255, np.uint8)
    for crop, (x, y, w, h) in zip(crops, sheet_layout(boxes, margin)):
        sheet[y:y + h, x:x + w] = crop
    return sheet, margin


def sheet_layout(boxes: Sequence[Box], margin: int) -> list[tuple[int, int, int, int]]:
    """Where each box's crop lies in its field's sheet: (x, y, width, height), the crops left to right
    in the order of the boxes, each the box and ``margin`` round it, all at the top."""
    out, x = [], 0
    for b in boxes:
        w, h = b.width + 2 * margin, b.height + 2 * margin
        out.append((x, 0, w, h))
        x += w
    return out


def sheet_size(boxes: Sequence[Box], margin: int) -> tuple[int, int]:
    """(width, height) of the sheet of ``boxes``: the crops' widths added up, the tallest crop."""
    layout = sheet_layout(boxes, margin)
    return sum(w for _x, _y, w, _h in layout), max((h for _x, _y, _w, h in layout), default=0)


def sheet_crops(sheet: np.ndarray, boxes: Sequence[Box], margin: int) -> list[np.ndarray]:
    """The crops of a field's boxes cut back out of its sheet (copies)."""
    return [sheet[y:y + h, x:x + w].copy() for x, y, w, h in sheet_layout(boxes, margin)]


@dataclass(frozen=True)
class FieldCrops:
    """The crops of one field as stored: one sheet and its margin (each digit's own bytes empty), or
    each digit's own bytes (no sheet)."""

    sheet: bytes | None
    margin: int | None
    own: list[bytes]


@dataclass(frozen=True)
class StoredImages:
    """A page's image and box crops as the batch keeps them (:mod:`recognizer.batch.images`)."""

    page: tuple[bytes, float] | None
    fields: list[FieldCrops]


def stored_images(page: PageRead) -> StoredImages:
    """Encode a page's image and its boxes' lean crops (the slow part of storing a page)."""
    return StoredImages(None if page.image is None else encode_page(page.image, page.dpi),
                         [field_crops(f.digits, f.boxes, page.dpi) for f in page.fields])


def field_crops(digits: Sequence[DigitRead], boxes: tuple[Box, ...], dpi: float) -> FieldCrops:
    """A field's crops made lean and put on one sheet when they are the reader's cut (box i of the
    field is digit i), else each kept on its own."""
    crops = [d.crop for d in digits]
    if [d.box for d in digits] == list(range(len(boxes))):
        made = make_sheet([lean_crop(c, b, dpi) for c, b in zip(crops, boxes)], boxes)
        if made is not None:
            sheet, margin = made
            return FieldCrops(encode_crop(sheet), margin, [b""] * len(digits))
    return FieldCrops(None, None, [encode_crop(lean_crop(d.crop, boxes[d.box], dpi) if 0 <= d.box < len(boxes)
                                                else d.crop) for d in digits])


@dataclass(frozen=True)
class PageImage:
    """A page image as the batch keeps it: ``image`` at ``scale`` stored pixels per pixel of the page
    as read, whose full size is ``width`` x ``height`` (the grid of the box coordinates); ``lossless``:
    the image is exact (a page of an older batch at scale 1, or a bitonal page)."""

    image: np.ndarray
    scale: float
    width: int
    height: int
    lossless: bool

    @property
    def exact(self) -> bool:
        """The stored image is the page as read, pixel for pixel (boxes can be cut from it)."""
        return self.lossless and self.image.shape == (self.height, self.width)


class SheetCache:
    """The crops of the crop sheets read last (keyed by field and the sheet's bytes, so a sheet written
    anew is never mistaken for the old one); shared by the threads of one open batch."""

    def __init__(self, keep: int = 16) -> None:  # (a page has a dozen fields)
        self.keep = keep
        self._kept: OrderedDict[tuple[int, bytes], list[np.ndarray]] = OrderedDict()
        self._lock = threading.Lock()

    def crops(self, field_id: int, margin: Any, data: Any, boxes_text: Any) -> list[np.ndarray]:
        """The crops of field ``field_id`` from its stored sheet ``data``, margin and boxes (JSON text),
        the sheet's size checked from its header against its boxes before it is decoded
        (:func:`recognizer.batch.checks.check_sheet`); ValueError for anything else. The crops are
        kept: copy one before changing it."""
        key = (field_id, data)
        with self._lock:
            if key in self._kept:
                self._kept.move_to_end(key)
                return self._kept[key]
        try:
            boxes = [Box(*b) for b in checks.load_json(boxes_text, f"the boxes of field {field_id}")]
        except TypeError:
            boxes = []
        if not boxes or any(b.width < 1 or b.height < 1 for b in boxes):
            raise ValueError(f"the boxes of field {field_id} are not what Inkcount stores there")
        checks.check_sheet(data, sheet_size(boxes, margin))
        crops = sheet_crops(decode_image(data), boxes, margin)
        with self._lock:
            self._kept[key] = crops
            while len(self._kept) > self.keep:
                self._kept.popitem(last=False)
        return crops


def decode_png(data: bytes, path: str | os.PathLike | None = None) -> np.ndarray:
    """(M, N) uint8 image back from stored image bytes (PNG or WebP, :mod:`recognizer.batch.images`).

    The declared size is checked before it is decoded
    (:func:`recognizer.batch.checks.check_image`). A damaged or oversized image
    raises ValueError, or :class:`BatchFileError` naming ``path`` when given.
    """
    try:
        image = decode_image(data)
    except ValueError as exc:
        if path is None:
            raise
        raise BatchFileError(path, str(exc)) from None
    return image


def _bitonal(image: np.ndarray) -> bool:
    return bool(np.all((image == 0) | (image == 255)))


def encode_page(image: np.ndarray, dpi: float, *, display_dpi: float = DISPLAY_DPI,
                quality: int = PAGE_QUALITY) -> tuple[bytes, float]:
    """A page image as stored, and its scale (stored pixels per full-resolution pixel).

    A bitonal page is kept whole as a 1-bit PNG (scale 1); any other is brought
    down to ``display_dpi`` (never up) and kept as lossy WebP.
    """
    image = np.ascontiguousarray(image, dtype=np.uint8)
    if _bitonal(image):
        return _encode(image, ".png", [cv2.IMWRITE_PNG_BILEVEL, 1, cv2.IMWRITE_PNG_COMPRESSION, 9]), 1.0
    scale = min(1.0, float(display_dpi) / float(dpi)) if dpi and dpi > 0 else 1.0
    if scale < 1.0:
        h, w = image.shape
        size = (max(1, round(w * scale)), max(1, round(h * scale)))
        image = cv2.resize(image, size, interpolation=cv2.INTER_AREA)
    if max(image.shape) > 16383:  # beyond WebP's limit: lossless PNG
        return encode_png(image), scale
    return _encode(image, ".webp", [cv2.IMWRITE_WEBP_QUALITY, int(quality)]), scale


def is_lossless(data: bytes) -> bool:
    """Whether stored image bytes are a lossless format (PNG, lossless WebP)."""
    return data[:8] == b"\x89PNG\r\n\x1a\n" or (data[:4] == b"RIFF" and data[12:16] == b"VP8L")


def decode_image(data: bytes) -> np.ndarray:
    """(M, N) uint8 image from stored PNG or WebP bytes; ValueError for damaged or oversized data."""
    checks.check_image(data)
    flag = cv2.IMREAD_UNCHANGED if data[:4] != b"RIFF" else cv2.IMREAD_GRAYSCALE
    image = cv2.imdecode(np.frombuffer(data, np.uint8), flag)
    if image is None or image.ndim != 2 or image.dtype != np.uint8:
        raise ValueError("damaged image data in the batch file")
    return image


def full_size(image: np.ndarray, width: int, height: int) -> np.ndarray:
    """A stored page image brought back to the page's full-resolution grid (``width`` x ``height``)."""
    if image.shape == (height, width):
        return image
    return cv2.resize(image, (width, height), interpolation=cv2.INTER_LINEAR)
