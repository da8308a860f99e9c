"""How a batch file keeps its images: page images at a display resolution, box crops exactly.

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
page by about 11 grey levels inside the boxes (edges softened), and the
shipped model reads all 1,324 written boxes of the benchmark's 24 pages the
same from it as from the full page.

Box crops
---------
Every box's crop (the box and its 0.8 mm margin as the reader cut it, see
:mod:`recognizer.page.cells`) stays at full resolution and exact: the digit
model's input is computed from the crop alone, so cutting the cell again
from the stored crop gives exactly the reader's model input
(:class:`recognizer.batch.samples.StoredPages`). A crop is stored as the
smaller of PNG (run-length deflate: smaller and faster on crops than the
default) and lossless WebP (both exact). On the benchmark's scans, per crop:
PNG as before 2.48 KB, run-length PNG 2.26 KB, lossless WebP 2.06 KB (about
3 ms to encode; WebP's slower methods save 7 % more at three times the time).

Decoding (:func:`decode_image`) accepts PNG and WebP; the declared size is
checked from the header before decoding (:func:`recognizer.batch.checks.check_image`).
"""

from __future__ import annotations

import cv2
import numpy as np

from recognizer.batch import checks

__all__ = ["DISPLAY_DPI", "PAGE_QUALITY", "encode_png", "encode_crop", "encode_page", "decode_image", "full_size",
           "is_lossless"]

#: Resolution the page images are kept at (a page read at or below it is kept at its own).
DISPLAY_DPI = 150.0
#: WebP quality of the stored page images.
PAGE_QUALITY = 80
_PNG_LEVEL = 3


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
