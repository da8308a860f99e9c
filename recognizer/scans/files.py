"""Scan loading: files and folders -> pages, one at a time.

A *scan* is a file on disk (PNG, JPEG, BMP, TIFF with one or more pages, or a
PDF with one or more pages). A *page* is one image of one sheet, handed on as
an (M, N) uint8 grayscale array with 0 = black ink and 255 = white paper, and
with the resolution it was scanned at.

Pages are streamed: :func:`iter_pages` opens each file only when it gets to it
and yields one page at a time, so a 500-page batch is never held in memory.

Everything that can go wrong with a file (empty, truncated, not an image, an
encrypted PDF, an image too large to decode safely) comes back as a
:class:`ScanProblem` in the same stream, naming the file, the page and the
reason in plain words; the pages after it are still read.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np
from PIL import Image, ImageOps, UnidentifiedImageError

from recognizer.scans.photo import PhotoRefused, flatten_photo, is_colour, undo_negative

__all__ = [
    "IMAGE_SUFFIXES",
    "PDF_SUFFIXES",
    "SCAN_SUFFIXES",
    "DEFAULT_MAX_PIXELS",
    "Page",
    "ScanProblem",
    "list_scans",
    "count_pages",
    "load_page",
    "iter_pages",
    "estimate_dpi",
]

IMAGE_SUFFIXES = frozenset({".png", ".jpg", ".jpeg", ".bmp", ".tif", ".tiff"})
PDF_SUFFIXES = frozenset({".pdf"})
SCAN_SUFFIXES = IMAGE_SUFFIXES | PDF_SUFFIXES

#: Largest page, in pixels, that is decoded. An A3 sheet at 600 dpi is about
#: 70 million pixels; anything far beyond is a damaged file or a
#: decompression bomb (a small file that expands to gigabytes).
DEFAULT_MAX_PIXELS = 120_000_000

#: Resolution PDF pages are rendered at unless asked otherwise.
DEFAULT_PDF_DPI = 300

# Paper sizes (long side, inches) tried when a file carries no usable dpi:
# A4, US Letter, A5 (common practice, no source: the sizes forms are printed on).
_PAPER_LONG_SIDE_IN = (297 / 25.4, 11.0, 210 / 25.4)
_COMMON_DPI = (150, 200, 240, 300, 400, 600)


@dataclass
class Page:
    """One page of one scan.

    Attributes
    ----------
    source : Path
        The file the page came from.
    page : int
        Page number within the file, from 1.
    image : (M, N) uint8 ndarray
        Grayscale page, 0 = black ink, 255 = white paper.
    dpi : float
        Scan resolution in dots per inch.
    dpi_origin : str
        Where ``dpi`` came from: ``"file"`` (the file's own metadata),
        ``"render"`` (a PDF page drawn at that resolution), ``"page size"``
        (guessed from the pixel size, the file said nothing usable) or
        ``"photo"`` (a phone photo flattened to the paper size it matches,
        :mod:`recognizer.scans.photo`).
    warnings : list of str
        Why the page may read badly because of how it was captured (a blurred
        or small photo); the reader adds them to the page's warnings.
    colour : (M, N, 3) uint8 ndarray or None
        The page in colour (RGB) when it carries colour (a form printed in a
        dropout colour, see :mod:`recognizer.page.dropout`); None for grey
        and black-and-white pages.
    """

    source: Path
    page: int
    image: np.ndarray
    dpi: float
    dpi_origin: str
    warnings: list[str] = field(default_factory=list)
    colour: np.ndarray | None = field(default=None, repr=False)


@dataclass(frozen=True)
class ScanProblem:
    """A file or page that could not be read, and why (in plain words)."""

    source: Path
    page: int | None
    reason: str

    def __bool__(self) -> bool:  # a problem is never a usable page
        return False

    def __str__(self) -> str:
        where = f"page {self.page}" if self.page is not None else "whole file"
        return f"{self.source}: {where}: {self.reason}"


# --------------------------------------------------------------------------
# Finding files


def list_scans(
    paths: Iterable[str | os.PathLike], *, recursive: bool = False
) -> tuple[list[Path], list[ScanProblem]]:
    """Expand files and folders into a sorted list of scan files.

    Folders contribute the scan files directly inside them (and in all
    sub-folders with ``recursive=True``), sorted by path with numbers in names
    compared as numbers (``card2`` before ``card10``). Files named explicitly
    are kept in the order given, whatever their suffix, so that a mislabelled
    file still gets a clear message from :func:`iter_pages`. A path that does
    not exist is reported as a problem.
    """
    files: list[Path] = []
    problems: list[ScanProblem] = []
    seen: set[Path] = set()

    def add(path: Path) -> None:
        key = path.resolve()
        if key not in seen:
            seen.add(key)
            files.append(path)

    for raw in paths:
        path = Path(raw)
        if path.is_dir():
            pattern = "**/*" if recursive else "*"
            found = [
                p
                for p in path.glob(pattern)
                if p.is_file()
                and p.suffix.lower() in SCAN_SUFFIXES
                and not any(part.startswith(".") for part in p.relative_to(path).parts)
            ]
            if not found:
                problems.append(ScanProblem(path, None, "folder holds no scan files"))
            for p in sorted(found, key=_natural_key):
                add(p)
        elif path.is_file():
            add(path)
        else:
            problems.append(ScanProblem(path, None, "no such file or folder"))
    return files, problems


def _natural_key(path: Path) -> list:
    import re

    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", str(path))]


# --------------------------------------------------------------------------
# Reading pages


class _Refused(Exception):
    """A file or page that cannot be read; carries the plain-words reason."""


def count_pages(
    path: str | os.PathLike, *, max_pixels: int = DEFAULT_MAX_PIXELS
) -> int | ScanProblem:
    """Number of pages in a scan file, or the problem that stops it being read."""
    path = Path(path)
    try:
        kind = _kind(path)
        if kind == "pdf":
            with _open_pdf(path) as pdf:
                return len(pdf)
        with _open_image(path, max_pixels) as img:
            return int(getattr(img, "n_frames", 1))
    except _Refused as exc:
        return ScanProblem(path, None, str(exc))


def load_page(
    path: str | os.PathLike,
    page: int,
    *,
    pdf_dpi: float = DEFAULT_PDF_DPI,
    max_pixels: int = DEFAULT_MAX_PIXELS,
) -> Page | ScanProblem:
    """Load one page (numbered from 1) of a scan file."""
    path = Path(path)
    try:
        if _kind(path) == "pdf":
            with _open_pdf(path) as pdf:
                if not 1 <= page <= len(pdf):
                    raise _Refused(f"the PDF has no page {page}")
                return _render_pdf_page(path, pdf, page, pdf_dpi, max_pixels)
        with _open_image(path, max_pixels) as img:
            return _image_page(path, img, page, max_pixels)
    except _Refused as exc:
        return ScanProblem(path, page, str(exc))


def iter_pages(
    files: Iterable[str | os.PathLike],
    *,
    pdf_dpi: float = DEFAULT_PDF_DPI,
    max_pixels: int = DEFAULT_MAX_PIXELS,
) -> Iterator[Page | ScanProblem]:
    """Yield every page of every file in turn, or the problem met instead.

    Each file is opened once; its pages are decoded one at a time as the
    caller asks for them. A problem with one page (a truncated frame of a
    TIFF, say) does not stop the pages after it; a problem with a whole file
    (empty, encrypted, not an image) yields one :class:`ScanProblem` with
    ``page=None`` and moves on to the next file.
    """
    for raw in files:
        path = Path(raw)
        try:
            if _kind(path) == "pdf":
                with _open_pdf(path) as pdf:
                    for number in range(1, len(pdf) + 1):
                        try:
                            yield _render_pdf_page(path, pdf, number, pdf_dpi, max_pixels)
                        except _Refused as exc:
                            yield ScanProblem(path, number, str(exc))
            else:
                with _open_image(path, max_pixels) as img:
                    for number in range(1, int(getattr(img, "n_frames", 1)) + 1):
                        try:
                            yield _image_page(path, img, number, max_pixels)
                        except _Refused as exc:
                            yield ScanProblem(path, number, str(exc))
        except _Refused as exc:
            yield ScanProblem(path, None, str(exc))


# --------------------------------------------------------------------------
# Images (Pillow)


def _kind(path: Path) -> str:
    """'pdf' or 'image', decided by the file's first bytes (not its name)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
    except FileNotFoundError:
        raise _Refused("file not found") from None
    except IsADirectoryError:
        raise _Refused("this is a folder, not a file") from None
    except OSError as exc:
        raise _Refused(f"cannot open the file ({exc.strerror or exc})") from None
    if not head:
        raise _Refused("the file is empty (0 bytes)")
    return "pdf" if head.startswith(b"%PDF") else "image"


class _open_image:
    """Context manager opening an image lazily, with the pixel limit checked
    from the header before anything is decoded."""

    def __init__(self, path: Path, max_pixels: int):
        self.path = path
        self.max_pixels = max_pixels
        self.img: Image.Image | None = None

    def __enter__(self) -> Image.Image:
        try:
            with warnings.catch_warnings():
                # Our own limit is checked below, with a clearer message.
                warnings.simplefilter("ignore", Image.DecompressionBombWarning)
                self.img = Image.open(self.path)
        except UnidentifiedImageError:
            raise _Refused(
                "not an image or PDF that Inkcount can read "
                "(PNG, JPEG, BMP, TIFF and PDF are supported)"
            ) from None
        except Image.DecompressionBombError:
            raise _Refused(_too_large_message(None, self.max_pixels)) from None
        except OSError as exc:
            raise _Refused(f"the image file is damaged ({exc})") from None
        if self.img.format not in {"PNG", "JPEG", "MPO", "BMP", "DIB", "TIFF"}:
            fmt = self.img.format
            self.img.close()
            raise _Refused(
                f"{fmt} images are not supported (PNG, JPEG, BMP, TIFF and PDF are)"
            )
        return self.img

    def __exit__(self, *exc) -> None:
        if self.img is not None:
            self.img.close()


def _too_large_message(pixels: int | None, limit: int) -> str:
    size = f" ({pixels / 1e6:.0f} million pixels)" if pixels else ""
    return (
        f"the image is too large to read safely{size}; the limit is "
        f"{limit / 1e6:.0f} million pixels (about A3 at 600 dpi)"
    )


def _image_page(path: Path, img: Image.Image, number: int, max_pixels: int) -> Page:
    try:
        img.seek(number - 1)
    except EOFError:
        raise _Refused(f"the file has no page {number}") from None
    except OSError as exc:
        raise _Refused(f"the page is damaged ({exc})") from None
    width, height = img.size
    if width * height > max_pixels:
        raise _Refused(_too_large_message(width * height, max_pixels))
    if width < 16 or height < 16:
        raise _Refused(f"the page is only {width}x{height} pixels, too small to be a scan")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", Image.DecompressionBombWarning)
            img.load()
            gray = _to_gray(ImageOps.exif_transpose(img) if number == 1 else img)
    except (OSError, ValueError, SyntaxError) as exc:
        reason = str(exc) or type(exc).__name__
        if "truncated" in reason.lower():
            raise _Refused("the file is truncated (cut off before the end of the image)") from None
        raise _Refused(f"the image data is damaged ({reason})") from None
    colour = _colour(img if number > 1 else ImageOps.exif_transpose(img), gray.shape)
    dpi = _file_dpi(img)
    if dpi is None:
        return _captured(Page(path, number, gray, estimate_dpi(gray.shape), "page size", colour=colour))
    return _captured(Page(path, number, gray, dpi, "file", colour=colour))


def _colour(img: Image.Image, shape: tuple[int, int]) -> np.ndarray | None:
    """The page as RGB when it carries colour, else None."""
    if img.mode in {"1", "L", "LA", "I", "I;16", "I;16B", "I;16L", "I;16N", "F"}:
        return None
    rgb = np.asarray(img.convert("RGB"))
    return rgb if rgb.shape[:2] == shape and is_colour(rgb) else None


def _captured(page: Page) -> Page:
    """The page as a flatbed would give it: a negative turned positive, a phone photo flattened."""
    trusted = page.dpi if page.dpi_origin == "file" and page.dpi >= 100 else None
    try:
        flat = flatten_photo(page.image, dpi=trusted)
    except PhotoRefused as exc:
        raise _Refused(str(exc)) from None
    if flat is None:  # a scan: perhaps a negative one (a photo's dark desk is not a negative)
        positive = undo_negative(page.image)
        if positive is not None:
            page.image = positive
            page.colour = None if page.colour is None else 255 - page.colour
        return page
    colour = None
    if page.colour is not None:
        h, w = flat.image.shape
        colour = cv2.warpPerspective(page.colour, flat.homography, (w, h), flags=cv2.INTER_LINEAR,
                                     borderMode=cv2.BORDER_REPLICATE)
    return Page(page.source, page.page, flat.image, flat.dpi, "photo", flat.warnings, colour)


def _to_gray(img: Image.Image) -> np.ndarray:
    """Any Pillow mode -> (M, N) uint8 gray, 0 = black, 255 = white."""
    mode = img.mode
    if mode in {"I;16", "I;16B", "I;16L", "I;16N", "I"}:
        arr = np.asarray(img, dtype=np.float64)
        top = 65535.0 if mode != "I" or arr.max() > 255 else 255.0
        return np.clip(arr * (255.0 / top) + 0.5, 0, 255).astype(np.uint8)
    if mode == "F":
        arr = np.asarray(img, dtype=np.float64)
        top = 1.0 if arr.max() <= 1.0 else 255.0
        return np.clip(arr * (255.0 / top) + 0.5, 0, 255).astype(np.uint8)
    if mode in {"RGBA", "LA", "PA"} or (mode == "P" and "transparency" in img.info):
        rgba = img.convert("RGBA")
        white = Image.new("RGBA", rgba.size, (255, 255, 255, 255))
        img = Image.alpha_composite(white, rgba)
    if img.mode != "L":
        img = img.convert("L")  # 1-bit, palette, RGB, CMYK, YCbCr ...
    return np.array(img, dtype=np.uint8)


def _file_dpi(img: Image.Image) -> float | None:
    """The resolution stored in the file, or None when absent or implausible."""
    dpi = img.info.get("dpi")
    if dpi is None and img.info.get("jfif_unit") == 1:
        dpi = img.info.get("jfif_density")
    if dpi is None and img.info.get("jfif_unit") == 2:  # dots per cm
        dens = img.info.get("jfif_density")
        dpi = tuple(d * 2.54 for d in dens) if dens else None
    if not dpi:
        return None
    try:
        x = float(dpi[0] if isinstance(dpi, tuple) else dpi)
    except (TypeError, ValueError, IndexError):
        return None
    if not 50 <= x <= 2400:
        return None
    # 72 and 96 dpi are what many programs write when they know nothing; trust
    # them only if the page they imply is a plausible paper size.
    long_side_in = max(img.size) / x
    if x in (72.0, 96.0) and long_side_in > 14.5:
        return None
    return round(x, 2)


def estimate_dpi(shape: tuple[int, int]) -> float:
    """Guess the resolution of a page from its pixel size.

    Assumes the sheet is A4, US Letter or A5 (whichever gives a resolution
    closest to a usual scanner setting) and snaps to that setting when it is
    within 6 %.

    >>> estimate_dpi((3508, 2480))
    300.0
    """
    long_px = float(max(shape))
    best: tuple[float, float] | None = None
    for side in _PAPER_LONG_SIDE_IN:
        raw = long_px / side
        common = min(_COMMON_DPI, key=lambda d: abs(d - raw))
        miss = abs(common - raw) / common
        if best is None or miss < best[0]:
            best = (miss, common if miss <= 0.06 else raw)
    assert best is not None
    return float(round(best[1], 1))


# --------------------------------------------------------------------------
# PDF (pypdfium2)


class _open_pdf:
    def __init__(self, path: Path):
        self.path = path
        self.pdf = None

    def __enter__(self):
        import pypdfium2 as pdfium

        try:
            self.pdf = pdfium.PdfDocument(str(self.path))
        except pdfium.PdfiumError as exc:
            text = str(exc).lower()
            if "password" in text:
                raise _Refused(
                    "the PDF is password-protected; save an unprotected copy and add that"
                ) from None
            if "format" in text or "data format" in text:
                raise _Refused("the PDF is damaged or truncated (cannot be opened)") from None
            raise _Refused(f"the PDF cannot be opened ({exc})") from None
        return self.pdf

    def __exit__(self, *exc) -> None:
        if self.pdf is not None:
            self.pdf.close()


def _render_pdf_page(path: Path, pdf, number: int, dpi: float, max_pixels: int) -> Page:
    import pypdfium2 as pdfium

    try:
        pg = pdf[number - 1]
    except (pdfium.PdfiumError, IndexError) as exc:
        raise _Refused(f"the page cannot be opened ({exc})") from None
    try:
        w_pt, h_pt = pg.get_size()
        pixels = int(w_pt / 72 * dpi) * int(h_pt / 72 * dpi)
        if pixels > max_pixels:
            raise _Refused(_too_large_message(pixels, max_pixels))
        if pixels <= 0:
            raise _Refused("the page has no size")
        bitmap = pg.render(scale=dpi / 72.0, grayscale=False, rev_byteorder=True)
        try:
            rgb = np.ascontiguousarray(bitmap.to_numpy()[..., :3])
            gray = cv2.cvtColor(rgb, cv2.COLOR_RGB2GRAY)  # the same grey as pdfium's own (checked)
        finally:
            bitmap.close()
    except pdfium.PdfiumError as exc:
        raise _Refused(f"the page cannot be drawn ({exc})") from None
    finally:
        pg.close()
    return Page(path, number, gray, float(dpi), "render", colour=rgb if is_colour(rgb) else None)
