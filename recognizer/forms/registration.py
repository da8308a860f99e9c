"""Aligning a page to a template's reference page, and judging how well it fits.

A page is registered in four steps, all on the pages' ink seen at
:data:`FEATURES_DPI` (100 dpi: fast, and fine enough for 6 mm boxes):

1. *Ink* (:func:`page_ink`): the page is resampled to 100 dpi (from the
   resolution the scan states), its paper level (a 5 mm grey dilation) divided
   out and the darkness kept (0 = paper, 255 = ink); light noise under 10 %
   darkness is dropped.
2. *Features*: ORB keypoints (Rublee et al., 2011) of the page are matched to
   the reference's by Hamming distance with Lowe's ratio test (0.8); a
   similarity transform (rotation, one scale, shift) is fitted with RANSAC
   (3 px tolerance at 100 dpi). ORB descriptors follow the keypoints'
   orientation, so a page scanned upside down matches at about 180 degrees
   and is turned like any other rotation. The fit is *plausible* when at
   least :data:`MIN_INLIERS` matches agree, the scale lies in 0.85-1.15 and
   the rotation within 12 degrees of upright or of upside down.  When the
   page's dpi is a guess (a phone photo flattened to the paper size it
   matches -- A4 and A5 have the same shape -- or a file that states no
   resolution), any scale in 0.45-2.2 is taken and the later steps keep
   0.85-1.15 around it.
3. *Refinement*: the page is warped onto the reference by that fit, and the
   enhanced correlation coefficient method (ECC; Evangelidis & Psarakis,
   2008) aligns the smoothed masks of its straight printed lines (see 4) to
   the reference's with a full affine map (which also absorbs a scanner's
   small difference between its x and y scales). A refinement that does not
   converge, or that ends implausible (scale outside 0.85-1.15, shear over
   3 %, a shift over 10 px at 100 dpi), is dropped.
4. *Quality* (the registration score, 0..1): the page is warped onto the
   reference, and the straight printed lines of both (runs of ink at least
   4 mm long, horizontal or vertical) are compared, a line pixel of one
   counting as found when the other has one within 0.25 mm. The score is
   the smaller of the F1 measure over all lines and the share of the
   template's box walls found on the page; the refinement is dropped when
   it scores 0.05 below the feature fit (it slid off into a wrong fit). Handwriting adds few straight
   lines and a faint, broken or crossed line still mostly overlaps, while
   another form design shares few lines with the reference, and a design
   that differs only in where its boxes stand loses the box walls. Pages
   below :data:`MIN_SCORE` do not match the template.

   *Dark print* (forms whose boxes are printed in a light dropout colour).
   A black-and-white (1-bit, fax-like) scan, or a scanner's colour dropout,
   loses such boxes: only the dark print (title, emblem, corner marks,
   black text) and the handwriting remain, and the line score finds no box
   walls. When the reference's box walls are light (90 % of their line
   pixels lighter than 128 of 255) or absent, the template also keeps its
   *dark print*: the reference ink darker than 160 of 255 (a darkness
   threshold: the template's reference is the grey ink of a colour or grey
   blank, where dropout colours read far lighter than black print), outside
   the *field areas* (each field's boxes grown by 2 mm, where the
   handwriting is). The page's ink (darker than 64 of 255) outside the field
   areas and off the reference's light print (its lighter ink, away from the
   dark print's own soft edges by 0.5 mm: a page may show it or not, grey
   and colour captures keep it, black-and-white ones mostly lose it) is
   compared with that dark print, a pixel found when the other has one
   within 0.25 mm, *piece by piece*: ink closer than 1 mm is one piece (a
   word, a mark; specks under 0.3 mm^2 are left out), recall is the mean
   share found over the reference's pieces, precision the mean over the
   page's pieces, and the print score is their F1. Every piece counts alike,
   whatever its size, so a letterhead shared by the forms of one office (a
   bold title and an emblem: most of the dark print by area) is a few pieces
   among many, and another design's own text and marks, or handwriting that
   stands outside the template's fields, count against it. The registration
   score of such a template is the larger of the line score and the print
   score; when the print score is the larger, step 3 aligns the smoothed
   dark print (outside the field areas, the page's ink on the light print
   left out) instead of the lines. Limits: two designs that share their dark
   print and differ only in their dropout print are told apart on a
   black-and-white page only by where the handwriting stands (boxes moved by
   a box height score about 0.4 when the dropout print has vanished, but
   about 0.7 when a dark scanner setting keeps it in fragments: offer both
   templates and the page goes to its own); a page that lost most of its
   dark print (its title cut off) does not register.

The result, :class:`Registration`, holds the affine map from reference
pixels (at the reference's dpi) to page pixels, in pixel-edge coordinates:
pixel (row r, column c) covers ``[c, c + 1) x [r, r + 1)``.

The thresholds (ratio 0.8, 3 px, 12 inliers, 0.85-1.15, line length 4 mm,
score 0.5, line darkness 35 of 255) are common practice tuned on
generated weigh-in cards, no source. Those of the dark print (light walls
128, dark print 160, page ink 64 of 255, field margin 2 mm, soft edge
0.5 mm, pieces 1 mm apart and at least 0.3 mm^2, at least 20 mm^2 of dark
print) are tuned on generated cards, no source. (The module is longer than
600 lines for the dark print: it is built from the same reference, scored
and refined within the same steps as the lines, and stays beside them.)
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import cv2
import numpy as np

from recognizer.page.boxes import MM_PER_INCH, Box, BoxFinding, FieldBoxes, as_gray_page
from recognizer.forms.template import Reference, Template

__all__ = [
    "FEATURES_DPI",
    "MIN_INLIERS",
    "MIN_SCORE",
    "Registrar",
    "Registration",
    "TemplateMatch",
    "match_templates",
    "map_boxes",
    "page_ink",
    "reference_for",
]

FEATURES_DPI = 100.0
MIN_INLIERS = 12
MIN_SCORE = 0.5

_PAPER_WINDOW_MM = 5.0
_NOISE_DARKNESS = 25     # of 255: lighter ink is dropped
_LINE_DARKNESS = 35      # of 255: ink for the line masks
_LINE_MM = 4.0           # a straight line is at least this long
_TOLERANCE_PX = 1        # line pixels agree within this many pixels (0.25 mm at 100 dpi)
_RATIO = 0.8             # Lowe's ratio test
_RANSAC_PX = 3.0
_SCALE_RANGE = (0.85, 1.15)
# When the page's dpi is a guess (a phone photo flattened to the paper size it matches, or a
# file without a resolution), the paper may be another size of the same shape (A4 and A5 differ
# by sqrt(2)); the feature fit then takes any scale in this range and the refinement keeps the
# ordinary range around the scale found.
_GUESSED_SCALE_RANGE = (0.45, 2.2)
_MAX_TILT_DEG = 12.0
_MAX_SHEAR = 0.03
_REFINE_SLACK = 0.05     # a refinement is kept unless it scores this much worse
_ORB_FEATURES = 4000
# The dark print of templates whose box walls are a light (dropout) print (module notes, step 4);
# tuned on generated cards, no source.
_LIGHT_WALLS = 128       # of 255: walls lighter than this (their 90th percentile) are a light print
_DARK_PRINT = 160        # of 255: reference print darker than this stays on a black-and-white scan
_PAGE_PRINT_DARKNESS = 64  # of 255: the page's ink compared with the dark print
_FIELD_MARGIN_MM = 2.0   # around a field's boxes: handwriting, left out of the print layer
_MIN_DARK_PRINT_MM2 = 20.0  # less dark print than this: nothing to register on
_FRINGE_MM = 0.5         # the soft edge of the dark print, not light print
_PIECE_GAP_MM = 1.0      # print closer than this is one piece (a word, a mark)
_MIN_PIECE_MM2 = 0.3     # smaller pieces (specks) are not counted


def page_ink(image: np.ndarray, *, dpi: float, features_dpi: float = FEATURES_DPI) -> np.ndarray:
    """The ink of a page at ``features_dpi``.

    Parameters
    ----------
    image : (M, N) uint8 ndarray
        The page, 0 = ink, 255 = paper.
    dpi : float
        Resolution of ``image``.
    features_dpi : float
        Resolution of the result.

    Returns
    -------
    numpy.ndarray
        (round(M * f), round(N * f)) uint8 with ``f = features_dpi / dpi``:
        darkness against the local paper level, 0 = paper, 255 = black ink.
    """
    gray = as_gray_page(image)
    f = features_dpi / float(dpi)
    small = cv2.resize(gray, None, fx=f, fy=f, interpolation=cv2.INTER_AREA if f < 1 else cv2.INTER_LINEAR)
    k = _odd(_PAPER_WINDOW_MM * features_dpi / MM_PER_INCH)
    paper = cv2.dilate(small, cv2.getStructuringElement(cv2.MORPH_RECT, (k, k)))
    ratio = small.astype(np.float32) / np.maximum(paper.astype(np.float32), 1.0)
    dark = np.clip(255.0 * (1.0 - ratio), 0, 255).astype(np.uint8)
    dark[dark < _NOISE_DARKNESS] = 0
    return dark


def reference_for(image: np.ndarray, *, dpi: float) -> Reference:
    """The :class:`~recognizer.forms.template.Reference` of a page whose box coordinates are at ``dpi``."""
    gray = as_gray_page(image)
    return Reference(float(dpi), gray.shape[1], gray.shape[0], FEATURES_DPI, page_ink(gray, dpi=dpi))


def _odd(x: float) -> int:
    return max(3, int(round(x)) | 1)


@dataclass
class Registration:
    """How a page lies against a template's reference.

    Attributes
    ----------
    matrix : numpy.ndarray
        (2, 3) float64 affine map from reference pixels (at the reference's
        dpi) to page pixels (at the page's dpi), pixel-edge coordinates.
    score : float
        Registration quality 0..1 (see the module notes); 0 when the page
        could not be registered at all.
    inliers : int
        Feature matches that agree with the transform.
    rotation_deg : float
        Rotation of the page against the reference, degrees counter-clockwise
        as seen on the page, in (-180, 180]; near 180 for a page upside down.
    scale : float
        Size of the form on the page against the reference (1 = as expected
        from the two dpi values).
    problem : str or None
        Why the page could not be registered.
    layer : str
        What the score compares: ``"lines"``, the straight printed lines
        with the box walls; ``"print"``, the dark print outside the fields,
        for a template whose boxes are a light (dropout) print the page need
        not show (see the module notes, step 4).
    """

    matrix: np.ndarray = field(default_factory=lambda: np.eye(2, 3))
    score: float = 0.0
    inliers: int = 0
    rotation_deg: float = 0.0
    scale: float = 1.0
    problem: str | None = None
    layer: str = "lines"

    def __bool__(self) -> bool:
        return self.problem is None

    @property
    def upside_down(self) -> bool:
        return abs(self.rotation_deg) > 90

    def to_page(self, x, y):
        """Map reference pixel-edge coordinates (scalars or arrays) to the page."""
        xs, ys = np.asarray(x, np.float64), np.asarray(y, np.float64)
        m = self.matrix
        return m[0, 0] * xs + m[0, 1] * ys + m[0, 2], m[1, 0] * xs + m[1, 1] * ys + m[1, 2]


class Registrar:
    """Registers pages to one reference; builds the reference's features once.

    Parameters
    ----------
    template : Template
        The template whose reference and field boxes pages are registered to.
    min_score : float
        Pages scoring below this do not match (their :class:`Registration`
        carries a problem).
    """

    def __init__(self, template: Template, *, min_score: float = MIN_SCORE):
        self.template = template
        self.reference = reference = template.reference
        self.min_score = min_score
        self._orb = cv2.ORB_create(nfeatures=_ORB_FEATURES, scaleFactor=1.2, nlevels=6,
                                   edgeThreshold=15, patchSize=31, fastThreshold=10)
        self._keypoints, self._descriptors = self._orb.detectAndCompute(reference.image, None)
        self._lines = _line_mask(reference.image, reference.features_dpi)
        self._smooth_lines = _smooth(self._lines)
        self._lines_near = cv2.dilate(self._lines, _tolerance_kernel())
        shape = reference.image.shape
        walls = _box_walls(template, shape)
        self._field_lines = self._lines & walls
        # a template whose boxes are a light (dropout) print: its dark print, else None
        self._print = _dark_print(reference.image, walls, _field_areas(template, shape), reference.features_dpi)

    def register(self, image: np.ndarray, *, dpi: float, dpi_known: bool = True) -> Registration:
        """Register a page; never raises on odd page content.

        Parameters
        ----------
        image : (M, N) uint8 ndarray
            The page, 0 = ink.
        dpi : float
            Its resolution (150..600 expected).
        dpi_known : bool
            False when ``dpi`` is a guess (from the page's pixel size, or a
            phone photo's paper size): the scale is then found, not checked
            against 0.85-1.15 (see ``_GUESSED_SCALE_RANGE``).

        Returns
        -------
        Registration
            Falsy, with ``problem`` set, when no plausible alignment was found or
            the score is below ``min_score`` (the score is kept for reporting).
        """
        ink = page_ink(image, dpi=dpi, features_dpi=self.reference.features_dpi)
        work = self._features_fit(ink, _SCALE_RANGE if dpi_known else _GUESSED_SCALE_RANGE)
        if isinstance(work, str):
            return Registration(problem=work)
        work, inliers = work
        score, layer = self._score(ink, work)
        scale = 1.0 if dpi_known else _rotation_scale(work)[1]
        refined = self._refine_on_print(ink, work, scale) if layer == "print" else self._refine(ink, work, scale)
        refined_score, refined_layer = self._score(ink, refined)
        if refined_score >= score - _REFINE_SLACK:
            work, score, layer = refined, refined_score, refined_layer
        reg = Registration(self._full_resolution(work, dpi), score, inliers, *_rotation_scale(work), layer=layer)
        if score < self.min_score:
            reg.problem = (f"the page does not match this template (registration score "
                           f"{score:.2f}, at least {self.min_score:.2f} needed)")
        return reg

    # steps, all on features_dpi images with pixel-index coordinates

    def _features_fit(self, ink: np.ndarray, scale_range: tuple[float, float]) -> tuple[np.ndarray, int] | str:
        keypoints, descriptors = self._orb.detectAndCompute(ink, None)
        if descriptors is None or self._descriptors is None or len(keypoints) < MIN_INLIERS:
            return "the page does not match this template (too few features on the page)"
        pairs = cv2.BFMatcher(cv2.NORM_HAMMING).knnMatch(self._descriptors, descriptors, k=2)
        good = [p[0] for p in pairs if len(p) == 2 and p[0].distance < _RATIO * p[1].distance]
        if len(good) < MIN_INLIERS:
            return "the page does not match this template (too few matching features)"
        src = np.float32([self._keypoints[m.queryIdx].pt for m in good])
        dst = np.float32([keypoints[m.trainIdx].pt for m in good])
        matrix, mask = cv2.estimateAffinePartial2D(src, dst, method=cv2.RANSAC,
                                                   ransacReprojThreshold=_RANSAC_PX,
                                                   maxIters=5000, confidence=0.999)
        inliers = int(mask.sum()) if mask is not None else 0
        if matrix is None or inliers < MIN_INLIERS:
            return "the page does not match this template (no consistent feature matches)"
        rotation, scale = _rotation_scale(matrix)
        tilt = min(abs(rotation), 180 - abs(rotation))
        if not scale_range[0] <= scale <= scale_range[1] or tilt > _MAX_TILT_DEG:
            return (f"the page does not match this template (implausible alignment: "
                    f"rotation {rotation:.1f} degrees, scale {scale:.2f})")
        return matrix, inliers

    def _refine(self, ink: np.ndarray, matrix: np.ndarray, scale: float = 1.0) -> np.ndarray:
        """ECC on the straight printed lines."""
        lines = _line_mask(self._on_reference(ink, matrix), self.reference.features_dpi)
        return _ecc(self._smooth_lines, lines, matrix, scale, iterations=40)

    def _refine_on_print(self, ink: np.ndarray, matrix: np.ndarray, scale: float = 1.0) -> np.ndarray:
        """ECC on the dark print outside the fields (a page that does not show the box walls)."""
        assert self._print is not None
        page = self._print_mask(self._on_reference(ink, matrix))
        return _ecc(self._print.smooth, page, matrix, scale, iterations=60)

    def _on_reference(self, ink: np.ndarray, matrix: np.ndarray) -> np.ndarray:
        """The page's ink warped onto the reference by ``matrix`` (reference -> page, index coordinates)."""
        ref = self.reference.image
        return cv2.warpAffine(ink, matrix, (ref.shape[1], ref.shape[0]),
                              flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                              borderMode=cv2.BORDER_CONSTANT, borderValue=0)

    def _score(self, ink: np.ndarray, matrix: np.ndarray) -> tuple[float, str]:
        """The registration score of ``matrix`` and the layer it comes from (``"lines"`` or ``"print"``)."""
        on = self._on_reference(ink, matrix)
        lines = _line_mask(on, self.reference.features_dpi)
        score = self._line_score(lines)
        if self._print is not None:
            on_print = self._print_score(on)
            if on_print > score:
                return on_print, "print"
        return score, "lines"

    def _line_score(self, lines: np.ndarray) -> float:
        n_ref, n_page, n_fields = int(self._lines.sum()), int(lines.sum()), int(self._field_lines.sum())
        if min(n_ref, n_page, n_fields) == 0:
            return 0.0
        lines_near = cv2.dilate(lines, _tolerance_kernel())
        fields = float((self._field_lines & lines_near).sum()) / n_fields
        return min(_f1(self._lines, self._lines_near, lines, lines_near), fields)

    def _print_mask(self, on: np.ndarray) -> np.ndarray:
        """The page's ink (on the reference) that the dark print is compared with: the fields and the
        light print left out."""
        assert self._print is not None
        return (on >= _PAGE_PRINT_DARKNESS).astype(np.uint8) & self._print.counted

    def _print_score(self, on: np.ndarray) -> float:
        layer = self._print
        assert layer is not None
        page = self._print_mask(on)
        dpi = self.reference.features_dpi
        precision = _found_by_piece(page, layer.dark_near, dpi)
        if precision is None:
            return 0.0
        recall = _found_by_piece(layer.dark, cv2.dilate(page, _tolerance_kernel()), dpi, layer.pieces)
        if not recall or not precision:
            return 0.0
        return 2 * recall * precision / (recall + precision)

    def _full_resolution(self, matrix: np.ndarray, dpi: float) -> np.ndarray:
        """Index-coordinate map between feature images -> edge-coordinate map reference -> page."""
        fd = self.reference.features_dpi
        edge = _index_to_edge(matrix)
        to_features = np.diag([fd / self.reference.dpi, fd / self.reference.dpi, 1.0])
        to_page = np.diag([dpi / fd, dpi / fd, 1.0])
        return (to_page @ _h(edge) @ to_features)[:2]


def _ecc(reference: np.ndarray, page: np.ndarray, matrix: np.ndarray, scale: float, *, iterations: int
         ) -> np.ndarray:
    """``matrix`` refined by ECC, aligning the page's 0/1 mask (warped onto the reference by
    ``matrix``), smoothed, with the reference's smoothed one; ``matrix`` itself when ECC fails or
    the refined map is implausible."""
    warp = np.eye(2, 3, dtype=np.float32)
    criteria = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, iterations, 1e-4)
    try:
        _, warp = cv2.findTransformECC(reference, _smooth(page), warp, cv2.MOTION_AFFINE, criteria, None, 1)
    except cv2.error:
        return matrix
    refined = (_h(matrix) @ _h(warp.astype(np.float64)))[:2]
    return refined if _plausible_affine(refined, matrix, scale) else matrix


def _f1(ref: np.ndarray, ref_near: np.ndarray, page: np.ndarray, page_near: np.ndarray) -> float:
    """F1 of two 0/1 masks, a pixel of one found when the other (``*_near``: dilated) has one close."""
    n_ref, n_page = int(ref.sum()), int(page.sum())
    if min(n_ref, n_page) == 0:
        return 0.0
    recall = float((ref & page_near).sum()) / n_ref
    precision = float((page & ref_near).sum()) / n_page
    return 0.0 if recall + precision == 0 else 2 * recall * precision / (recall + precision)


@dataclass(frozen=True)
class _PrintLayer:
    """The dark print of a reference whose box walls are light (a dropout print), at features dpi.

    ``dark``: 0/1 dark print outside the fields; ``dark_near``: it grown by the tolerance;
    ``smooth``: it smoothed for ECC; ``counted``: 0/1 where page ink counts (not in the fields,
    not on the light print).
    """

    dark: np.ndarray
    dark_near: np.ndarray
    smooth: np.ndarray
    counted: np.ndarray
    pieces: tuple[np.ndarray, np.ndarray]


def _dark_print(ref: np.ndarray, walls: np.ndarray, fields: np.ndarray, dpi: float) -> _PrintLayer | None:
    """The dark print of a reference whose box walls are a light print or absent; None when they are
    dark, or when there is too little dark print to register on.

    ``ref`` is the reference ink, ``walls`` the band along the box walls (:func:`_box_walls`),
    ``fields`` the field areas (:func:`_field_areas`), all at features dpi ``dpi``.
    """
    wall_ink = ref[(walls > 0) & (ref >= _LINE_DARKNESS)]
    if wall_ink.size and float(np.percentile(wall_ink, 90)) >= _LIGHT_WALLS:
        return None
    outside = 1 - fields
    dark = (ref >= _DARK_PRINT).astype(np.uint8) & outside
    if int(dark.sum()) < _MIN_DARK_PRINT_MM2 * (dpi / MM_PER_INCH) ** 2:
        return None
    near = cv2.dilate(dark, _tolerance_kernel())
    # the light print: lighter ink away from the dark print's own soft edges (0.5 mm), and 0.25 mm round it
    fringe = _odd(2 * _FRINGE_MM * dpi / MM_PER_INCH)
    around = cv2.dilate(dark, cv2.getStructuringElement(cv2.MORPH_RECT, (fringe, fringe)))
    light = cv2.dilate(((ref > 0) & (around == 0)).astype(np.uint8), _tolerance_kernel()) & (1 - around)
    return _PrintLayer(dark, near, _smooth(dark), outside & (1 - light), _pieces(dark, dpi))


def _pieces(mask: np.ndarray, dpi: float) -> tuple[np.ndarray, np.ndarray]:
    """The pieces of a 0/1 mask: (label of every mask pixel in ``mask.nonzero()`` order, pixels per label).

    Ink within :data:`_PIECE_GAP_MM` of each other is one piece (the letters of a word, a mark).
    """
    gap = _odd(_PIECE_GAP_MM * dpi / MM_PER_INCH)
    groups = cv2.dilate(mask, cv2.getStructuringElement(cv2.MORPH_RECT, (gap, gap)))
    _, labels = cv2.connectedComponents(groups, connectivity=8)
    of_pixels = labels[mask > 0]
    return of_pixels, np.bincount(of_pixels)


def _found_by_piece(mask: np.ndarray, near: np.ndarray, dpi: float,
                    pieces: tuple[np.ndarray, np.ndarray] | None = None) -> float | None:
    """The mean over the pieces of ``mask`` of the share of their pixels that ``near`` covers; pieces
    under :data:`_MIN_PIECE_MM2` are left out. None when no piece is left."""
    of_pixels, sizes = pieces if pieces is not None else _pieces(mask, dpi)
    if not of_pixels.size:
        return None
    hits = np.bincount(of_pixels, weights=near[mask > 0].astype(np.float64), minlength=sizes.size)
    keep = sizes >= _MIN_PIECE_MM2 * (dpi / MM_PER_INCH) ** 2
    if not keep.any():
        return None
    return float(np.mean(hits[keep] / sizes[keep]))


def _field_areas(template: Template, shape: tuple[int, int]) -> np.ndarray:
    """(H, W) uint8 0/1 at features dpi: every field's boxes, grown by :data:`_FIELD_MARGIN_MM` (handwriting)."""
    f = template.reference.features_dpi / template.reference.dpi
    grow = _FIELD_MARGIN_MM * template.reference.features_dpi / MM_PER_INCH
    mask = np.zeros(shape, np.uint8)
    for spec in template.fields:
        x0 = min(b.x0 for b in spec.boxes) * f - grow
        y0 = min(b.y0 for b in spec.boxes) * f - grow
        x1 = max(b.x1 for b in spec.boxes) * f + grow
        y1 = max(b.y1 for b in spec.boxes) * f + grow
        cv2.rectangle(mask, (int(math.floor(x0)), int(math.floor(y0))), (int(math.ceil(x1)), int(math.ceil(y1))),
                      1, -1)
    return mask


def _smooth(mask: np.ndarray) -> np.ndarray:
    return cv2.GaussianBlur(mask.astype(np.float32), (0, 0), 1.0)


def _line_mask(ink: np.ndarray, dpi: float) -> np.ndarray:
    """(H, W) uint8 0/1: pixels of straight horizontal or vertical lines at least 4 mm long."""
    binary = (ink >= _LINE_DARKNESS).astype(np.uint8)
    n = max(3, int(round(_LINE_MM * dpi / MM_PER_INCH)))
    across = cv2.morphologyEx(binary, cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_RECT, (n, 1)))
    down = cv2.morphologyEx(binary, cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_RECT, (1, n)))
    return across | down


