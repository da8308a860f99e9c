"""A small stroke model of handwritten digits: training data, demo forms and tests.

Each digit is described by one or more *allographs* (ways of writing it); an
allograph is a list of pen strokes and a stroke is a list of control points in
a unit square (x to the right, y downwards, the glyph's ink spanning roughly
y 0..1).  Drawing a digit jitters the control points, passes a Catmull-Rom
spline through them, adds a slow wobble, shears by the writer's slant and
lays down ink as a chain of discs whose radius follows a pen-pressure profile.
The glyph is drawn at 4x and downsampled, which antialiases the edges.

A :class:`Writer` fixes the style: slant, stroke width, proportions, which
allograph of 1, 4, 7 and 9 is used, and a personal offset of every control
point (derived from ``seed``), so that all digits of one writer look alike.

:meth:`Writer.random` draws the ordinary writers of the demo forms and tests;
:meth:`Writer.office` the wider range of hands an office sees (continental 1
and 7, open and closed 4, hooked 9, thin ballpoint to thick felt-tip
strokes), used as training data by :mod:`recognizer.digits.training`.
:func:`write_in_box` writes one digit into a printed box on a small piece of
scanned paper -- now and then running over the box's walls -- so that the
reader's own cell path can cut it (:func:`office_digits`).

Here (not in :mod:`recognizer.synth`) because training uses it; the synth
package re-exports it for the forms, tests and benchmarks.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import lru_cache

import cv2
import numpy as np

Stroke = tuple[tuple[float, float], ...]
Allograph = tuple[Stroke, ...]

_OVERSAMPLE = 4


def _ellipse(cx: float, cy: float, rx: float, ry: float, start_deg: float,
             sweep_deg: float, n: int) -> Stroke:
    """Control points on an elliptic arc (y down, angles counter-clockwise on paper)."""
    t = np.radians(start_deg + sweep_deg * np.linspace(0.0, 1.0, n))
    return tuple((cx + rx * np.cos(a), cy - ry * np.sin(a)) for a in t)


# Control points per digit; several allographs each.  The first allograph of
# 1, 4 and 7 is the plain form, the writer flags select the others.
_GLYPHS: dict[int, tuple[Allograph, ...]] = {
    0: (
        (_ellipse(0.5, 0.5, 0.3, 0.5, 95, 375, 11),),
        (_ellipse(0.5, 0.5, 0.27, 0.5, 70, 380, 11),),
    ),
    1: (
        (((0.52, 0.0), (0.5, 0.5), (0.48, 1.0)),),
        (((0.28, 0.22), (0.52, 0.0), (0.5, 0.5), (0.48, 1.0)),
         ((0.25, 1.0), (0.72, 1.0))),
        (((0.3, 0.2), (0.52, 0.0), (0.5, 0.5), (0.48, 1.0)),),
    ),
    2: (
        (((0.2, 0.25), (0.35, 0.03), (0.62, 0.0), (0.8, 0.2), (0.72, 0.48),
          (0.45, 0.75), (0.2, 1.0), (0.5, 0.98), (0.82, 1.0)),),
        (((0.22, 0.22), (0.45, 0.0), (0.75, 0.08), (0.75, 0.38), (0.4, 0.8),
          (0.22, 0.97), (0.35, 0.85), (0.55, 0.95), (0.82, 0.98)),),
    ),
    3: (
        (((0.22, 0.15), (0.5, 0.0), (0.78, 0.15), (0.7, 0.38), (0.45, 0.47),
          (0.75, 0.6), (0.8, 0.84), (0.52, 1.0), (0.2, 0.88)),),
        (((0.22, 0.0), (0.8, 0.0), (0.45, 0.4), (0.72, 0.5), (0.82, 0.75),
          (0.6, 0.98), (0.2, 0.9)),),
    ),
    4: (
        (((0.62, 0.0), (0.38, 0.32), (0.15, 0.66), (0.5, 0.66), (0.86, 0.65)),
         ((0.64, 0.02), (0.64, 0.5), (0.64, 1.0))),
        (((0.25, 0.0), (0.22, 0.32), (0.2, 0.62), (0.5, 0.62), (0.85, 0.6)),
         ((0.68, 0.12), (0.66, 0.55), (0.66, 1.0))),
    ),
    5: (
        (((0.78, 0.0), (0.5, 0.01), (0.3, 0.0)),
         ((0.3, 0.0), (0.26, 0.45), (0.55, 0.38), (0.8, 0.58), (0.75, 0.88),
          (0.5, 1.0), (0.2, 0.9))),
        (((0.3, 0.02), (0.25, 0.45), (0.5, 0.38), (0.78, 0.55), (0.78, 0.85),
          (0.5, 1.0), (0.22, 0.9)),
         ((0.3, 0.02), (0.55, 0.0), (0.8, 0.0))),
    ),
    6: (
        (((0.72, 0.02), (0.42, 0.2), (0.24, 0.58), (0.3, 0.92), (0.55, 1.0),
          (0.78, 0.8), (0.7, 0.56), (0.45, 0.52), (0.26, 0.68)),),
        (((0.65, 0.0), (0.35, 0.3), (0.25, 0.7), (0.45, 1.0), (0.75, 0.85),
          (0.7, 0.6), (0.4, 0.6), (0.27, 0.75)),),
    ),
    7: (
        (((0.18, 0.02), (0.5, 0.0), (0.82, 0.0), (0.6, 0.45), (0.42, 1.0)),),
        (((0.18, 0.02), (0.5, 0.0), (0.82, 0.0), (0.6, 0.45), (0.42, 1.0)),
         ((0.3, 0.5), (0.5, 0.49), (0.76, 0.48))),
        (((0.18, 0.15), (0.2, 0.0), (0.5, 0.02), (0.82, 0.0), (0.55, 0.5), (0.45, 1.0)),),
    ),
    8: (
        (((0.72, 0.14), (0.5, 0.0), (0.27, 0.13), (0.32, 0.34), (0.68, 0.6),
          (0.75, 0.86), (0.5, 1.0), (0.25, 0.86), (0.32, 0.6), (0.68, 0.34),
          (0.73, 0.14), (0.7, 0.08)),),
        (_ellipse(0.5, 0.24, 0.21, 0.24, 90, 370, 9),
         _ellipse(0.5, 0.74, 0.27, 0.26, 90, 370, 9)),
    ),
    9: (
        (((0.76, 0.22), (0.52, 0.0), (0.26, 0.16), (0.3, 0.42), (0.55, 0.46),
          (0.76, 0.26)),
         ((0.76, 0.12), (0.74, 0.55), (0.68, 1.0))),
        (((0.74, 0.18), (0.5, 0.0), (0.25, 0.18), (0.33, 0.45), (0.6, 0.42),
          (0.75, 0.2), (0.72, 0.6), (0.62, 1.0)),),
    ),
}

_N_POINTS = max(len(s) for glyphs in _GLYPHS.values() for a in glyphs for s in a)
_N_STROKES = max(len(a) for glyphs in _GLYPHS.values() for a in glyphs)
_N_ALLOGRAPHS = max(len(glyphs) for glyphs in _GLYPHS.values())

# Further allographs, kept apart so that the writers of :data:`_GLYPHS` (and
# every demo form and test drawn with them) stay exactly as they were: the
# continental 1 (a long up-stroke into the stem) and the hooked 9 (a stem
# whose foot curls to the left).
_EXTRA_GLYPHS: dict[str, Allograph] = {
    "continental_one": (((0.1, 0.46), (0.3, 0.24), (0.55, 0.0), (0.53, 0.5), (0.5, 1.0)),),
    "hooked_nine": (
        ((0.76, 0.22), (0.52, 0.0), (0.26, 0.16), (0.3, 0.42), (0.55, 0.46), (0.76, 0.26)),
        ((0.76, 0.12), (0.75, 0.5), (0.68, 0.86), (0.5, 1.0), (0.3, 0.9)),
    ),
}
_EXTRA_DIGIT = {"continental_one": 1, "hooked_nine": 9}


@lru_cache(maxsize=64)
def _personal_style(seed: int) -> tuple[np.ndarray, np.ndarray]:
    """A writer's fixed control-point offsets and allograph preferences, from ``seed``."""
    personal = np.random.default_rng(seed)
    offsets = personal.normal(0.0, 0.03, (10, _N_ALLOGRAPHS, _N_STROKES, _N_POINTS, 2))
    offsets.flags.writeable = False
    preference = personal.integers(0, 2, 10)
    preference.flags.writeable = False
    return offsets, preference


