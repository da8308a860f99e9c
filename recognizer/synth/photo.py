"""Phone photos of filled-in forms: our own camera model, with the truth carried along.

:func:`phone_photo` lays the page, at its true size, on a darker table or
desk (a seeded texture: wood, a grey desk or cloth), photographs it with a
pinhole camera tilted up to a few degrees from square-on and turned a little
(a homography), lights it unevenly with vignetting and a colour cast, blurs it
slightly out of focus, adds sensor noise and saves it as a JPEG that says 72
dpi, as phones write.  The truth is kept twice: every box as a quadrilateral
(and its bounds) in photo pixels, and the flat page's own rectangles at the
page's dpi, with the homography between the two.

Bad input for tests: :func:`photo_without_page` (a desk with a pen and a
sticky note, no form), ``phone_photo(..., tilt_deg=35)`` (extreme tilt) and
``phone_photo(..., cut_off=0.2)`` (the page running out of the frame).

Coordinates are continuous pixels, pixel (row r, column c) covering
``[c, c + 1) x [r, r + 1)``, in the photo and on the flat page alike.
"""

from __future__ import annotations

import io
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np
from PIL import Image

from recognizer.synth.capture import _illumination, save_scan
from recognizer.synth.colour import to_grey
from recognizer.synth.layouts import MM_PER_INCH
from recognizer.synth.render import Box, RenderedForm

PHONE_FRAME_PX = (4032, 3024)
"""A 12-megapixel phone photo, (long side, short side) in pixels."""

PHONE_FILE_DPI = 72
"""The resolution phones write into their JPEG files (it says nothing about the page)."""

BACKGROUNDS = ("wood", "desk", "cloth")

_FOCAL = 0.75
"""Focal length in units of the frame's long side (a phone's wide lens, about 26 mm equivalent)."""


@dataclass
class Photo:
    """A phone photo of a form and its truth.

    Attributes
    ----------
    image : numpy.ndarray
        (H, W) uint8 grey, the JPEG decoded as the scan reader decodes it.
    rgb : numpy.ndarray
        (H, W, 3) uint8, the JPEG decoded.
    dpi : int
        What the file says: 72.
    values, cells : dict
        As :class:`~recognizer.synth.render.RenderedForm`.
    boxes : dict
        Field name -> per box the axis-aligned bounds ``(x0, y0, x1, y1)`` of
        its quadrilateral in the photo (reading order, as the form's).
    quads : dict
        Field name -> per box a (4, 2) array of its inner rectangle's corners
        (top-left, top-right, bottom-right, bottom-left of the page) in the photo.
    page_boxes : dict
        The flat page's truth: ``form.boxes`` at ``page_dpi``.
    page_dpi : int
        Resolution of the flat page the photo was made from.
    page_size_px : (int, int)
        (width, height) of the flat page at ``page_dpi``.
    homography : numpy.ndarray or None
        (3, 3) map from flat-page pixels to photo pixels (None: no page).
    page_corners : numpy.ndarray or None
        (4, 2) the sheet's corners in the photo (top-left, top-right,
        bottom-right, bottom-left of the page).
    tilt_deg, roll_deg, fill : float
        The camera's tilt from square-on, its turn about the view axis (counter-
        clockwise as seen on the photo) and the share of the frame the page spans.
    jpeg : bytes
        The file as a phone would write it.
    """

    image: np.ndarray
    rgb: np.ndarray
    dpi: int
    values: dict[str, str]
    cells: dict[str, list[str]]
    boxes: dict[str, list[Box]]
    quads: dict[str, list[np.ndarray]]
    page_boxes: dict[str, list[Box]]
    page_dpi: int
    page_size_px: tuple[int, int]
    homography: np.ndarray | None
    page_corners: np.ndarray | None
    tilt_deg: float = 0.0
    roll_deg: float = 0.0
    fill: float = 0.0
    jpeg: bytes = field(default=b"", repr=False)
    styles: dict[str, str] = field(default_factory=dict)
    colours: dict[str, str] = field(default_factory=dict)
    ink: str = "black"

    def to_photo(self, points: np.ndarray) -> np.ndarray:
        """Flat-page points (n, 2) -> photo points (n, 2)."""
        return _apply(self._homography(), points)

    def to_page(self, points: np.ndarray) -> np.ndarray:
        """Photo points (n, 2) -> flat-page points (n, 2), through the inverse homography."""
        return _apply(np.linalg.inv(self._homography()), points)

    def rectified(self, *, colour: bool = False) -> np.ndarray:
        """The photo warped back to the flat page at ``page_dpi`` (what a perfect rectifier gives)."""
        source = self.rgb if colour else self.image
        inverse = _index_matrix(np.linalg.inv(self._homography()))
        return cv2.warpPerspective(source, inverse, self.page_size_px, flags=cv2.INTER_LINEAR,
                                   borderMode=cv2.BORDER_CONSTANT, borderValue=0)

    def fields_inside(self) -> list[str]:
        """The fields whose boxes lie wholly inside the frame, in reading order."""
        height, width = self.image.shape
        return [name for name, quads in self.quads.items()
                if all(((q >= 0) & (q <= (width, height))).all() for q in quads)]

    def save(self, path: str | Path) -> None:
        """Write the photo: the phone's JPEG bytes for .jpg/.jpeg, else as a scan file at 72 dpi."""
        path = Path(path)
        if path.suffix.lower() in (".jpg", ".jpeg"):
            path.write_bytes(self.jpeg)
        else:
            save_scan(self.rgb, path, dpi=self.dpi)

    def _homography(self) -> np.ndarray:
        if self.homography is None:
            raise ValueError("this photo has no page in it")
        return self.homography


