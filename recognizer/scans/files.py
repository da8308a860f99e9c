"""Scan loading: files and folders -> pages, one at a time.

A *scan* is a file on disk (PNG, JPEG, BMP, TIFF with one or more pages, or a
PDF with one or more pages). A *page* is one image of one sheet, handed on as
an (M, N) uint8 grayscale array with 0 = black ink and 255 = white paper, and
with the resolution it was scanned at.

Pages are streamed: :func:`iter_pages` opens each file only when it gets to it
and yields one page at a time, so a 500-page batch is never held in memory.

Everything that can go wrong with a file (empty, truncated, not an image, an
encrypted PDF, an image too large to decode safely, any error a damaged file
makes a decoder raise) comes back as a :class:`ScanProblem` in the same
stream, naming the file, the page and the reason in plain words; the pages
after it are still read. The limits on one file (pixels, decoded bytes,
pages) are checked from its headers before anything is decoded; they and
their reasons are in :mod:`recognizer.scans.limits`.
"""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Iterable, Iterator
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np
from PIL import Image, ImageOps, UnidentifiedImageError

from recognizer.scans.limits import (
    DEFAULT_MAX_PIXELS,
    MAX_BYTES_PER_PIXEL,
    MAX_PAGE_PROBLEMS_PER_FILE,
    MAX_PAGES_PER_FILE,
    check_pillow_settings,
    damage_words,
    declared_bytes_per_pixel,
    image_format_by_start,
    pdf_has_end,
    program_error_words,
    tiff_page_count,
    too_large_words,
    too_many_bytes_words,
    too_many_pages_words,
)
from recognizer.scans.dpi import estimate_dpi, file_dpi
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
    "printable_name",
]

IMAGE_SUFFIXES = frozenset({".png", ".jpg", ".jpeg", ".bmp", ".tif", ".tiff"})
PDF_SUFFIXES = frozenset({".pdf"})
SCAN_SUFFIXES = IMAGE_SUFFIXES | PDF_SUFFIXES

# DEFAULT_MAX_PIXELS (largest page decoded) and the other limits on one file
# live, with their reasons, in recognizer.scans.limits.

#: Resolution PDF pages are rendered at unless asked otherwise.
DEFAULT_PDF_DPI = 300

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


def printable_name(path: str | os.PathLike) -> str:
    """A file's path as text any UTF-8 file or terminal takes: bytes of the name that are not UTF-8
    written as ``\\xNN`` (visible, and two such names stay apart). Used for the batch's stored paths,
    the CSV files and the residual statement alike."""
    text = os.fsdecode(os.fspath(path))
    try:
        text.encode("utf-8")
        return text
    except UnicodeEncodeError:
        try:
            return text.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
        except UnicodeEncodeError:  # not from the file system: a lone surrogate of another kind
            return text.encode("utf-8", "backslashreplace").decode("utf-8")


@dataclass(frozen=True)
class ScanProblem:
    """A file or page that could not be read, and why (in plain words)."""

    source: Path
    page: int | None
    reason: str

    def __bool__(self) -> bool:  # a problem is never a usable page
        return False

    def line(self, *, name_only: bool = False) -> str:
        """The problem line people see (the command line and the window alike).

        ``card_07.tif: page 2: the file is damaged: ...``, or without the page
        for a problem with the whole file; ``name_only`` shows the file's name
        instead of its path.
        """
        where = Path(self.source).name if name_only else str(self.source)
        page = f"page {self.page}: " if self.page is not None else ""
        return f"{where}: {page}{self.reason}"

    def __str__(self) -> str:
        return self.line()


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
#
# Every file is opened, counted and decoded inside one guard (:func:`_file_pages`,
# :func:`count_pages`, :func:`load_page`): whatever a damaged file makes Pillow or
# pdfium raise becomes a ScanProblem in plain words (:func:`limits.damage_words`),
# and the limits of :mod:`recognizer.scans.limits` are checked from the headers
# before anything is decoded.


class _Refused(Exception):
    """A file or page that cannot be read; carries the plain-words reason."""