@lru_cache(maxsize=64)
def _extra_offsets(seed: int) -> np.ndarray:
    """A writer's fixed control-point offsets for :data:`_EXTRA_GLYPHS` (a stream of its own)."""
    offsets = np.random.default_rng([seed, 1]).normal(0.0, 0.03, (len(_EXTRA_GLYPHS), 2, 6, 2))
    offsets.flags.writeable = False
    return offsets


@dataclass(frozen=True)
class Writer:
    """Handwriting style of one person.

    Parameters
    ----------
    slant_deg : float
        Forward lean of the letters in degrees (positive: tops lean right).
    stroke_width : float
        Pen width relative to the glyph height (0.06 thin .. 0.14 heavy).
    open_four : bool
        Write 4 with an open top (two strokes that do not meet).
    crossed_seven : bool
        Cross the stem of 7.
    serif_one : bool
        Give 1 an entry flag (and sometimes a foot).
    aspect : float
        Glyph width / height.
    size_jitter : float
        Relative standard deviation of the glyph size from digit to digit.
    aspect_jitter : float
        Relative standard deviation of the glyph width.
    shape_jitter : float
        Standard deviation of control-point jitter, in glyph heights.
    wobble : float
        Amplitude of the slow tremor along the strokes, in glyph heights.
    seed : int
        Fixes the writer's personal shape offsets and allograph choices.
    continental_one : bool
        Write 1 with a long up-stroke into the stem (takes precedence over ``serif_one``).
    hooked_nine : bool
        Curl the foot of the 9's stem to the left.
    """

    slant_deg: float = 6.0
    stroke_width: float = 0.09
    open_four: bool = False
    crossed_seven: bool = False
    serif_one: bool = False
    aspect: float = 0.62
    size_jitter: float = 0.06
    aspect_jitter: float = 0.06
    shape_jitter: float = 0.025
    wobble: float = 0.012
    seed: int = 0
    continental_one: bool = False
    hooked_nine: bool = False

    @classmethod
    def random(cls, rng: np.random.Generator) -> Writer:
        """An ordinary writer with a random style drawn from ``rng``."""
        return cls(
            slant_deg=float(np.clip(rng.normal(5.0, 7.0), -12.0, 22.0)),
            stroke_width=float(rng.uniform(0.08, 0.13)),
            open_four=bool(rng.random() < 0.35),
            crossed_seven=bool(rng.random() < 0.15),
            serif_one=bool(rng.random() < 0.4),
            aspect=float(rng.uniform(0.5, 0.78)),
            size_jitter=float(rng.uniform(0.03, 0.09)),
            aspect_jitter=float(rng.uniform(0.03, 0.08)),
            shape_jitter=float(rng.uniform(0.015, 0.035)),
            wobble=float(rng.uniform(0.005, 0.02)),
            seed=int(rng.integers(0, 2**31)),
        )

    @classmethod
    def office(cls, rng: np.random.Generator) -> Writer:
        """A writer from the wide range of hands an office sees (training data).

        Wider than :meth:`random`: slant -20..35 degrees, strokes from a thin
        ballpoint (0.045 of the glyph height) to a thick felt-tip (0.2),
        narrow to round glyphs, open or closed 4 (half each), crossed 7
        (30 %), continental 1 (25 %) or flagged 1 (35 %), hooked 9 (30 %),
        neat to hurried shapes.
        """
        return cls(
            slant_deg=float(np.clip(rng.normal(6.0, 10.0), -20.0, 35.0)),
            stroke_width=float(np.exp(rng.uniform(np.log(0.045), np.log(0.2)))),
            open_four=bool(rng.random() < 0.5),
            crossed_seven=bool(rng.random() < 0.3),
            serif_one=bool(rng.random() < 0.35),
            aspect=float(rng.uniform(0.42, 0.85)),
            size_jitter=float(rng.uniform(0.03, 0.1)),
            aspect_jitter=float(rng.uniform(0.03, 0.1)),
            shape_jitter=float(rng.uniform(0.015, 0.045)),
            wobble=float(rng.uniform(0.004, 0.025)),
            seed=int(rng.integers(0, 2**31)),
            continental_one=bool(rng.random() < 0.25),
            hooked_nine=bool(rng.random() < 0.3),
        )

    @classmethod
    def distinctive(cls, seed: int = 7) -> Writer:
        """A writer whose digits differ clearly from common handwriting.

        Strong forward slant (28 degrees), open 4s, crossed 7s, flagged 1s,
        narrow heavy glyphs: the kind of office handwriting a recogniser
        trained on general digits may need to be retrained for.
        """
        return cls(slant_deg=28.0, stroke_width=0.13, open_four=True, crossed_seven=True,
                   serif_one=True, aspect=0.5, size_jitter=0.04, aspect_jitter=0.03,
                   shape_jitter=0.02, wobble=0.008, seed=seed)

    def draw(self, digit: int, *, rng: np.random.Generator, size: int = 64) -> np.ndarray:
        """Draw one handwritten digit.

        Parameters
        ----------
        digit : int
            0..9.
        rng : numpy.random.Generator
            Source of the digit-to-digit variation.
        size : int
            Side of the square output image in pixels; the glyph's ink
            height is about 75 % of it.

        Returns
        -------
        numpy.ndarray
            (size, size) uint8, ink = 255 on 0, antialiased.
        """
        if not 0 <= digit <= 9:
            raise ValueError(f"digit must be 0..9, got {digit!r}")
        extra = self._extra_allograph(digit)
        if extra is None:
            offsets, _ = _personal_style(self.seed)
            which = self._allograph_index(digit)
            strokes = _GLYPHS[digit][which]
            personal = [offsets[digit, which, k] for k in range(len(strokes))]
        else:
            strokes = _EXTRA_GLYPHS[extra]
            index = list(_EXTRA_GLYPHS).index(extra)
            personal = [_extra_offsets(self.seed)[index, k] for k in range(len(strokes))]
        height = 0.75 * size * (1.0 + self.size_jitter * rng.standard_normal())
        width = height * self.aspect * (1.0 + self.aspect_jitter * rng.standard_normal())
        slant = np.tan(np.radians(self.slant_deg + 2.0 * rng.standard_normal()))
        pen = self.stroke_width * height * float(np.clip(1.0 + 0.12 * rng.standard_normal(), 0.7, 1.3))
        paths = []
        for k, stroke in enumerate(strokes):
            points = np.asarray(stroke, float)
            points = points + personal[k][: len(points)]
            points = points + rng.normal(0.0, self.shape_jitter, points.shape)
            path = _wobble(_catmull_rom(points), self.wobble, rng)
            x = (path[:, 0] - 0.5) * width + slant * (0.5 - path[:, 1]) * height
            y = (path[:, 1] - 0.5) * height
            paths.append(np.column_stack([x, y]))
        # keep the whole glyph, pen width included, inside the image
        reach = max(np.abs(np.vstack(paths)).max() + 0.75 * pen, 1e-6)
        fit = min(1.0, (size / 2.0 - 1.0) / reach)
        canvas = np.zeros((size * _OVERSAMPLE, size * _OVERSAMPLE), np.uint8)
        for path in paths:
            _ink_path(canvas, (path * fit + size / 2.0) * _OVERSAMPLE,
                      pen * fit * _OVERSAMPLE, rng)
        return cv2.resize(canvas, (size, size), interpolation=cv2.INTER_AREA)

    def _extra_allograph(self, digit: int) -> str | None:
        """The name of the :data:`_EXTRA_GLYPHS` allograph this writer uses for ``digit``, if any."""
        if digit == 1 and self.continental_one:
            return "continental_one"
        if digit == 9 and self.hooked_nine:
            return "hooked_nine"
        return None

    def _allograph_index(self, digit: int) -> int:
        """Which allograph of ``digit`` this writer uses."""
        preference = _personal_style(self.seed)[1]
        if digit == 1:
            return 1 + int(preference[1]) if self.serif_one else 0
        if digit == 4:
            return int(self.open_four)
        if digit == 7:
            return 1 if self.crossed_seven else 2 * int(preference[7])
        return int(preference[digit]) % len(_GLYPHS[digit])