def _apply(matrix: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Apply a 3x3 homography to (n, 2) points."""
    pts = np.asarray(points, np.float64).reshape(-1, 2)
    moved = np.c_[pts, np.ones(len(pts))] @ matrix.T
    return moved[:, :2] / moved[:, 2:3]


def _index_matrix(matrix: np.ndarray) -> np.ndarray:
    """A continuous-pixel homography in OpenCV's pixel-index convention (centres at integers)."""
    shift = np.array([[1, 0, 0.5], [0, 1, 0.5], [0, 0, 1]])
    back = np.array([[1, 0, -0.5], [0, 1, -0.5], [0, 0, 1]])
    return back @ matrix @ shift


def camera_homography(page_mm: tuple[float, float], frame_px: tuple[int, int], *, tilt_deg: float,
                      tilt_axis_deg: float, roll_deg: float, fill: float,
                      place: tuple[float, float], cut_off: float = 0.0,
                      cut_side: str = "right") -> np.ndarray:
    """The homography from the page (mm) to the photo (continuous px) of a pinhole camera.

    The page is turned by ``roll_deg`` about the view axis and tilted by
    ``tilt_deg`` about an axis in its plane at ``tilt_axis_deg``, seen through a
    lens of focal length 0.75 frame long sides; the picture is then scaled so
    that the page's bounds span ``fill`` of the frame in the tighter direction
    and placed at ``place`` (0..1, 0..1: where the free room goes).  With
    ``cut_off > 0`` that share of the page's bounds lies beyond ``cut_side``.
    """
    width_mm, height_mm = page_mm
    frame_w, frame_h = frame_px
    focal = _FOCAL * max(frame_w, frame_h)
    axis = np.radians(tilt_axis_deg)
    tilt, _ = cv2.Rodrigues(np.array([np.cos(axis), np.sin(axis), 0.0]) * np.radians(tilt_deg))
    roll = np.radians(-roll_deg)  # counter-clockwise on the photo, whose y points down
    spin = np.array([[np.cos(roll), -np.sin(roll), 0], [np.sin(roll), np.cos(roll), 0], [0, 0, 1]])
    rotation = tilt @ spin
    distance = focal * max(page_mm) / (fill * max(frame_px))
    r1, r2 = rotation[:, 0], rotation[:, 1]
    t = np.array([0.0, 0.0, distance]) - width_mm / 2 * r1 - height_mm / 2 * r2
    h_mm = np.diag([focal, focal, 1.0]) @ np.c_[r1, r2, t]
    corners = _apply(h_mm, np.array([[0, 0], [width_mm, 0], [width_mm, height_mm], [0, height_mm]]))
    lo, hi = corners.min(axis=0), corners.max(axis=0)
    scale = fill / max((hi[0] - lo[0]) / frame_w, (hi[1] - lo[1]) / frame_h)
    size = (hi - lo) * scale
    offset = (np.array([frame_w, frame_h]) - size) * np.asarray(place, float)
    if cut_off > 0:
        axis_i = 0 if cut_side in ("left", "right") else 1
        frame = (frame_w, frame_h)[axis_i]
        offset[axis_i] = (frame - size[axis_i] * (1 - cut_off) if cut_side in ("right", "bottom")
                          else -size[axis_i] * cut_off)
    place_m = np.array([[scale, 0, offset[0] - scale * lo[0]],
                        [0, scale, offset[1] - scale * lo[1]], [0, 0, 1]])
    return place_m @ h_mm


def phone_photo(form: RenderedForm, *, rng: np.random.Generator,
                frame_px: tuple[int, int] | None = None, fill: float | None = None,
                tilt_deg: float | None = None, roll_deg: float | None = None,
                lighting: float | None = None, vignette: float | None = None,
                blur: float | None = None, noise: float | None = None,
                quality: int | None = None, background: str | None = None,
                cut_off: float = 0.0, cut_side: str = "right") -> Photo:
    """Photograph ``form`` with a phone (our model); every unset knob is drawn from ``rng``.

    Parameters
    ----------
    form : RenderedForm
        The flat page (grey or colour); its page size is ``image.shape`` at ``dpi``.
    rng : numpy.random.Generator
    frame_px : (int, int), optional
        (width, height) of the photo; default 4032 x 3024, turned like the page.
    fill : float, optional
        Share of the frame the page's bounds span in the tighter direction
        (default 0.70..0.90).
    tilt_deg, roll_deg : float, optional
        Tilt from square-on, 0..60 (default 0..8, about a random axis in the
        page), and turn about the view axis (default -4..4).
    lighting, vignette : float, optional
        Depth of uneven light (default 0.10..0.35) and of the darkening towards
        the corners (default 0.15..0.35).
    blur : float, optional
        Defocus, gaussian sigma in photo pixels (default 0.6..1.4).
    noise : float, optional
        Sensor noise in grey levels at mid grey (default 2..5).
    quality : int, optional
        JPEG quality (default 80..92).
    background : str, optional
        One of :data:`BACKGROUNDS` (default: any).
    cut_off : float
        Share of the page's bounds put beyond the frame's ``cut_side``
        (``"left"``, ``"right"``, ``"top"``, ``"bottom"``); 0 keeps it all in.
    """
    page = form.rgb if form.rgb is not None else np.repeat(form.image[..., None], 3, axis=2)
    page_h, page_w = page.shape[:2]
    page_mm = (page_w / form.dpi * MM_PER_INCH, page_h / form.dpi * MM_PER_INCH)
    if frame_px is None:
        long_px, short_px = PHONE_FRAME_PX
        frame_px = (short_px, long_px) if page_h > page_w else (long_px, short_px)
    fill = float(rng.uniform(0.7, 0.9)) if fill is None else float(fill)
    tilt_deg = float(rng.uniform(0.0, 8.0)) if tilt_deg is None else float(tilt_deg)
    roll_deg = float(rng.uniform(-4.0, 4.0)) if roll_deg is None else float(roll_deg)
    if not 0 <= tilt_deg <= 60 or not 0 < fill <= 1 or not 0 <= cut_off < 1:
        raise ValueError("need 0 <= tilt_deg <= 60, 0 < fill <= 1 and 0 <= cut_off < 1")
    if cut_side not in ("left", "right", "top", "bottom"):
        raise ValueError(f"unknown side {cut_side!r}")
    h_mm = camera_homography(page_mm, frame_px, tilt_deg=tilt_deg,
                             tilt_axis_deg=float(rng.uniform(0, 360)), roll_deg=roll_deg,
                             fill=fill, place=tuple(rng.uniform(0.15, 0.85, 2)),
                             cut_off=cut_off, cut_side=cut_side)
    to_mm = np.diag([MM_PER_INCH / form.dpi, MM_PER_INCH / form.dpi, 1.0])
    homography = h_mm @ to_mm
    knobs = _Knobs.draw(rng, lighting, vignette, blur, noise, quality, background)
    scene = _scene(page, homography, frame_px, knobs, rng)
    rgb, grey, jpeg = _encode(scene, knobs.quality)
    quads = {name: [_apply(homography, np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]]))
                    for x0, y0, x1, y1 in rects] for name, rects in form.boxes.items()}
    bounds = {name: [(float(q[:, 0].min()), float(q[:, 1].min()), float(q[:, 0].max()),
                      float(q[:, 1].max())) for q in qs] for name, qs in quads.items()}
    corners = _apply(homography, np.array([[0, 0], [page_w, 0], [page_w, page_h], [0, page_h]]))
    return Photo(grey, rgb, PHONE_FILE_DPI, dict(form.values),
                 {k: list(v) for k, v in form.cells.items()}, bounds, quads,
                 {k: list(v) for k, v in form.boxes.items()}, form.dpi, (page_w, page_h),
                 homography, corners, tilt_deg, roll_deg, fill, jpeg, dict(form.styles),
                 dict(form.colours), form.ink)


