"""What one scan file may ask of the program, and plain words for a file that is damaged.

A batch holds files from many hands: some are cut short by a broken copy,
some are damaged on disk, a few may be made to harm (a small file that claims
a page of a billion pixels, a PDF that claims a million pages). Every limit
here is checked from the file's own header *before* anything is decoded, so a
hostile file costs milliseconds and a few megabytes, and becomes one problem
line naming the file; the batch goes on (:mod:`recognizer.scans.files`).

The limits, with the reason for each (all in one place):

:data:`DEFAULT_MAX_PIXELS`
    40 million pixels per page. An A4 or US Letter page scanned at 600 dpi is
    about 35 million pixels and passes; an A3 page at 600 dpi (70 million)
    does not (scan it at 400 dpi, or raise ``inkcount read --max-pixels``).
    Reading a page takes about 18 bytes per pixel at its peak (the decoded
    image, its grey and colour copies, the reader's working images; measured
    on a 600 dpi colour card: 35 million pixels, 690 MB), so the limit keeps
    one page under about 800 MB.
:data:`MAX_BYTES_PER_PIXEL`
    6 bytes per pixel, times the pixel limit (240 MB at the default): the
    largest decoded page in bytes, from the bit depth and the number of
    channels the file declares. A 16-bit colour A4 page at 600 dpi (48 bits a
    pixel, 210 MB) passes; a page of the same size with 16-bit colour and
    transparency, or with many extra channels, is refused.
:data:`MAX_PAGES_PER_FILE`
    2,000 pages per file (a full box of paper scanned double-sided in one
    file is 1,000). A file declaring more is refused as a whole, with one
    line, before any page is looked at.
:data:`MAX_PAGE_PROBLEMS_PER_FILE`
    10 damaged pages in one file: after the tenth, the rest of the file is
    left with one line saying how many pages were not read, instead of one
    line per page.

Pillow's own guards stay on: ``ImageFile.LOAD_TRUNCATED_IMAGES`` is never set
(a file cut short is an error, not a page padded with grey: checked by
:func:`check_pillow_settings`), and its limit on the text blocks of a PNG
(``PngImagePlugin.MAX_TEXT_CHUNK``, 1 MB) refuses a file carrying a text block
that would expand to gigabytes.
"""

from __future__ import annotations

import os
import struct
from pathlib import Path
from typing import BinaryIO

from PIL import Image, ImageFile

__all__ = [
    "DEFAULT_MAX_PIXELS",
    "MAX_BYTES_PER_PIXEL",
    "MAX_PAGES_PER_FILE",
    "MAX_PAGE_PROBLEMS_PER_FILE",
    "check_pillow_settings",
    "too_large_words",
    "too_many_bytes_words",
    "too_many_pages_words",
    "damage_words",
    "program_error_words",
    "declared_bytes_per_pixel",
    "tiff_page_count",
    "image_format_by_start",
    "pdf_has_end",
]

#: Largest page decoded, in pixels (see the module docstring for the reason).
DEFAULT_MAX_PIXELS = 40_000_000

#: Largest decoded page in bytes, as a multiple of the pixel limit.
MAX_BYTES_PER_PIXEL = 6

#: Largest number of pages one file may declare.
MAX_PAGES_PER_FILE = 2_000

#: Damaged pages of one file reported one by one before the rest of the file is left.
MAX_PAGE_PROBLEMS_PER_FILE = 10

# Bytes per pixel Pillow holds in memory for each mode it decodes into.
_MODE_BYTES = {"1": 1, "L": 1, "P": 1, "I;16": 2, "I;16B": 2, "I;16L": 2, "I;16N": 2}

# PNG colour types -> channels (PNG specification, IHDR).
_PNG_CHANNELS = {0: 1, 2: 3, 3: 1, 4: 2, 6: 4}


def check_pillow_settings() -> None:
    """Undo a setting that would let a damaged file pass as a page.

    ``ImageFile.LOAD_TRUNCATED_IMAGES`` makes Pillow pad a file that ends too
    soon with grey instead of saying so; another library loaded in the same
    process may have set it. Inkcount wants the error.
    """
    if ImageFile.LOAD_TRUNCATED_IMAGES:
        ImageFile.LOAD_TRUNCATED_IMAGES = False


def too_large_words(pixels: int | None, limit: int) -> str:
    """Plain words for a page over the pixel limit."""
    size = f" ({pixels / 1e6:,.0f} million pixels)" if pixels else ""
    return (
        f"the image is too large to read safely{size}; the limit is "
        f"{limit / 1e6:,.0f} million pixels (an A4 page at 600 dpi is 35 million)"
    )


def too_many_bytes_words(size: int, limit: int) -> str:
    """Plain words for a page whose decoded data would be over the byte limit."""
    return (
        f"the image is too large to read safely ({size / 1e6:,.0f} MB once decoded, with its "
        f"bit depth and colour channels); the limit is {limit / 1e6:,.0f} MB"
    )


def too_many_pages_words(pages: int, *, exact: bool = True) -> str:
    """Plain words for a file declaring more pages than :data:`MAX_PAGES_PER_FILE`.

    ``exact=False`` when counting stopped at the limit (a TIFF's pages are
    counted one by one, a PDF states its number).
    """
    said = f"{pages:,}" if exact else f"more than {MAX_PAGES_PER_FILE:,}"
    return (
        f"the file says it has {said} pages; Inkcount reads at most {MAX_PAGES_PER_FILE:,} pages "
        "from one file (the file is probably damaged; if not, split it)"
    )