def _catmull_rom(points: np.ndarray, per_segment: int = 12) -> np.ndarray:
    """A smooth path through ``points`` ((k, 2) float), returned as (m, 2) float."""
    if len(points) < 3:
        t = np.linspace(0.0, 1.0, per_segment + 1)[:, None]
        return points[0] + t * (points[-1] - points[0])
    padded = np.vstack([2 * points[0] - points[1], points, 2 * points[-1] - points[-2]])
    t = np.linspace(0.0, 1.0, per_segment, endpoint=False)[:, None]
    pieces = []
    for i in range(1, len(padded) - 2):
        p0, p1, p2, p3 = padded[i - 1: i + 3]
        pieces.append(0.5 * (2 * p1 + (p2 - p0) * t + (2 * p0 - 5 * p1 + 4 * p2 - p3) * t**2
                             + (3 * p1 - p0 - 3 * p2 + p3) * t**3))
    pieces.append(points[-1:])
    return np.vstack(pieces)


def _wobble(path: np.ndarray, amplitude: float, rng: np.random.Generator) -> np.ndarray:
    """Add a slow tremor (two random sinusoids per axis) to a (m, 2) path."""
    if amplitude <= 0:
        return path
    s = np.linspace(0.0, 1.0, len(path))[:, None]
    freq = rng.uniform(1.0, 4.0, (2, 2))
    phase = rng.uniform(0.0, 2 * np.pi, (2, 2))
    tremor = np.sin(2 * np.pi * s[:, :, None] * freq + phase).sum(axis=2) / 2.0
    return path + amplitude * tremor