def photo_without_page(*, rng: np.random.Generator, frame_px: tuple[int, int] = PHONE_FRAME_PX,
                       background: str | None = None, quality: int | None = None) -> Photo:
    """A phone photo of a desk with a pen and a small sticky note on it, and no form."""
    knobs = _Knobs.draw(rng, None, None, None, None, quality, background)
    frame_w, frame_h = frame_px
    scene = _background(frame_w, frame_h, knobs.background, rng)
    scale = max(frame_px) / 4032
    note = np.array([[0, 0], [1, 0], [1, 1], [0, 1]], np.float64) * 300 * scale
    angle = np.radians(rng.uniform(0, 90))
    turn = np.array([[np.cos(angle), -np.sin(angle)], [np.sin(angle), np.cos(angle)]])
    note = note @ turn.T + rng.uniform(0.1, 0.6, 2) * frame_px
    cv2.fillConvexPoly(scene, note.astype(np.int32), (235, 220, 120), cv2.LINE_AA)
    start = rng.uniform(0.2, 0.8, 2) * frame_px
    end = start + rng.uniform(-1, 1, 2) * 900 * scale
    cv2.line(scene, tuple(int(v) for v in start), tuple(int(v) for v in end), (25, 25, 35),
             max(2, int(40 * scale)), cv2.LINE_AA)
    gain = _lighting(frame_w, frame_h, knobs, rng)
    rgb, grey, jpeg = _encode(_lens([(scene, gain)], knobs, rng), knobs.quality)
    return Photo(grey, rgb, PHONE_FILE_DPI, {}, {}, {}, {}, {}, 0, (0, 0), None, None, jpeg=jpeg)