def _box_walls(template: Template, shape: tuple[int, int]) -> np.ndarray:
    """(H, W) uint8 0/1 at features dpi: a band 0.5 mm either side of every field box's walls."""
    f = template.reference.features_dpi / template.reference.dpi
    band = max(1, int(round(0.5 * template.reference.features_dpi / MM_PER_INCH)))
    mask = np.zeros(shape, np.uint8)
    for spec in template.fields:
        for b in spec.boxes:
            corners = (int(round(b.x0 * f)), int(round(b.y0 * f))), (int(round(b.x1 * f)) - 1, int(round(b.y1 * f)) - 1)
            cv2.rectangle(mask, *corners, 1, 2 * band + 1)
    return mask


def _tolerance_kernel() -> np.ndarray:
    side = 2 * _TOLERANCE_PX + 1
    return cv2.getStructuringElement(cv2.MORPH_RECT, (side, side))


def _h(matrix: np.ndarray) -> np.ndarray:
    return np.vstack([matrix, [0.0, 0.0, 1.0]])


def _index_to_edge(matrix: np.ndarray) -> np.ndarray:
    """Turn a 2x3 map in pixel-index coordinates into one in pixel-edge coordinates."""
    shift = np.array([[1.0, 0, 0.5], [0, 1.0, 0.5], [0, 0, 1.0]])
    return (shift @ _h(matrix) @ np.linalg.inv(shift))[:2]