def _ink_path(canvas: np.ndarray, path: np.ndarray, width: float,
              rng: np.random.Generator) -> None:
    """Lay ink along ``path`` ((m, 2) pixel coordinates) as discs with varying radius."""
    seg = np.linalg.norm(np.diff(path, axis=0), axis=1)
    arc = np.concatenate([[0.0], np.cumsum(seg)])
    step = max(1.0, width / 6.0)
    samples = np.arange(0.0, arc[-1] + step, step)
    xs = np.interp(samples, arc, path[:, 0])
    ys = np.interp(samples, arc, path[:, 1])
    u = samples / max(arc[-1], 1.0)
    # pen pressure: light touch-down and lift-off, a slow swell in between
    pressure = (0.75 + 0.25 * np.sin(np.pi * np.clip(u * 1.2, 0.0, 1.0))
                + 0.1 * np.sin(2 * np.pi * u * rng.uniform(1.0, 3.0) + rng.uniform(0, 6.3)))
    radii = np.maximum(1.0, 0.5 * width * pressure)
    for x, y, r in zip(xs, ys, radii):
        cv2.circle(canvas, (int(round(x)), int(round(y))), int(round(r)), 255, -1, cv2.LINE_8)


# ------------------------------------------------------------------ digits in boxes

#: Inner box of a written box: ``(x0, y0, x1, y1)`` pixel edges, ``x1``/``y1`` exclusive.
BoxRect = tuple[int, int, int, int]