@dataclass
class _Knobs:
    lighting: float
    vignette: float
    blur: float
    noise: float
    quality: int
    background: str
    exposure: float
    cast: np.ndarray

    @classmethod
    def draw(cls, rng: np.random.Generator, lighting, vignette, blur, noise, quality,
             background) -> _Knobs:
        """The unset knobs drawn from ``rng`` (always the same number of draws)."""
        drawn = rng.uniform(0, 1, 6)
        pick = int(rng.integers(0, len(BACKGROUNDS)))
        cast = rng.uniform(0.92, 1.04, 3)
        if background is not None and background not in BACKGROUNDS:
            raise ValueError(f"unknown background {background!r}; use one of {BACKGROUNDS}")
        return cls(
            0.10 + 0.25 * drawn[0] if lighting is None else float(lighting),
            0.15 + 0.20 * drawn[1] if vignette is None else float(vignette),
            0.6 + 0.8 * drawn[2] if blur is None else float(blur),
            2.0 + 3.0 * drawn[3] if noise is None else float(noise),
            int(80 + 12 * drawn[4]) if quality is None else int(quality),
            BACKGROUNDS[pick] if background is None else background,
            0.80 + 0.14 * drawn[5],
            (cast / cast.max()).astype(np.float32),
        )


def _scene(page: np.ndarray, homography: np.ndarray, frame_px: tuple[int, int], knobs: _Knobs,
           rng: np.random.Generator) -> np.ndarray:
    """The page warped onto the background, lit and seen through the lens: (H, W, 3) uint8."""
    frame_w, frame_h = frame_px
    page_h, page_w = page.shape[:2]
    # shrink a page much finer than the photo first, so that the warp does not alias
    c = np.array([page_w / 2, page_h / 2])
    o, dx, dy = _apply(homography, np.array([c, c + (1, 0), c + (0, 1)]))
    (ax, ay), (bx, by) = dx - o, dy - o
    step = float(np.sqrt(abs(ax * by - ay * bx)))  # photo pixels per page pixel
    matrix = homography
    if step < 0.75:
        small_w, small_h = max(2, int(round(page_w * step))), max(2, int(round(page_h * step)))
        page = cv2.resize(page, (small_w, small_h), interpolation=cv2.INTER_AREA)
        matrix = homography @ np.diag([page_w / small_w, page_h / small_h, 1.0])
    index = _index_matrix(matrix)
    sheet = cv2.warpPerspective(page, index, (frame_w, frame_h), flags=cv2.INTER_LINEAR,
                                borderMode=cv2.BORDER_CONSTANT, borderValue=0)
    alpha = cv2.warpPerspective(np.ones(page.shape[:2], np.float32), index, (frame_w, frame_h),
                                flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT,
                                borderValue=0)
    background = _background(frame_w, frame_h, knobs.background, rng)
    # the sheet's soft shadow on the table, a little down and to one side (worked out at 1/4 size)
    small = (max(2, frame_w // 4), max(2, frame_h // 4))
    reach = max(small) / 400
    shadow = cv2.GaussianBlur(cv2.resize(alpha, small, interpolation=cv2.INTER_AREA), (0, 0),
                              2.5 * reach)
    shadow = np.roll(shadow, (int(round(1.5 * reach)), int(round(rng.uniform(-1.5, 1.5) * reach))),
                     axis=(0, 1))
    shadow = cv2.resize(shadow, (frame_w, frame_h), interpolation=cv2.INTER_LINEAR)
    gain = _lighting(frame_w, frame_h, knobs, rng)
    table = cv2.multiply(cv2.subtract(1.0, alpha), cv2.subtract(1.0, 0.45 * shadow))
    return _lens([(background, cv2.multiply(table, gain)),
                  (sheet, cv2.multiply(alpha, gain, scale=knobs.exposure))], knobs, rng)


def _lighting(width: int, height: int, knobs: _Knobs, rng: np.random.Generator) -> np.ndarray:
    """(height, width) float32 gain: uneven light and vignetting."""
    gain = _illumination(max(2, width // 32), max(2, height // 32), knobs.lighting, rng)
    ys = np.linspace(-1.0, 1.0, gain.shape[0], dtype=np.float32)[:, None]
    xs = np.linspace(-1.0, 1.0, gain.shape[1], dtype=np.float32)[None, :]
    gain *= 1.0 - knobs.vignette * (xs ** 2 + ys ** 2) / 2.0
    return cv2.resize(gain, (width, height), interpolation=cv2.INTER_LINEAR)


def _lens(layers: list[tuple[np.ndarray, np.ndarray]], knobs: _Knobs,
          rng: np.random.Generator) -> np.ndarray:
    """Sum of (RGB uint8 image, float32 weight) layers, colour cast, defocus, sensor noise -> uint8.

    Channel by channel, with OpenCV, so that a 12-megapixel photo stays quick and small.
    """
    channels = []
    for c in range(3):
        acc = None
        for image, weight in layers:
            part = cv2.multiply(cv2.extractChannel(image, c).astype(np.float32), weight)
            acc = part if acc is None else cv2.add(acc, part)
        acc = cv2.multiply(acc, float(knobs.cast[c]))
        if knobs.blur > 0:
            acc = cv2.GaussianBlur(acc, (0, 0), knobs.blur)
        sigma = cv2.add(cv2.multiply(acc, knobs.noise / 320.0), 0.6 * knobs.noise)
        acc = cv2.add(acc, cv2.multiply(rng.standard_normal(acc.shape, dtype=np.float32), sigma))
        channels.append(np.clip(acc + 0.5, 0, 255).astype(np.uint8))
    return cv2.merge(channels)


def _encode(pixels: np.ndarray, quality: int) -> tuple[np.ndarray, np.ndarray, bytes]:
    """The scene as a phone's JPEG (72 dpi) and decoded again: rgb, grey, file bytes."""
    buffer = io.BytesIO()
    Image.fromarray(pixels).save(buffer, "JPEG", quality=quality,
                                 dpi=(PHONE_FILE_DPI, PHONE_FILE_DPI))
    data = buffer.getvalue()
    with Image.open(io.BytesIO(data)) as decoded:
        rgb = np.asarray(decoded.convert("RGB"))
    return rgb, to_grey(rgb), data


def _background(width: int, height: int, kind: str, rng: np.random.Generator) -> np.ndarray:
    """A seeded table or desk texture, darker than paper: (height, width, 3) uint8."""
    small_w, small_h = max(8, width // 8), max(8, height // 8)
    ys, xs = np.mgrid[0:small_h, 0:small_w].astype(np.float32)
    wobble = cv2.GaussianBlur(rng.standard_normal((small_h, small_w)).astype(np.float32),
                              (0, 0), max(small_w, small_h) / 30)
    wobble /= max(float(np.abs(wobble).max()), 1e-6)
    if kind == "wood":  # planks: gently wavering grain lines and streaks along them
        angle = rng.uniform(-0.2, 0.2) + np.pi / 2 * int(rng.integers(0, 2))
        across = -xs * np.sin(angle) + ys * np.cos(angle)
        smooth = cv2.GaussianBlur(rng.standard_normal((small_h, small_w)).astype(np.float32),
                                  (0, 0), max(small_w, small_h) / 8)
        smooth /= max(float(np.abs(smooth).max()), 1e-6)
        period = max(small_w, small_h) / rng.uniform(18, 30)
        rings = 0.5 + 0.5 * np.sin(2 * np.pi * (across / period + 1.2 * smooth))
        vertical = abs(np.sin(angle)) > 0.5  # the grain runs up and down the picture
        shape = (small_w, small_h) if vertical else (small_h, small_w)
        streaks = cv2.GaussianBlur(rng.standard_normal(shape).astype(np.float32), (0, 0),
                                   sigmaX=shape[1] / 12, sigmaY=0.8)
        streaks = np.ascontiguousarray(streaks.T if vertical else streaks)
        streaks /= max(float(np.abs(streaks).max()), 1e-6)
        tone = 0.62 + 0.22 * rings ** 2 + 0.16 * streaks + 0.06 * wobble
        base = np.array(rng.uniform([95, 60, 35], [140, 95, 60]), np.float32)
        texture = tone[..., None] * base
    elif kind == "desk":
        grey = rng.uniform(60, 105)
        texture = (grey * (1 + 0.08 * wobble))[..., None] * np.array([1.0, 1.0, 1.05], np.float32)
    else:  # cloth: a dark weave
        period = rng.uniform(2.5, 4.0)
        weave = np.sin(2 * np.pi * xs / period) * np.sin(2 * np.pi * ys / period)
        base = np.array(rng.uniform([25, 35, 50], [50, 60, 90]), np.float32)
        texture = ((1 + 0.12 * weave + 0.1 * wobble)[..., None] * base)
    texture = cv2.resize(texture.astype(np.float32), (width, height), interpolation=cv2.INTER_LINEAR)
    texture += rng.standard_normal((height, width, 1), dtype=np.float32) * 3.0
    return np.clip(texture, 0, 255).astype(np.uint8)
