"""Imitating how a filled-in form is captured: scanner distortions, and saving as scan files.

:func:`scan_distort` imitates a scanner (placement, blur, uneven light,
noise, faded or broken lines; in colour when the form has an RGB page) and
moves the recorded box rectangles along; :func:`bitonal_scan` a 1-bit,
fax-like scan; :func:`as_jpeg` what a JPEG at some quality leaves of a page;
:func:`inverted`, :func:`turned` and :func:`cut_off` white-on-black,
upside-down (or quarter-turned) and cut-off pages; :func:`save_scan` writes
the usual scan formats (PNG, JPEG, TIFF, multi-page TIFF, PDF; grey, colour or
1-bit as CCITT Group 4).  Phone photos are in :mod:`recognizer.synth.photo`.

Every capture returns a :class:`~recognizer.synth.render.RenderedForm` with the
truth moved along (the box rectangles, in the reading order of the form as it
was printed) and without the drawing layers.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from pathlib import Path

import cv2
import numpy as np
from PIL import Image

from recognizer.synth.colour import multiply, to_grey
from recognizer.synth.layouts import LINE_MM
from recognizer.synth.render import Box, RenderedForm, mm_to_px

# ---------------------------------------------------------------- scanning

def scan_distort(form: RenderedForm, *, rng: np.random.Generator, skew_deg: float = 0.0,
                 shift_mm: tuple[float, float] = (0.0, 0.0), scale: float = 1.0,
                 noise: float = 0.0, blur: float = 0.0, lighting: float = 0.0,
                 faint_lines: float = 0.0, broken_lines: float = 0.0) -> RenderedForm:
    """Imitate scanning a printed, filled-in form.

    Parameters
    ----------
    form : RenderedForm
        From :func:`render_form` (``faint_lines`` and ``broken_lines`` need its
        ``printed``, ``handwriting`` and ``rules`` layers).
    rng : numpy.random.Generator
    skew_deg : float
        Rotation of the page about its centre, degrees counter-clockwise as
        seen on the image.
    shift_mm : (float, float)
        Displacement (right, down) in mm.
    scale : float
        Enlargement about the page centre (image size unchanged).
    noise : float
        0..1: gaussian noise of standard deviation ``12 * noise`` grey levels
        plus ``0.02 % * noise`` salt-and-pepper pixels.
    blur : float
        Gaussian blur sigma in pixels at 300 dpi (scaled with the dpi).
    lighting : float
        0..1: depth of the uneven-illumination gradient (paper darkened by up to
        this fraction towards one side or corner).
    faint_lines : float
        0..1: how much printed lines are lightened (1 = vanish).
    broken_lines : float
        0..1: roughly the fraction of printed line length lost in gaps.

    Returns
    -------
    RenderedForm
        New image (same size and dpi) and moved box rectangles; the layers are None.
        A colour form is distorted in colour (``rgb``; ``image`` is its grey).
    """
    colour = form.rgb is not None
    if colour and form.printed_rgb is not None and form.handwriting_rgb is not None \
            and form.rules is not None:
        printed = _fade_rules(form.printed_rgb, form.rules, faint_lines, broken_lines, form.dpi,
                              rng)
        image = multiply(printed, form.handwriting_rgb)
    elif not colour and form.printed is not None and form.handwriting is not None \
            and form.rules is not None:
        printed = _fade_rules(form.printed, form.rules, faint_lines, broken_lines, form.dpi, rng)
        image = np.minimum(printed, form.handwriting)
    elif faint_lines or broken_lines:
        raise ValueError("faint_lines/broken_lines need an undistorted form from render_form")
    else:
        image = form.rgb if colour else form.image
    height, width = image.shape[:2]
    shift_px = (mm_to_px(shift_mm[0], form.dpi), mm_to_px(shift_mm[1], form.dpi))
    matrix = _affine(width, height, skew_deg, scale, shift_px)
    if not np.allclose(matrix, np.eye(2, 3)):
        paper = (255, 255, 255) if image.ndim == 3 else 255
        image = cv2.warpAffine(image, matrix, (width, height), flags=cv2.INTER_LINEAR,
                               borderMode=cv2.BORDER_CONSTANT, borderValue=paper)
    if blur > 0:
        image = cv2.GaussianBlur(image, (0, 0), blur * form.dpi / 300.0)
    out = _light_and_noise(image, lighting, noise, rng)
    boxes = {name: [_move_box(box, matrix) for box in rects] for name, rects in form.boxes.items()}
    return _captured(form, out, boxes)


def _captured(form: RenderedForm, image: np.ndarray, boxes: dict[str, list[Box]],
              dpi: int | None = None) -> RenderedForm:
    """A capture of ``form``: ``image`` grey (M, N) or colour (M, N, 3), the truth moved to ``boxes``."""
    rgb = image if image.ndim == 3 else None
    grey = to_grey(image) if rgb is not None else image
    return RenderedForm(grey, form.dpi if dpi is None else dpi, dict(form.values), boxes,
                        {k: list(v) for k, v in form.cells.items()}, rgb=rgb,
                        styles=dict(form.styles), colours=dict(form.colours), ink=form.ink)


def _affine(width: int, height: int, skew_deg: float, scale: float,
            shift_px: tuple[float, float]) -> np.ndarray:
    """2x3 forward matrix (source -> destination) in OpenCV's pixel-index coordinates.

    Rotation by ``skew_deg`` (counter-clockwise on the image) and scaling are
    about the page centre, then the page moves by ``shift_px`` (right, down).
    """
    centre = ((width - 1) / 2.0, (height - 1) / 2.0)  # pixel-index centre
    matrix = cv2.getRotationMatrix2D(centre, skew_deg, scale)
    matrix[:, 2] += shift_px
    return matrix


def _move_box(box: Box, matrix: np.ndarray) -> Box:
    """Axis-aligned bounds of ``box`` (continuous px) moved by ``matrix`` (index convention)."""
    x0, y0, x1, y1 = box
    corners = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]]) - 0.5
    moved = corners @ matrix[:, :2].T + matrix[:, 2] + 0.5
    lo, hi = moved.min(axis=0), moved.max(axis=0)
    return (float(lo[0]), float(lo[1]), float(hi[0]), float(hi[1]))


def _light_and_noise(image: np.ndarray, lighting: float, noise: float,
                     rng: np.random.Generator) -> np.ndarray:
    """Apply uneven illumination and sensor noise to a uint8 page (grey or RGB); returns uint8."""
    if lighting <= 0 and noise <= 0:
        return image
    pixels = image.astype(np.float32)
    height, width = image.shape[:2]
    if lighting > 0:
        gain = _illumination(max(2, width // 16), max(2, height // 16), lighting, rng)
        gain = cv2.resize(gain, (width, height), interpolation=cv2.INTER_LINEAR)
        pixels *= gain[..., None] if pixels.ndim == 3 else gain
    if noise > 0:
        pixels += rng.standard_normal(pixels.shape, dtype=np.float32) * np.float32(12.0 * noise)
        n_specks = int(rng.binomial(pixels.size, 0.0002 * noise))
        where = rng.integers(0, pixels.size, n_specks)
        pixels.reshape(-1)[where] = rng.choice(np.array([0.0, 255.0], np.float32), n_specks)
    np.add(pixels, 0.5, out=pixels)
    return np.clip(pixels, 0, 255, out=pixels).astype(np.uint8)


def _illumination(width: int, height: int, depth: float, rng: np.random.Generator) -> np.ndarray:
    """(height, width) float32 gain in [1 - depth, 1]: a linear ramp plus a soft shadow."""
    angle = rng.uniform(0.0, 2 * np.pi)
    ys = np.linspace(-1.0, 1.0, height, dtype=np.float32)[:, None]
    xs = np.linspace(-1.0, 1.0, width, dtype=np.float32)[None, :]
    ramp = (xs * np.cos(angle) + ys * np.sin(angle) + 1.5) / 3.0
    cx, cy = rng.uniform(-1.2, 1.2, 2)
    shadow = np.exp(-((xs - cx) ** 2 + (ys - cy) ** 2) / 0.8)
    shade = 0.6 * ramp + 0.4 * shadow
    shade = (shade - shade.min()) / max(float(shade.max() - shade.min()), 1e-6)
    return (1.0 - depth * shade).astype(np.float32)


def _fade_rules(printed: np.ndarray, rules: np.ndarray, faint: float, broken: float, dpi: int,
                rng: np.random.Generator) -> np.ndarray:
    """Lighten printed lines by ``faint`` and cut gaps covering about ``broken`` of their length."""
    if faint <= 0 and broken <= 0:
        return printed
    out = printed.copy()
    if faint > 0:
        out[rules] = 255 - ((255 - out[rules].astype(np.float32)) * (1.0 - faint)).astype(np.uint8)
    if broken > 0:
        ys, xs = np.nonzero(rules)
        line_px = max(1.0, mm_to_px(LINE_MM, dpi))
        gap_px = mm_to_px(1.0, dpi)
        n_gaps = int(broken * len(ys) / line_px / gap_px)
        if n_gaps and len(ys):
            pick = rng.integers(0, len(ys), n_gaps)
            holes = np.zeros(rules.shape, np.uint8)
            radii = rng.uniform(0.25, 0.75, n_gaps) * gap_px
            for y, x, r in zip(ys[pick], xs[pick], radii):
                cv2.circle(holes, (int(x), int(y)), int(round(r)), 1, -1)
            out[(holes > 0) & rules] = 255
    return out


# ---------------------------------------------------------------- other captures

CHANNELS = {"red": 0, "green": 1, "blue": 2}


def bitonal_scan(form: RenderedForm, *, rng: np.random.Generator, dpi: int = 200,
                 threshold: int = 140, blur: float = 0.6, noise: float = 0.3,
                 channel: str | None = None) -> RenderedForm:
    """A 1-bit, fax-like scan: resampled to ``dpi``, mildly blurred, noisy, thresholded.

    A bitonal scanner sees the page in grey (or through one colour of lamp,
    ``channel``) and keeps black where it is darker than ``threshold``: black
    print and pens stay, light dropout colours (155 to 185 grey levels) vanish
    at the default threshold, and a scanner set darker (``threshold`` 165 to
    175) breaks light red walls up into specks and dashes; thin strokes may
    break.

    Parameters
    ----------
    form : RenderedForm
        Any form or capture; ``channel`` needs its ``rgb``.
    rng : numpy.random.Generator
    dpi : int
        Resolution of the scan (200 is the fine fax resolution).
    threshold : int
        Grey level below which a pixel is black.
    blur : float
        Gaussian sigma in pixels at ``dpi``, before thresholding.
    noise : float
        Gaussian noise of ``12 * noise`` grey levels before thresholding.
    channel : str, optional
        ``"red"``, ``"green"`` or ``"blue"``: scan one channel only (a scanner's
        colour dropout; red drops light red print entirely).

    Returns
    -------
    RenderedForm
        ``image`` uint8 with only 0 and 255, at ``dpi``; save it with
        ``save_scan(..., bitonal=True)`` for a CCITT Group 4 TIFF.
    """
    if channel is None:
        grey = form.image
    elif form.rgb is None:
        raise ValueError("a one-channel (dropout) scan needs a colour form")
    else:
        grey = np.ascontiguousarray(form.rgb[..., CHANNELS[channel]])
    height, width = grey.shape
    new_w = max(1, int(round(width * dpi / form.dpi)))
    new_h = max(1, int(round(height * dpi / form.dpi)))
    pixels = grey
    if (new_w, new_h) != (width, height):
        shrink = new_w < width
        pixels = cv2.resize(grey, (new_w, new_h),
                            interpolation=cv2.INTER_AREA if shrink else cv2.INTER_LINEAR)
    pixels = pixels.astype(np.float32)
    if blur > 0:
        pixels = cv2.GaussianBlur(pixels, (0, 0), blur)
    if noise > 0:
        pixels += rng.standard_normal(pixels.shape, dtype=np.float32) * np.float32(12.0 * noise)
    image = np.where(pixels < threshold, 0, 255).astype(np.uint8)
    sx, sy = new_w / width, new_h / height
    boxes = {name: [(x0 * sx, y0 * sy, x1 * sx, y1 * sy) for x0, y0, x1, y1 in rects]
             for name, rects in form.boxes.items()}
    return _captured(form, image, boxes, dpi)


def as_jpeg(form: RenderedForm, *, quality: int = 75) -> RenderedForm:
    """What a JPEG at ``quality`` leaves of the page (in colour when the form has ``rgb``).

    The pixels are the JPEG decoded as the scan reader decodes it; write the
    file itself with ``save_scan(form.rgb or form.image, "x.jpg", quality=...)``.
    """
    page = form.rgb if form.rgb is not None else form.image
    buffer = io.BytesIO()
    Image.fromarray(page).save(buffer, "JPEG", quality=quality)
    with Image.open(io.BytesIO(buffer.getvalue())) as decoded:
        pixels = np.asarray(decoded.convert("RGB" if page.ndim == 3 else "L"))
    return _captured(form, pixels, {k: list(v) for k, v in form.boxes.items()})


def inverted(form: RenderedForm) -> RenderedForm:
    """The page white on black (a negative, as some scanners and copiers give)."""
    page = form.rgb if form.rgb is not None else form.image
    return _captured(form, 255 - page, {k: list(v) for k, v in form.boxes.items()})


def turned(form: RenderedForm, quarter_turns: int = 2) -> RenderedForm:
    """The page turned by ``quarter_turns`` x 90 degrees counter-clockwise (2 = upside down).

    The truth keeps each field's boxes in its own digit order (on an upside-down
    page the first digit's box is the rightmost) and the fields in the order
    of the page read the right way up.
    """
    page = form.rgb if form.rgb is not None else form.image
    k = quarter_turns % 4
    boxes = {k_: list(v) for k_, v in form.boxes.items()}
    height, width = page.shape[:2]
    for _ in range(k):  # one counter-clockwise turn: (x, y) -> (y, width - x)
        boxes = {name: [(y0, width - x1, y1, width - x0) for x0, y0, x1, y1 in rects]
                 for name, rects in boxes.items()}
        height, width = width, height
    return _captured(form, np.ascontiguousarray(np.rot90(page, k)), boxes)


def upside_down(form: RenderedForm) -> RenderedForm:
    """The page turned by 180 degrees (see :func:`turned`)."""
    return turned(form, 2)


def cut_off(form: RenderedForm, *, side: str = "right", fraction: float = 0.2) -> RenderedForm:
    """The page with ``fraction`` of it cut off at one ``side`` (a sheet off the scanner glass).

    The truth keeps every field, the boxes outside the image included (their
    coordinates reach past its edge); :func:`fields_inside` names the whole ones.
    """
    if side not in ("left", "right", "top", "bottom") or not 0 < fraction < 1:
        raise ValueError("side is left, right, top or bottom and 0 < fraction < 1")
    page = form.rgb if form.rgb is not None else form.image
    height, width = page.shape[:2]
    cut_w, cut_h = int(round(width * fraction)), int(round(height * fraction))
    x0 = cut_w if side == "left" else 0
    y0 = cut_h if side == "top" else 0
    x1 = width - cut_w if side == "right" else width
    y1 = height - cut_h if side == "bottom" else height
    boxes = {name: [(a - x0, b - y0, c - x0, d - y0) for a, b, c, d in rects]
             for name, rects in form.boxes.items()}
    return _captured(form, np.ascontiguousarray(page[y0:y1, x0:x1]), boxes)


def fields_inside(form: RenderedForm) -> list[str]:
    """The fields whose boxes all lie inside the image, in reading order."""
    height, width = form.image.shape[:2]
    return [name for name, rects in form.boxes.items()
            if all(x0 >= 0 and y0 >= 0 and x1 <= width and y1 <= height
                   for x0, y0, x1, y1 in rects)]


# ---------------------------------------------------------------- saving

_PIL_FORMATS = {".png": "PNG", ".jpg": "JPEG", ".jpeg": "JPEG", ".tif": "TIFF",
                ".tiff": "TIFF", ".bmp": "BMP", ".pdf": "PDF"}


def save_scan(image_or_pages: np.ndarray | Sequence[np.ndarray], path: str | Path, *,
              dpi: int, quality: int = 90, optimize: bool = True, bitonal: bool = False) -> None:
    """Write one page or several as a scan file; the format follows the suffix.

    Parameters
    ----------
    image_or_pages : numpy.ndarray or sequence of numpy.ndarray
        (M, N) uint8 grey page(s), 0 = ink; (M, N, 3) uint8 RGB pages are
        written in colour, (M, N) bool pages (True = paper) in 1 bit.  Several
        pages need .tif/.tiff or .pdf.
    path : str or pathlib.Path
        .png, .jpg/.jpeg, .tif/.tiff, .bmp or .pdf.
    dpi : int
        Stored in the file's metadata; for PDF each page measures
        ``pixels / dpi * 72`` points.
    quality : int
        JPEG quality (also for the JPEG-coded pages inside a PDF).  PDFs carry
        no dates, so saving the same pages again gives the same bytes.
    optimize : bool
        Spend time on the smallest PNG or JPEG (the committed sample scans);
        False writes a 300-dpi page many times faster (benchmarks).
    bitonal : bool
        Write grey pages in 1 bit (grey levels above 127 are paper): a TIFF
        then holds CCITT Group 4 (fax) data, a PDF CCITT too, a PNG 1-bit
        pixels.  A JPEG cannot be 1-bit (refused).
    """
    path = Path(path)
    fmt = _PIL_FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise ValueError(f"unsupported scan format {path.suffix!r}")
    pages = [image_or_pages] if isinstance(image_or_pages, np.ndarray) else list(image_or_pages)
    if not pages:
        raise ValueError("no pages to save")
    if len(pages) > 1 and fmt not in ("TIFF", "PDF"):
        raise ValueError(f"{path.suffix} holds one page; use .tif or .pdf for {len(pages)}")
    images = [_pil_page(np.asarray(p), bitonal) for p in pages]
    one_bit = any(image.mode == "1" for image in images)
    if one_bit and fmt == "JPEG":
        raise ValueError("a JPEG cannot hold a 1-bit page; use .tif, .png or .pdf")
    if one_bit and fmt == "TIFF" and any(image.mode != "1" for image in images):
        raise ValueError("a Group 4 TIFF holds 1-bit pages only; save them all bitonal")
    options: dict[str, object] = {}
    if fmt == "PDF":
        # no creation/modification dates, so that the same pages give the same file
        options = {"resolution": float(dpi), "quality": quality, "creationDate": None,
                   "modDate": None, "creator": "Inkcount"}
    elif fmt == "JPEG":
        options = {"dpi": (dpi, dpi), "quality": quality, "optimize": optimize}
    elif fmt == "TIFF":
        compression = "group4" if one_bit else "tiff_adobe_deflate"
        options = {"dpi": (dpi, dpi), "compression": compression}
    elif fmt == "PNG":
        options = {"dpi": (dpi, dpi), "optimize": optimize}
    else:
        options = {"dpi": (dpi, dpi)}
    if len(images) > 1:
        options.update(save_all=True, append_images=images[1:])
    images[0].save(path, fmt, **options)


def _pil_page(page: np.ndarray, bitonal: bool) -> Image.Image:
    """One page array as a Pillow image: L (grey), RGB or 1 (bitonal)."""
    if page.dtype == bool:
        return Image.fromarray(page)
    page = page.astype(np.uint8, copy=False)
    if page.ndim == 3 and page.shape[2] == 3:
        if bitonal:
            raise ValueError("a colour page cannot be saved bitonal; threshold it first")
        return Image.fromarray(np.ascontiguousarray(page))
    if page.ndim != 2:
        raise ValueError(f"a page is (M, N) grey or (M, N, 3) RGB, not {page.shape}")
    if bitonal:
        return Image.fromarray(page > 127)
    return Image.fromarray(page, mode="L")