#: Cuts a written box the way the reader does: ``(page, box, dpi)`` -> the (28, 28)
#: float32 model input, or None when the box reads as blank.  ``page`` is (M, N)
#: uint8, 0 = ink.  The command line passes :func:`recognizer.page.cells.cut_cell`
#: (this package may not import the page stage).
CellCutter = Callable[[np.ndarray, BoxRect, float], "np.ndarray | None"]

_MM_PER_INCH = 25.4


def fit_glyph(glyph: np.ndarray, box_w: float, box_h: float, *, fill: float, widest: float) -> np.ndarray:
    """``glyph`` (its ink, trimmed to its bounds) scaled to ``fill`` of a box's height, aspect kept,
    and narrowed to at most ``widest`` of the box's width; at least 2 x 1 pixels."""
    h = fill * box_h
    w = h * glyph.shape[1] / glyph.shape[0]
    if w > widest * box_w:
        w, h = widest * box_w, widest * box_w * glyph.shape[0] / glyph.shape[1]
    h_px, w_px = max(2, int(round(h))), max(1, int(round(w)))
    return cv2.resize(glyph, (w_px, h_px), interpolation=cv2.INTER_AREA if h_px < glyph.shape[0]
                      else cv2.INTER_LINEAR)


def write_in_box(writer: Writer, digit: int, *, rng: np.random.Generator,
                 touch: float = 0.2) -> tuple[np.ndarray, BoxRect, float]:
    """Write one digit into a printed box on a small scanned piece of paper.

    The box (inner 4.5-8 mm wide, 5.5-9 mm high, walls 0.12-0.35 mm, printed
    black to mid grey) sits on paper of level 215-255 scanned at 190-310 dpi;
    the digit fills 55-90 % of the box height, placed off-centre at random,
    in ink 45-100 % dark; light scanner blur and noise.  With probability
    ``touch`` the digit is written large and runs into or over one wall
    (the reader's line removal must then part them).

    Parameters
    ----------
    writer : Writer
    digit : int
        0..9.
    rng : numpy.random.Generator
    touch : float
        Share of digits touching or crossing a wall.

    Returns
    -------
    page : numpy.ndarray
        (M, N) uint8, 0 = ink, 255 = white paper.
    box : BoxRect
        The inner box, pixel edges in ``page``.
    dpi : float
    """
    dpi = float(rng.uniform(190.0, 310.0))
    px = dpi / _MM_PER_INCH
    box_w = int(round(rng.uniform(4.5, 8.0) * px))
    box_h = int(round(max(rng.uniform(5.5, 9.0) * px, 0.8 * box_w)))
    wall = max(1, int(round(rng.uniform(0.12, 0.35) * px)))
    margin = int(round(2.5 * px))
    x0 = y0 = margin + wall
    x1, y1 = x0 + box_w, y0 + box_h
    paper = float(rng.uniform(215.0, 255.0))
    page = np.full((y1 + wall + margin, x1 + wall + margin), paper, np.float32)
    glyph = writer.draw(digit, rng=rng, size=max(32, int(round(1.3 * box_h))))
    ys, xs = np.nonzero(glyph > 32)
    glyph = glyph[ys.min():ys.max() + 1, xs.min():xs.max() + 1].astype(np.float32) / 255.0
    crossing = rng.random() < touch
    fill = rng.uniform(0.85, 1.12) if crossing else rng.uniform(0.55, 0.9)
    ink = fit_glyph(glyph, box_w, box_h, fill=fill, widest=0.95)
    h_px, w_px = ink.shape
    slack_x, slack_y = (box_w - w_px) / 2.0, (box_h - h_px) / 2.0
    dx, dy = rng.uniform(-0.6, 0.6) * slack_x, rng.uniform(-0.6, 0.6) * slack_y
    if crossing:  # run into a wall: the top or bottom one mostly, a side one now and then
        reach = rng.uniform(0.0, 0.12) * box_h + wall
        if rng.random() < 0.75:
            dy = rng.choice([-1.0, 1.0]) * (abs(slack_y) + reach)
        else:
            dx = rng.choice([-1.0, 1.0]) * (abs(slack_x) + reach)
    top, left = int(round(y0 + slack_y + dy)), int(round(x0 + slack_x + dx))
    dark = float(rng.uniform(0.45, 1.0))
    r0, c0 = max(top, 0), max(left, 0)
    r1, c1 = min(top + h_px, page.shape[0]), min(left + w_px, page.shape[1])
    region = page[r0:r1, c0:c1]
    region *= 1.0 - dark * ink[r0 - top:r1 - top, c0 - left:c1 - left]
    line = float(rng.uniform(0.0, 120.0))
    for rows, cols in ((slice(y0 - wall, y0), slice(x0 - wall, x1 + wall)),
                       (slice(y1, y1 + wall), slice(x0 - wall, x1 + wall)),
                       (slice(y0 - wall, y1 + wall), slice(x0 - wall, x0)),
                       (slice(y0 - wall, y1 + wall), slice(x1, x1 + wall))):
        np.minimum(page[rows, cols], line, out=page[rows, cols])
    blur = rng.uniform(0.0, 0.45) * px / 10.0
    if blur > 0.3:
        page = cv2.GaussianBlur(page, (0, 0), blur)
    page += rng.normal(0.0, rng.uniform(0.0, 5.0), page.shape).astype(np.float32)
    return np.clip(np.round(page), 0, 255).astype(np.uint8), (x0, y0, x1, y1), dpi