def _edge_to_index(matrix: np.ndarray) -> np.ndarray:
    shift = np.array([[1.0, 0, -0.5], [0, 1.0, -0.5], [0, 0, 1.0]])
    return (shift @ _h(matrix) @ np.linalg.inv(shift))[:2]


def _rotation_scale(matrix: np.ndarray) -> tuple[float, float]:
    """Rotation (degrees, counter-clockwise as seen on the image) and mean scale of a 2x3 map."""
    a = matrix[:, :2]
    scale = math.sqrt(abs(float(np.linalg.det(a))))
    # image y runs down, so a counter-clockwise turn on the image has a negative angle in (x, y)
    return -math.degrees(math.atan2(a[1, 0] - a[0, 1], a[0, 0] + a[1, 1])), scale


def _plausible_affine(refined: np.ndarray, start: np.ndarray, scale: float = 1.0) -> bool:
    """A refinement keeps the scale range (around ``scale``), little shear and stays near where it started."""
    a = refined[:, :2]
    sx, sy = np.linalg.norm(a[:, 0]), np.linalg.norm(a[:, 1])
    shear = abs(float(a[:, 0] @ a[:, 1])) / (sx * sy)
    moved = np.abs(refined - start)[:, 2].max()
    lo, hi = _SCALE_RANGE[0] * scale, _SCALE_RANGE[1] * scale
    return lo <= sx <= hi and lo <= sy <= hi and shear <= _MAX_SHEAR and moved < 10.0