class _Broken(_Refused):
    """The file's chain of pages breaks at this page: the pages after it cannot be reached."""


def _problem(path: Path, page: int | None, exc: Exception) -> ScanProblem:
    """The problem line for any error met while opening, counting or decoding a file."""
    return ScanProblem(path, page, str(exc) if isinstance(exc, _Refused) else damage_words(exc))


def count_pages(path: str | os.PathLike, *, max_pixels: int = DEFAULT_MAX_PIXELS) -> int | ScanProblem:
    """Number of pages in a scan file, or the problem that stops it being read.

    A cheap probe that never raises: headers only, nothing is decoded (a
    TIFF's chain of pages is walked without reading their tags). A file
    declaring more than :data:`~recognizer.scans.limits.MAX_PAGES_PER_FILE`
    pages is refused here.
    """
    path = Path(path)
    try:
        head = _head(path)
        if _is_pdf(head):
            with _open_pdf(path) as pdf:
                return _page_count(path, pdf)
        with _open_image(path, max_pixels) as img:
            return _page_count(path, img)
    except Exception as exc:
        return _problem(path, None, exc)


def load_page(path: str | os.PathLike, page: int, *, pdf_dpi: float = DEFAULT_PDF_DPI,
              max_pixels: int = DEFAULT_MAX_PIXELS) -> Page | ScanProblem:
    """Load one page (numbered from 1) of a scan file; never raises."""
    path = Path(path)
    check_pillow_settings()
    try:
        head = _head(path)
        if _is_pdf(head):
            with _open_pdf(path) as pdf:
                if not 1 <= page <= len(pdf):
                    raise _Refused(f"the PDF has no page {page}")
                return _render_pdf_page(path, pdf, page, pdf_dpi, max_pixels)
        with _open_image(path, max_pixels) as img:
            return _image_page(path, img, page, max_pixels, head)
    except Exception as exc:
        return _problem(path, page, exc)


def iter_pages(files: Iterable[str | os.PathLike], *, pdf_dpi: float = DEFAULT_PDF_DPI,
               max_pixels: int = DEFAULT_MAX_PIXELS) -> Iterator[Page | ScanProblem]:
    """Yield every page of every file in turn, or the problem met instead.

    Each file is opened once; its pages are decoded one at a time as the
    caller asks for them. A problem with one page (a damaged frame of a
    TIFF, say) does not stop the pages after it; a problem with a whole file
    (empty, encrypted, not an image, too many pages) yields one
    :class:`ScanProblem` with ``page=None`` and moves on to the next file.
    Whatever error a damaged file causes, it ends as a problem line: this
    never raises for a bad file.
    """
    check_pillow_settings()
    for raw in files:
        yield from _file_pages(Path(raw), pdf_dpi, max_pixels)


def _file_pages(path: Path, pdf_dpi: float, max_pixels: int) -> Iterator[Page | ScanProblem]:
    """The pages of one file, every error a problem line (the per-file guard)."""
    with ExitStack() as stack:
        try:
            head = _head(path)
            pdf = _is_pdf(head)
            doc = stack.enter_context(_open_pdf(path) if pdf else _open_image(path, max_pixels))
            with _quiet():
                count = _page_count(path, doc)
        except Exception as exc:
            yield _problem(path, None, exc)
            return
        damaged = 0
        for number in range(1, count + 1):
            try:
                if pdf:
                    page = _render_pdf_page(path, doc, number, pdf_dpi, max_pixels)
                else:
                    page = _image_page(path, doc, number, max_pixels, head)
            except _Broken as exc:
                rest = f"; pages {number + 1}-{count} were not read" if number < count else ""
                yield ScanProblem(path, number, f"{exc}{rest}")
                return
            except Exception as exc:
                yield _problem(path, number, exc)
                damaged += 1
                if damaged >= MAX_PAGE_PROBLEMS_PER_FILE and number < count:
                    yield ScanProblem(path, None, f"{damaged} pages are damaged, so the rest of the file "
                                      f"(pages {number + 1}-{count}) was not read")
                    return
                continue
            yield page