def office_digits(
    n: int, *, rng: np.random.Generator, cut: CellCutter, per_writer: int = 20, touch: float = 0.2
) -> tuple[np.ndarray, np.ndarray]:
    """``n`` digits by :meth:`Writer.office` writers, written into boxes and cut as the reader cuts them.

    Every ``per_writer`` digits a new writer is drawn; the digits cycle
    through 0..9, so the classes are balanced.  A box the cutter reads as
    blank is written again.

    Parameters
    ----------
    n : int
    rng : numpy.random.Generator
    cut : CellCutter
        The reader's cell path (see :data:`CellCutter`).
    per_writer : int
    touch : float
        Share of digits touching or crossing a wall (:func:`write_in_box`).

    Returns
    -------
    cells : ndarray, float32, shape (n, 28, 28), 0..1 MNIST layout
    labels : ndarray, int64, shape (n,)
    """
    cells = np.zeros((n, 28, 28), np.float32)
    labels = np.arange(n, dtype=np.int64) % 10
    writer = Writer()
    for i in range(n):
        if i % per_writer == 0:
            writer = Writer.office(rng)
        for _ in range(5):
            page, box, dpi = write_in_box(writer, int(labels[i]), rng=rng, touch=touch)
            cell = cut(page, box, dpi)
            if cell is not None:
                cells[i] = cell
                break
        else:
            raise RuntimeError("the cell cutter read five written boxes in a row as blank")
    return cells, labels