def map_boxes(boxes: Sequence[Box], *, factor: float) -> tuple[Box, ...]:
    """Scale reference boxes by ``factor`` (the registered image's dpi / the reference's)."""
    return tuple(Box(int(round(b.x0 * factor)), int(round(b.y0 * factor)),
                     int(round(b.x1 * factor)), int(round(b.y1 * factor))) for b in boxes)


@dataclass
class TemplateMatch:
    """A page registered to the template it fits best, ready to be read.

    ``finding`` is a :class:`~recognizer.page.boxes.BoxFinding` whose image is the
    page warped onto the reference at ``dpi`` (the page's own resolution), with
    the template's fields and names; its ``transform`` maps page coordinates
    to it. ``scores`` holds every template's registration score by label.
    Falsy, with ``problem`` set, when no template fits; ``finding`` is then
    None.
    """

    template: Template | None
    registration: Registration
    finding: BoxFinding | None
    scores: dict[str, float]
    problem: str | None = None

    def __bool__(self) -> bool:
        return self.problem is None


def match_templates(image: np.ndarray, *, dpi: float, registrars: Sequence[Registrar],
                    dpi_known: bool = True) -> TemplateMatch:
    """Register a page to every template and align it to the best one.

    Parameters
    ----------
    image : (M, N) uint8 ndarray
        The page, 0 = ink.
    dpi : float
        Its resolution.
    registrars : sequence of Registrar
        One per template of the batch.
    dpi_known : bool
        False when ``dpi`` is a guess (see :meth:`Registrar.register`).

    Returns
    -------
    TemplateMatch
    """
    if not registrars:
        raise ValueError("no templates to match")
    gray = as_gray_page(image)
    tries = [(r.template, r.register(gray, dpi=dpi, dpi_known=dpi_known)) for r in registrars]
    scores = {t.label: reg.score for t, reg in tries}
    template, best = max(tries, key=lambda tr: (bool(tr[1]), tr[1].score))
    if not best:
        if len(tries) == 1:
            problem = best.problem
        else:
            listed = ", ".join(f"{label} {score:.2f}" for label, score in scores.items())
            problem = f"the page matches none of the templates (registration scores: {listed})"
        return TemplateMatch(None, best, None, scores, problem)
    return TemplateMatch(template, best, _aligned_finding(gray, dpi, template, best), scores)


