"""Imitating how a filled-in form is captured: scanner distortions, and saving as scan files.

:func:`scan_distort` imitates a scanner (placement, blur, uneven light,
noise, faded or broken lines) and moves the recorded box rectangles along;
:func:`save_scan` writes the usual scan formats (PNG, JPEG, TIFF, multi-page
TIFF, PDF).
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import cv2
import numpy as np
from PIL import Image

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
    """
    if form.printed is not None and form.handwriting is not None and form.rules is not None:
        printed = _fade_rules(form.printed, form.rules, faint_lines, broken_lines, form.dpi, rng)
        image = np.minimum(printed, form.handwriting)
    elif faint_lines or broken_lines:
        raise ValueError("faint_lines/broken_lines need an undistorted form from render_form")
    else:
        image = form.image
    height, width = image.shape
    shift_px = (mm_to_px(shift_mm[0], form.dpi), mm_to_px(shift_mm[1], form.dpi))
    matrix = _affine(width, height, skew_deg, scale, shift_px)
    if not np.allclose(matrix, np.eye(2, 3)):
        image = cv2.warpAffine(image, matrix, (width, height), flags=cv2.INTER_LINEAR,
                               borderMode=cv2.BORDER_CONSTANT, borderValue=255)
    if blur > 0:
        image = cv2.GaussianBlur(image, (0, 0), blur * form.dpi / 300.0)
    out = _light_and_noise(image, lighting, noise, rng)
    boxes = {name: [_move_box(box, matrix) for box in rects] for name, rects in form.boxes.items()}
    return RenderedForm(out, form.dpi, dict(form.values), boxes,
                        {k: list(v) for k, v in form.cells.items()})


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
    """Apply uneven illumination and sensor noise to a uint8 page; returns uint8."""
    if lighting <= 0 and noise <= 0:
        return image
    pixels = image.astype(np.float32)
    height, width = image.shape
    if lighting > 0:
        gain = _illumination(max(2, width // 16), max(2, height // 16), lighting, rng)
        pixels *= cv2.resize(gain, (width, height), interpolation=cv2.INTER_LINEAR)
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


# ---------------------------------------------------------------- saving

_PIL_FORMATS = {".png": "PNG", ".jpg": "JPEG", ".jpeg": "JPEG", ".tif": "TIFF",
                ".tiff": "TIFF", ".bmp": "BMP", ".pdf": "PDF"}


def save_scan(image_or_pages: np.ndarray | Sequence[np.ndarray], path: str | Path, *,
              dpi: int, quality: int = 90, optimize: bool = True) -> None:
    """Write one page or several as a scan file; the format follows the suffix.

    Parameters
    ----------
    image_or_pages : numpy.ndarray or sequence of numpy.ndarray
        (M, N) uint8 page(s), 0 = ink.  Several pages need .tif/.tiff or .pdf.
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
    images = [Image.fromarray(np.asarray(p, np.uint8), mode="L") for p in pages]
    options: dict[str, object] = {}
    if fmt == "PDF":
        # no creation/modification dates, so that the same pages give the same file
        options = {"resolution": float(dpi), "quality": quality, "creationDate": None,
                   "modDate": None, "creator": "Inkcount"}
    elif fmt == "JPEG":
        options = {"dpi": (dpi, dpi), "quality": quality, "optimize": optimize}
    elif fmt == "TIFF":
        options = {"dpi": (dpi, dpi), "compression": "tiff_adobe_deflate"}
    elif fmt == "PNG":
        options = {"dpi": (dpi, dpi), "optimize": optimize}
    else:
        options = {"dpi": (dpi, dpi)}
    if len(images) > 1:
        options.update(save_all=True, append_images=images[1:])
    images[0].save(path, fmt, **options)