STRAY_MARK_KINDS = ("dot", "dash", "smudge")
"""Stray marks that leave a box blank: a pen dot, a short dash, a faint smudge."""


def draw_stray_mark(*, rng: np.random.Generator, size: int = 64, kind: str | None = None) -> np.ndarray:
    """Draw a small stray mark somewhere in a box-sized image.

    Written into boxes of demo forms that must still read as empty.  Not to be
    confused with the not-a-digit marks the model is trained on
    (:func:`recognizer.digits.marks.not_digit_marks`).

    Parameters
    ----------
    rng : numpy.random.Generator
    size : int
        Side of the square output, standing for a whole box.
    kind : str, optional
        One of :data:`STRAY_MARK_KINDS`; random if omitted.

    Returns
    -------
    numpy.ndarray
        (size, size) uint8, ink = 255 on 0.  The mark covers well under 2 %
        of the image: a box holding only such a mark counts as empty.
    """
    kind = kind or str(rng.choice(STRAY_MARK_KINDS))
    if kind not in STRAY_MARK_KINDS:
        raise ValueError(f"unknown stray mark kind {kind!r}; expected one of {STRAY_MARK_KINDS}")
    big = size * _OVERSAMPLE
    canvas = np.zeros((big, big), np.uint8)
    centre = rng.uniform(0.15, 0.85, 2) * big
    if kind == "dot":
        radius = rng.uniform(0.02, 0.045) * big
        cv2.circle(canvas, tuple(int(c) for c in centre), int(radius), 255, -1)
    elif kind == "dash":
        angle = rng.uniform(0.0, np.pi)
        half = rng.uniform(0.04, 0.1) * big * np.array([np.cos(angle), np.sin(angle)])
        path = np.vstack([centre - half, centre + half])
        _ink_path(canvas, path, rng.uniform(0.02, 0.04) * big, rng)
    else:
        axes = (int(rng.uniform(0.04, 0.09) * big), int(rng.uniform(0.02, 0.05) * big))
        cv2.ellipse(canvas, tuple(int(c) for c in centre), axes, rng.uniform(0, 180), 0, 360,
                    int(rng.uniform(50, 110)), -1)
        canvas = cv2.GaussianBlur(canvas, (0, 0), 0.02 * big)
    return cv2.resize(canvas, (size, size), interpolation=cv2.INTER_AREA)