def _page_count(path: Path, doc) -> int:
    """Pages of an open PDF or image, refused past the page limit."""
    if isinstance(doc, Image.Image):
        if doc.format == "TIFF":
            with open(path, "rb") as fh:
                count = tiff_page_count(fh, os.fstat(fh.fileno()).st_size)
            exact = count <= MAX_PAGES_PER_FILE
        else:
            count, exact = int(getattr(doc, "n_frames", 1)), True
    else:
        count, exact = len(doc), True
    if count > MAX_PAGES_PER_FILE:
        raise _Refused(too_many_pages_words(count, exact=exact))
    if count < 1:
        raise _Refused("the file holds no pages")
    return count


# --------------------------------------------------------------------------
# Images (Pillow)

@contextmanager
def _quiet() -> Iterator[None]:
    """No warnings while a file is opened or decoded: a damaged file's trouble is its problem line."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        yield


#: The formats Pillow is allowed to try (any other plugin never sees the file);
#: a JPEG with several pictures opens as MPO.
_PILLOW_FORMATS = ("PNG", "JPEG", "BMP", "DIB", "TIFF")


def _is_pdf(head: bytes) -> bool:
    """A PDF or an image is told by the file's first bytes, not its name."""
    return head.startswith(b"%PDF")


def _head(path: Path) -> bytes:
    """The first bytes of a file (enough for the kind and a PNG's header)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(32)
    except FileNotFoundError:
        raise _Refused("file not found") from None
    except IsADirectoryError:
        raise _Refused("this is a folder, not a file") from None
    except OSError as exc:
        raise _Refused(f"cannot open the file ({exc.strerror or exc})") from None
    if not head:
        raise _Refused("the file is empty (0 bytes)")
    return head


class _open_image:
    """Context manager opening an image lazily (header only); limits are checked per page
    by :func:`_image_page` before anything is decoded."""

    def __init__(self, path: Path, max_pixels: int):
        self.path = path
        self.max_pixels = max_pixels
        self.img: Image.Image | None = None

    def __enter__(self) -> Image.Image:
        try:
            with _quiet():  # our own limits are checked later, with clearer words
                self.img = Image.open(self.path, formats=_PILLOW_FORMATS)
        except UnidentifiedImageError:
            fmt = image_format_by_start(self.path)
            if fmt is not None:
                raise _Refused(f"the file is damaged: it starts as a {fmt} image but cannot be opened") from None
            raise _Refused(
                "not an image or PDF that Inkcount can read "
                "(PNG, JPEG, BMP, TIFF and PDF are supported)"
            ) from None
        except Image.DecompressionBombError:
            raise _Refused(too_large_words(None, self.max_pixels)) from None
        if self.img.format not in {*_PILLOW_FORMATS, "MPO"}:
            fmt = self.img.format
            self.img.close()
            raise _Refused(
                f"{fmt} images are not supported (PNG, JPEG, BMP, TIFF and PDF are)"
            )
        return self.img

    def __exit__(self, *exc) -> None:
        if self.img is not None:
            try:
                self.img.close()
            except Exception:  # closing a damaged file must not hide the problem met
                pass


def _image_page(path: Path, img: Image.Image, number: int, max_pixels: int, head: bytes) -> Page:
    with _quiet():
        return _decoded_page(path, img, number, max_pixels, head)


def _decoded_page(path: Path, img: Image.Image, number: int, max_pixels: int, head: bytes) -> Page:
    try:
        img.seek(number - 1)
    except EOFError:
        raise _Broken(f"the file is damaged: page {number} cannot be found") from None
    except Exception as exc:
        raise _Broken(damage_words(exc)) from None
    width, height = img.size
    if width * height > max_pixels:
        raise _Refused(too_large_words(width * height, max_pixels))
    size = width * height * declared_bytes_per_pixel(img, head)
    if size > max_pixels * MAX_BYTES_PER_PIXEL:
        raise _Refused(too_many_bytes_words(int(size), max_pixels * MAX_BYTES_PER_PIXEL))
    if width < 16 or height < 16:
        raise _Refused(f"the page is only {width}x{height} pixels, too small to be a scan")
    img.load()
    oriented = ImageOps.exif_transpose(img) if number == 1 else img
    gray = _to_gray(oriented)
    colour = _colour(oriented, gray.shape)
    dpi = file_dpi(img)
    try:
        if dpi is None:
            return _captured(Page(path, number, gray, estimate_dpi(gray.shape), "page size", colour=colour))
        return _captured(Page(path, number, gray, dpi, "file", colour=colour))
    except (_Refused, MemoryError):
        raise
    except Exception as exc:  # the page decoded; what failed is ours
        raise _Refused(program_error_words(exc)) from None


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
        arr = np.asarray(img)
        top = 65535.0 if mode != "I" or arr.max() > 255 else 255.0
        return _scaled_to_bytes(arr, top)
    if mode == "F":
        arr = np.asarray(img)
        top = 1.0 if arr.max() <= 1.0 else 255.0
        return _scaled_to_bytes(arr, top)
    if mode in {"RGBA", "LA", "PA"} or (mode == "P" and "transparency" in img.info):
        rgba = img.convert("RGBA")
        white = Image.new("RGBA", rgba.size, (255, 255, 255, 255))
        img = Image.alpha_composite(white, rgba)
    if img.mode != "L":
        img = img.convert("L")  # 1-bit, palette, RGB, CMYK, YCbCr ...
    return np.array(img, dtype=np.uint8)


def _scaled_to_bytes(arr: np.ndarray, top: float, rows: int = 256) -> np.ndarray:
    """0..top -> 0..255 uint8, a band of rows at a time (a deep page is never held as float64 whole)."""
    out = np.empty(arr.shape[:2], np.uint8)
    for r in range(0, arr.shape[0], rows):
        band = arr[r : r + rows].astype(np.float64)
        out[r : r + rows] = np.clip(band * (255.0 / top) + 0.5, 0, 255).astype(np.uint8)
    return out


# --------------------------------------------------------------------------
# PDF (pypdfium2)


class _open_pdf:
    """Context manager opening a PDF with pypdfium2 (its pages are parsed one by one, later)."""

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
        if not pdf_has_end(self.path):
            # pdfium repairs a cut-off PDF silently and draws what is left, so a
            # page could be read half blank with no word said: refuse it instead.
            self.pdf.close()
            self.pdf = None
            raise _Refused("the PDF is damaged: it ends before its last part "
                           "(truncated, perhaps cut off while copying)")
        return self.pdf

    def __exit__(self, *exc) -> None:
        if self.pdf is not None:
            try:
                self.pdf.close()
            except Exception:  # closing a damaged file must not hide the problem met
                pass


def _render_pdf_page(path: Path, pdf, number: int, dpi: float, max_pixels: int) -> Page:
    import pypdfium2 as pdfium

    try:
        pg = pdf[number - 1]
    except (pdfium.PdfiumError, IndexError) as exc:
        raise _Refused(f"the PDF is damaged: page {number} cannot be opened ({exc})") from None
    try:
        # the size is checked before anything is drawn: points x dpi
        w_pt, h_pt = pg.get_size()
        if not (math.isfinite(w_pt) and math.isfinite(h_pt)) or w_pt < 1 or h_pt < 1:
            raise _Refused("the PDF is damaged: the page has no usable size")
        pixels = math.ceil(w_pt / 72 * dpi) * math.ceil(h_pt / 72 * dpi)
        if pixels > max_pixels:
            raise _Refused(too_large_words(pixels, max_pixels))
        bitmap = pg.render(scale=dpi / 72.0, grayscale=False, rev_byteorder=True)
        try:
            rgb = np.ascontiguousarray(bitmap.to_numpy()[..., :3])
            gray = cv2.cvtColor(rgb, cv2.COLOR_RGB2GRAY)  # the same grey as pdfium's own (checked)
        finally:
            bitmap.close()
    except pdfium.PdfiumError as exc:
        raise _Refused(f"the PDF is damaged: page {number} cannot be drawn ({exc})") from None
    finally:
        pg.close()
    return Page(path, number, gray, float(dpi), "render", colour=rgb if is_colour(rgb) else None)