def damage_words(exc: BaseException) -> str:
    """Plain words for any error met while opening, counting or decoding a file.

    The technical detail is kept at the end, in brackets, for whoever looks
    into it; the words before it are for the person reading the batch.
    """
    text = str(exc).strip()
    low = text.lower()
    if isinstance(exc, MemoryError):
        return "the page is too large for the memory this computer has free"
    if isinstance(exc, Image.DecompressionBombError):
        return "the image is too large to read safely (it would expand to far more pixels than a scan has)"
    if "truncated" in low or "premature end" in low or isinstance(exc, EOFError) or (
        isinstance(exc, struct.error) and "unpack requires" in low
    ):
        return "the file is damaged: it ends before the image does (truncated, perhaps cut off while copying)"
    if "decompressed data too large" in low or "too much memory used in text chunks" in low:
        return "the file is damaged or unsafe: it carries a block of text far too large for a scan"
    if isinstance(exc, KeyError):
        return f"the file is damaged or uses an image coding Inkcount cannot read [unknown code {text}]"
    detail = f"{type(exc).__name__}: {text}" if text else type(exc).__name__
    if len(detail) > 120:
        detail = detail[:117] + "..."
    return f"the file is damaged: its image data cannot be decoded [{detail}]"


def program_error_words(exc: BaseException) -> str:
    """Plain words for an error of the program itself on a page that decoded (a bug to report)."""
    if isinstance(exc, MemoryError):
        return damage_words(exc)
    detail = f"{type(exc).__name__}: {exc}"
    if len(detail) > 120:
        detail = detail[:117] + "..."
    return f"Inkcount failed on this page (an error in the program; please report it) [{detail}]"


def declared_bytes_per_pixel(img: Image.Image, head: bytes) -> float:
    """Bytes one decoded pixel takes: the larger of what the file declares and what Pillow holds.

    ``head`` is the start of the file (at least 26 bytes for a PNG). The file
    declares its bit depth and channels in a PNG's IHDR and a TIFF's
    BitsPerSample and SamplesPerPixel tags; other formats are 8 bits a channel.
    """
    held = _MODE_BYTES.get(img.mode, 4)
    declared = 0.0
    fmt = img.format
    if fmt == "PNG" and len(head) >= 26:
        depth, colour = head[24], head[25]
        declared = depth * _PNG_CHANNELS.get(colour, 4) / 8
    elif fmt == "TIFF":
        tags = getattr(img, "tag_v2", {})
        bits = tags.get(258, 8)
        samples = int(tags.get(277, 1) or 1)
        per_sample = bits if isinstance(bits, (tuple, list)) else (bits,) * samples
        per_sample = list(per_sample) + [per_sample[-1] if per_sample else 8] * max(0, samples - len(per_sample))
        declared = sum(int(b) for b in per_sample[: max(samples, 1)]) / 8
    else:
        declared = len(img.getbands())
    return max(float(held), declared)


def tiff_page_count(fh: BinaryIO, size: int, *, limit: int = MAX_PAGES_PER_FILE) -> int:
    """Pages of a TIFF, by walking its chain of page headers (IFDs) without decoding any.

    Stops after ``limit + 1`` pages (the caller refuses the file), at a loop
    in the chain (Pillow stops there too) and where the chain leaves the file:
    a page the file points to but does not hold is counted, so that reading
    it names it as damaged instead of the file ending early without a word.
    Raises ``ValueError`` when not even the first page can be found.
    """
    fh.seek(0)
    head = fh.read(16)
    order = {b"II": "<", b"MM": ">"}.get(head[:2])
    if order is None or len(head) < 8:
        raise ValueError("not a TIFF header")
    magic = struct.unpack(order + "H", head[2:4])[0]
    if magic == 42:
        offset, count_fmt, entry, next_fmt = struct.unpack(order + "I", head[4:8])[0], "H", 12, "I"
    elif magic == 43 and len(head) >= 16:  # BigTIFF
        offset, count_fmt, entry, next_fmt = struct.unpack(order + "Q", head[8:16])[0], "Q", 20, "Q"
    else:
        raise ValueError("not a TIFF header")
    count_size, next_size = struct.calcsize(count_fmt), struct.calcsize(next_fmt)
    seen: set[int] = set()
    missing = 0
    while offset and offset not in seen and len(seen) <= limit:
        if offset + count_size > size:
            missing = 1
            break
        fh.seek(offset)
        entries = struct.unpack(order + count_fmt, fh.read(count_size))[0]
        seen.add(offset)
        after = offset + count_size + entries * entry
        if after + next_size > size:
            break
        fh.seek(after)
        offset = struct.unpack(order + next_fmt, fh.read(next_size))[0]
    if not seen:
        raise ValueError("the first page of the TIFF cannot be found")
    return len(seen) + missing


_MAGIC = ((b"\x89PNG", "PNG"), (b"\xff\xd8", "JPEG"), (b"II*\0", "TIFF"), (b"MM\0*", "TIFF"),
          (b"II+\0", "TIFF"), (b"MM\0+", "TIFF"), (b"BM", "BMP"))


def image_format_by_start(path: Path) -> str | None:
    """The image format a file's first bytes announce (so a damaged PNG is called a damaged PNG), or None."""
    with open(path, "rb") as fh:
        head = fh.read(4)
    return next((name for magic, name in _MAGIC if head.startswith(magic)), None)


def pdf_has_end(path: Path, tail: int = 8192) -> bool:
    """Whether a PDF ends with its end-of-file mark.

    The PDF standard asks for ``%%EOF`` within the last 1,024 bytes; readers
    look further, and so do we. pdfium repairs a PDF that was cut short and
    draws what is left, so a page could be read half blank with no word
    said: without its end mark, the file is refused as damaged.
    """
    with open(path, "rb") as fh:
        fh.seek(max(0, os.fstat(fh.fileno()).st_size - tail))
        return b"%%EOF" in fh.read()
