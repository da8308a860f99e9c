"""Phone photos and negative scans made into flat, evenly lit pages; telling colour pages from grey.

A phone photo shows the page smaller than the frame, on a darker background,
seen at a slant, unevenly lit, with a file resolution (often 72 dpi) that says
nothing about the paper. :func:`flatten_photo` finds the page in the photo,
corrects the perspective to a flat page of the paper size it matches (A4,
US Letter, A5, or a size the caller gives, such as a template's), takes the
resolution from that size, and evens out the light with Sauvola's local
threshold (scikit-image): paper becomes white, ink keeps its darkness
relative to the paper around it. A photo that is too blurred or too small to
read reliably is read anyway, with a warning on the page.

:func:`undo_negative` turns a white-on-black page (a negative scan) into
black on white.

Steps of :func:`flatten_photo`, on the photo scaled to at most 1000 pixels:

1. Page mask: Otsu's threshold on the smoothed grey photo (the paper is the
   brighter class), closed over about 2 % of the frame to fill the writing.
2. The largest bright region is the page when at least 60 % of the frame's
   outer edge is background (darker class), it covers 20-97 % of the frame
   and the frame around it is darker by at least 30 grey levels; otherwise
   the image is a scan (nothing to do), unevenly lit perhaps. Its outline, simplified
   (Douglas-Peucker, 2 % of the perimeter), gives four corners; otherwise its
   smallest enclosing rotated rectangle does.
3. Refusals: a page corner on the frame's edge (the page is cut off), a corner
   angle outside 90 +- 35 degrees or opposite sides differing by more than a
   factor 1.6 (seen too much at an angle).
4. Paper: the ratio of the mean long to the mean short side chooses the paper
   size (nearest ratio); the resolution is the photo's pixels along the long
   side over the paper's long side, rounded, at most 300 dpi; the page is
   warped (a homography) to that size. A scan whose file gives a resolution
   (a flatbed with a dark lid around a small card) keeps it and its measured
   size.
5. Light: Sauvola's threshold (window about 8 mm, k = 0.2) marks the ink;
   everything else becomes paper (255); ink keeps its darkness relative to
   the local paper level (a grey closing over 4 mm).
6. Warnings: the variance of the Laplacian at 100 dpi under 40 (blurred), a
   resolution under 120 dpi (too small).

The thresholds are common practice tuned on our generated photos, no source.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np

__all__ = ["PAPER_SIZES_MM", "Flattened", "PhotoRefused", "even_light", "find_page", "flatten_photo", "is_colour",
           "sharpness", "undo_negative"]

#: Paper sizes a photo is matched to, (long, short) side in mm.
PAPER_SIZES_MM: dict[str, tuple[float, float]] = {
    "A4": (297.0, 210.0),
    "US Letter": (279.4, 215.9),
    "A5": (210.0, 148.0),
}
MM_PER_INCH = 25.4

_DETECT_SIDE = 1000        # photo scaled to at most this many pixels for finding the page
_MIN_COVER, _MAX_COVER = 0.20, 0.97
_MIN_CONTRAST = 30.0       # grey levels between the page and the frame around it
_BACKGROUND_RING = 0.6     # share of the frame's outer edge that must be background
_MAX_CORNER_DEV = 35.0     # degrees from a right angle
_MAX_SIDE_RATIO = 1.6      # opposite sides
_EDGE = 0.005              # a corner this close to the frame's edge (share of the side): cut off
_MAX_DPI = 300.0
_SAUVOLA_MM, _SAUVOLA_K = 8.0, 0.2
_PAPER_MM = 4.0
_BLUR_VARIANCE = 40.0
_SMALL_DPI = 120.0


@dataclass
class Flattened:
    """A photo made into a flat page.

    Attributes
    ----------
    image : (M, N) uint8 ndarray
        The flat page, 0 = ink, 255 = paper.
    dpi : float
        Its resolution, from the paper size.
    paper : str
        The paper size matched (a key of the sizes given).
    corners : (4, 2) float ndarray
        The page's corners in the photo (top left, top right, bottom right,
        bottom left, as the page lies in the photo), pixels.
    homography : (3, 3) ndarray
        Maps photo pixel coordinates to flat-page coordinates.
    warnings : list of str
        Why the page may read badly (blurred, too small).
    """

    image: np.ndarray
    dpi: float
    paper: str
    corners: np.ndarray
    homography: np.ndarray
    warnings: list[str] = field(default_factory=list)


class PhotoRefused(ValueError):
    """A photo in which no page can be read; the message says why in plain words."""


def flatten_photo(gray: np.ndarray, *, dpi: float | None = None,
                  paper_sizes: dict[str, tuple[float, float]] | None = None) -> Flattened | None:
    """The page of a phone photo as a flat page, or None when ``gray`` is not a photo of a page.

    Parameters
    ----------
    gray : (M, N) uint8 ndarray
        The photo in grey, 0 = black.
    dpi : float, optional
        A resolution to trust (a scanner's, from the file): the page is then
        cut out and squared at that resolution, its size as measured, instead
        of matched to a paper size.
    paper_sizes : dict, optional
        Paper sizes to match, name -> (long, short) in mm; default
        :data:`PAPER_SIZES_MM`. Sizes of one shape (A4 and A5) are told apart
        by their order only: the first listed wins.

    Raises
    ------
    PhotoRefused
        A page was found but cannot be read: cut off at the edge, or seen too
        much at an angle.
    """
    sizes = paper_sizes or PAPER_SIZES_MM
    corners = find_page(gray)
    if corners is None:
        return None
    h, w = gray.shape
    if np.any(corners[:, 0] < _EDGE * w) or np.any(corners[:, 0] > (1 - _EDGE) * w - 1) \
            or np.any(corners[:, 1] < _EDGE * h) or np.any(corners[:, 1] > (1 - _EDGE) * h - 1):
        raise PhotoRefused("the page is cut off at the edge of the photo; photograph the whole page")
    sides = np.linalg.norm(np.roll(corners, -1, axis=0) - corners, axis=1)  # top, right, bottom, left
    angles = _corner_angles(corners)
    if (np.max(np.abs(angles - 90.0)) > _MAX_CORNER_DEV
            or max(sides[0], sides[2]) / max(min(sides[0], sides[2]), 1.0) > _MAX_SIDE_RATIO
            or max(sides[1], sides[3]) / max(min(sides[1], sides[3]), 1.0) > _MAX_SIDE_RATIO):
        raise PhotoRefused("the page is seen too much at an angle to read; photograph it straight from above")
    width_px, height_px = (sides[0] + sides[2]) / 2, (sides[1] + sides[3]) / 2
    if dpi is not None:
        paper, out_w, out_h = "as scanned", int(round(width_px)), int(round(height_px))
    else:
        ratio = max(width_px, height_px) / max(min(width_px, height_px), 1.0)
        paper = min(sizes, key=lambda k: abs(sizes[k][0] / sizes[k][1] - ratio))
        long_mm, short_mm = sizes[paper]
        dpi = float(min(_MAX_DPI, round(max(width_px, height_px) / (long_mm / MM_PER_INCH))))
        portrait = height_px >= width_px
        out_w = int(round((short_mm if portrait else long_mm) / MM_PER_INCH * dpi))
        out_h = int(round((long_mm if portrait else short_mm) / MM_PER_INCH * dpi))
    target = np.array([[0, 0], [out_w, 0], [out_w, out_h], [0, out_h]], np.float32)
    homography = cv2.getPerspectiveTransform(corners.astype(np.float32), target)
    flat = cv2.warpPerspective(gray, homography, (out_w, out_h), flags=cv2.INTER_LINEAR,
                               borderMode=cv2.BORDER_REPLICATE)
    image = even_light(flat, dpi=dpi)
    warnings = []
    if dpi < _SMALL_DPI:
        warnings.append(f"the page is small in the photo ({dpi:.0f} dpi): digits may be misread; "
                        "take the photo closer")
    if sharpness(flat, dpi=dpi) < _BLUR_VARIANCE:
        warnings.append("the photo is blurred: digits may be misread; take it again in focus")
    return Flattened(image, dpi, paper, corners, homography, warnings)


def find_page(gray: np.ndarray) -> np.ndarray | None:
    """The four corners of the page in a photo (TL, TR, BR, BL), or None when the page fills the frame."""
    h, w = gray.shape
    scale = min(1.0, _DETECT_SIDE / max(h, w))
    small = cv2.resize(gray, (max(1, round(w * scale)), max(1, round(h * scale))), interpolation=cv2.INTER_AREA)
    small = cv2.GaussianBlur(small, (5, 5), 0)
    _, mask = cv2.threshold(small, 0, 255, cv2.THRESH_BINARY + cv2.THRESH_OTSU)
    k = max(3, int(round(0.02 * max(small.shape))) | 1)
    mask = cv2.morphologyEx(mask, cv2.MORPH_CLOSE, cv2.getStructuringElement(cv2.MORPH_RECT, (k, k)))
    contours, _ = cv2.findContours(mask, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
    if not contours:
        return None
    ring = np.ones_like(mask, bool)
    b = max(2, int(round(0.02 * min(small.shape))))
    ring[b:-b, b:-b] = False
    if float(np.mean(mask[ring] == 0)) < _BACKGROUND_RING:
        return None  # the frame's edge is mostly paper: a scan (perhaps unevenly lit), not a photo
    page = max(contours, key=cv2.contourArea)
    cover = cv2.contourArea(page) / float(small.size)
    if not _MIN_COVER <= cover <= _MAX_COVER:
        return None
    inside = np.zeros_like(mask)
    cv2.drawContours(inside, [page], -1, 255, thickness=cv2.FILLED)
    if float(small[inside > 0].mean()) - float(small[inside == 0].mean()) < _MIN_CONTRAST:
        return None
    hull = cv2.convexHull(page)
    approx = cv2.approxPolyDP(hull, 0.02 * cv2.arcLength(hull, True), True)
    quad = approx.reshape(-1, 2).astype(np.float64) if len(approx) == 4 else cv2.boxPoints(cv2.minAreaRect(hull))
    return _order(np.asarray(quad, np.float64)) / scale


def even_light(page: np.ndarray, *, dpi: float) -> np.ndarray:
    """Paper made white and ink kept dark relative to the paper around it (Sauvola's threshold)."""
    from skimage.filters import threshold_sauvola

    px_per_mm = dpi / MM_PER_INCH
    window = max(15, int(round(_SAUVOLA_MM * px_per_mm)) | 1)
    threshold = threshold_sauvola(page, window_size=window, k=_SAUVOLA_K)
    k = max(3, int(round(_PAPER_MM * px_per_mm)) | 1)
    paper = cv2.morphologyEx(page, cv2.MORPH_CLOSE, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (k, k)))
    scaled = np.clip(page.astype(np.float32) * (255.0 / np.maximum(paper.astype(np.float32), 1.0)), 0, 255)
    return np.where(page < threshold, scaled, 255.0).astype(np.uint8)


def sharpness(page: np.ndarray, *, dpi: float) -> float:
    """Variance of the Laplacian of the page seen at 100 dpi (low: blurred)."""
    scale = min(1.0, 100.0 / dpi)
    small = cv2.resize(page, None, fx=scale, fy=scale, interpolation=cv2.INTER_AREA) if scale < 1 else page
    return float(cv2.Laplacian(small, cv2.CV_64F).var())


def is_colour(rgb: np.ndarray, *, min_chroma: float = 18.0, min_share: float = 0.003) -> bool:
    """Whether an RGB page carries colour at all (not a grey page stored as RGB).

    True when at least ``min_share`` of the page (seen at every 8th pixel)
    lies ``min_chroma`` or more from grey in CIE a*b* (OpenCV's 8-bit scale).
    """
    small = np.ascontiguousarray(rgb[::8, ::8])
    lab = cv2.cvtColor(small, cv2.COLOR_RGB2LAB).astype(np.float32)
    chroma = np.hypot(lab[..., 1] - 128.0, lab[..., 2] - 128.0)
    return float(np.mean(chroma > min_chroma)) > min_share


def undo_negative(gray: np.ndarray) -> np.ndarray | None:
    """Black on white from a white-on-black page, or None when the page is not a negative.

    A page is a negative when most of it is dark: its median grey is under
    96 and its brightest tenth is much brighter than its median (there is
    writing, it is not simply an empty black frame).
    """
    small = gray[::4, ::4]
    median = float(np.median(small))
    if median >= 96 or float(np.percentile(small, 99)) - median < 60:
        return None
    return 255 - gray


def _order(quad: np.ndarray) -> np.ndarray:
    """Corners as top left, top right, bottom right, bottom left."""
    s, d = quad.sum(axis=1), quad[:, 0] - quad[:, 1]
    return np.array([quad[np.argmin(s)], quad[np.argmax(d)], quad[np.argmax(s)], quad[np.argmin(d)]])


def _corner_angles(corners: np.ndarray) -> np.ndarray:
    out = []
    for i in range(4):
        a, b, c = corners[i - 1], corners[i], corners[(i + 1) % 4]
        u, v = a - b, c - b
        cos = float(np.dot(u, v) / max(np.linalg.norm(u) * np.linalg.norm(v), 1e-9))
        out.append(np.degrees(np.arccos(np.clip(cos, -1.0, 1.0))))
    return np.array(out)