def _aligned_finding(gray: np.ndarray, dpi: float, template: Template, reg: Registration) -> BoxFinding:
    """Warp the page onto the reference at ``dpi`` and put the template's boxes on it."""
    ref = template.reference
    factor = dpi / ref.dpi
    size = (int(round(ref.width_px * factor)), int(round(ref.height_px * factor)))
    out_to_page = _h(reg.matrix) @ np.diag([1 / factor, 1 / factor, 1.0])
    image = cv2.warpAffine(gray, _edge_to_index(out_to_page[:2]), size,
                           flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                           borderMode=cv2.BORDER_CONSTANT, borderValue=255)
    outside = ("the field lies partly outside the scan",)
    fields = [FieldBoxes(f.name, map_boxes(f.boxes, factor=factor), 0,
                         () if _on_page(reg, f.boxes, gray.shape) else outside) for f in template.fields]
    return BoxFinding(image, dpi, reg.rotation_deg, fields, transform=np.linalg.inv(out_to_page)[:2])


def _on_page(reg: Registration, boxes: Sequence[Box], shape: tuple[int, int]) -> bool:
    corners = np.array([(x, y) for b in boxes for x in (b.x0, b.x1) for y in (b.y0, b.y1)], np.float64)
    px, py = reg.to_page(corners[:, 0], corners[:, 1])
    return bool(px.min() >= 0 and py.min() >= 0 and px.max() <= shape[1] and py.max() <= shape[0])

