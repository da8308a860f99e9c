"""Generated "not a digit" marks for the digit model's eleventh class.

Marks found in digit boxes that are not digits: scribbles, crossed-out digits,
stray dots and ticks, fragments of box lines left by imperfect line removal
(straight and bent lines, corners) and letter-like shapes.  Everything is drawn
here with OpenCV on a large canvas and brought to the MNIST layout (ink
bounding box scaled into 20x20 keeping aspect, centred by centre of mass in
28x28), white ink on black, values 0..1.

Shapes that are digits in disguise are left out on purpose: a lone vertical
or steep straight stroke (a "1"), a closed oval (a "0"), a top bar with a
stroke down its right end (a "7"), open arcs and hooks (parts of 0, 2, 6) and
letters such as O, I, S, Z, B, G, C, P, U, V, N, Y.  Measured: with those in
the training marks, about 1 % of real digits were eaten by the eleventh class.

Not to be confused with the stray marks of the demo forms
(:func:`recognizer.digits.handwriting.draw_stray_mark`): one small dot, dash or
smudge that must leave a box *blank* (it never reaches the model), whereas
every mark here, the ``"stray"`` kind of scattered dots and ticks included,
is written ink the model must call not-a-digit.
"""

from __future__ import annotations

from collections.abc import Callable

import cv2
import numpy as np

from recognizer.digits.preprocess import to_model_input

_CANVAS = 96
_TRIES = 5
_LETTERS = "AEFHKMRWX"
_FONTS = (
    cv2.FONT_HERSHEY_SIMPLEX,
    cv2.FONT_HERSHEY_DUPLEX,
    cv2.FONT_HERSHEY_COMPLEX,
    cv2.FONT_HERSHEY_TRIPLEX,
    cv2.FONT_HERSHEY_SCRIPT_SIMPLEX,
)


def _thickness(rng: np.random.Generator) -> int:
    return int(rng.integers(5, 11))


def _jitter(rng: np.random.Generator, spread: int = 4) -> int:
    return int(rng.integers(-spread, spread + 1))


def _smooth_path(rng: np.random.Generator, n_points: int) -> np.ndarray:
    """A wandering curve: a random walk with momentum, (k, 2) int32 canvas points."""
    pts = np.empty((n_points, 2))
    pos = rng.uniform(30, 66, size=2)
    vel = rng.normal(0, 6, size=2)
    for i in range(n_points):
        vel = 0.8 * vel + rng.normal(0, 4, size=2)
        pos = np.clip(pos + vel, 8, _CANVAS - 8)
        pts[i] = pos
    return pts.astype(np.int32)


def _scribble(rng: np.random.Generator, canvas: np.ndarray) -> None:
    """Tangled curve or zig-zag hatching."""
    if rng.random() < 0.5:
        cv2.polylines(canvas, [_smooth_path(rng, int(rng.integers(40, 70)))], False, 1.0,
                      _thickness(rng), cv2.LINE_AA)
    else:
        k = int(rng.integers(6, 11))
        x = np.linspace(15, 81, k) + rng.normal(0, 3, k)
        y = np.where(np.arange(k) % 2 == 0, rng.uniform(15, 35, k), rng.uniform(60, 80, k))
        if rng.random() < 0.5:
            x, y = y, x
        cv2.polylines(canvas, [np.stack([x, y], 1).astype(np.int32)], False, 1.0, _thickness(rng), cv2.LINE_AA)


def _crossed_out(rng: np.random.Generator, canvas: np.ndarray, digit: np.ndarray) -> None:
    """A digit with an X, a double strike or hatching drawn through it."""
    size = int(rng.integers(60, 80))
    img = cv2.resize(digit.astype(np.float32), (size, size), interpolation=cv2.INTER_LINEAR)
    off = (_CANVAS - size) // 2
    canvas[off : off + size, off : off + size] = np.maximum(canvas[off : off + size, off : off + size], img)
    lo, hi = off + 8, off + size - 8
    t = _thickness(rng)
    kind = rng.integers(3)
    if kind == 0:
        cv2.line(canvas, (lo + _jitter(rng), lo + _jitter(rng)), (hi + _jitter(rng), hi + _jitter(rng)), 1.0, t, cv2.LINE_AA)
        cv2.line(canvas, (lo + _jitter(rng), hi + _jitter(rng)), (hi + _jitter(rng), lo + _jitter(rng)), 1.0, t, cv2.LINE_AA)
    elif kind == 1:
        for yy in rng.uniform(lo + 10, hi - 10, 2).astype(int):
            cv2.line(canvas, (off - 4 + _jitter(rng), yy + _jitter(rng)), (off + size + 4 + _jitter(rng), yy + _jitter(rng)), 1.0, t, cv2.LINE_AA)
    else:
        k = int(rng.integers(5, 9))
        x = np.linspace(off, off + size, k)
        y = np.where(np.arange(k) % 2 == 0, lo, hi) + rng.normal(0, 4, k)
        cv2.polylines(canvas, [np.stack([x, y], 1).astype(np.int32)], False, 1.0, t, cv2.LINE_AA)


def _stray(rng: np.random.Generator, canvas: np.ndarray) -> None:
    """A few dots and short ticks scattered over the box."""
    for _ in range(int(rng.integers(2, 5))):
        c = rng.uniform(10, 86, size=2).astype(int)
        if rng.random() < 0.5:
            cv2.circle(canvas, (int(c[0]), int(c[1])), int(rng.integers(3, 8)), 1.0, -1, cv2.LINE_AA)
        else:
            d = rng.normal(0, 8, size=2).astype(int)
            cv2.line(canvas, (int(c[0]), int(c[1])), (int(c[0] + d[0]), int(c[1] + d[1])), 1.0,
                     _thickness(rng), cv2.LINE_AA)


def _box_line(rng: np.random.Generator, canvas: np.ndarray) -> None:
    """Remnants of a printed box: a flat line, a bent line, a corner, two edges."""
    t = _thickness(rng)
    lo, hi = 10 + int(rng.integers(0, 10)), 86 - int(rng.integers(0, 10))
    y = int(rng.integers(10, 86))
    kind = rng.integers(4)
    tilt = int(rng.normal(0, 3))
    if kind == 0:  # flat line, maybe broken
        gap = rng.random() < 0.4
        mid = (lo + hi) // 2
        segs = [(lo, mid - 6), (mid + 6, hi)] if gap else [(lo, hi)]
        for a, b in segs:
            cv2.line(canvas, (a, y), (b, y + tilt), 1.0, t, cv2.LINE_AA)
    elif kind == 1:  # bent line: mostly flat, one end kinked
        bend = int(rng.integers(12, 30)) * (1 if rng.random() < 0.5 else -1)
        pts = np.array([[lo, y], [hi - 20, y + tilt], [hi, y + tilt + bend]], np.int32)
        if rng.random() < 0.5:
            pts[:, 0] = _CANVAS - pts[:, 0]
        cv2.polylines(canvas, [pts], False, 1.0, t, cv2.LINE_AA)
    elif kind == 2:  # corner: a bottom edge with a side edge (never a top bar + right edge, a "7")
        arm = int(rng.integers(25, 70))
        left = rng.random() < 0.5
        x0 = lo if left else hi
        pts = np.array([[x0, 86 - arm], [x0, 86], [hi if left else lo, 86 + tilt]], np.int32)
        if rng.random() < 0.5:  # top-left corner: left edge with a top bar
            pts = np.array([[lo, 10 + arm], [lo, 10], [hi, 10 + tilt]], np.int32)
        cv2.polylines(canvas, [pts], False, 1.0, t, cv2.LINE_AA)
    else:  # top and bottom edges
        cv2.line(canvas, (lo, 10), (hi, 10 + tilt), 1.0, t, cv2.LINE_AA)
        cv2.line(canvas, (lo + _jitter(rng, 8), 86), (hi + _jitter(rng, 8), 86 - tilt), 1.0, t, cv2.LINE_AA)


def _letter(rng: np.random.Generator, canvas: np.ndarray) -> None:
    """A capital letter (Hershey font) unlike any digit."""
    ch = _LETTERS[int(rng.integers(len(_LETTERS)))]
    font = _FONTS[int(rng.integers(len(_FONTS)))]
    scale = 2.0
    thick = int(rng.integers(4, 9))
    (tw, th), _ = cv2.getTextSize(ch, font, scale, thick)
    org = ((_CANVAS - tw) // 2, (_CANVAS + th) // 2)
    _put_text(canvas, ch, org, font, scale, thick)


def _put_text(canvas: np.ndarray, text: str, org: tuple[int, int], font: int, scale: float, thick: int) -> None:
    """``cv2.putText`` onto a float canvas (OpenCV draws text on 8-bit images only)."""
    layer = np.zeros(canvas.shape, np.uint8)
    cv2.putText(layer, text, org, font, scale, 255, thick, cv2.LINE_AA)
    np.maximum(canvas, layer.astype(np.float32) / 255.0, out=canvas)


def printed_digits(n: int, *, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Printed digits (Hershey fonts, random font and weight), MNIST layout.

    Used to cross out when no real digits are given, and as small self-made
    digit data for tests.

    Returns
    -------
    images : ndarray, float32, shape (n, 28, 28), values 0..1
    labels : ndarray, int64, shape (n,), digits 0..9
    """
    labels = rng.integers(0, 10, size=n)
    images = np.zeros((n, 28, 28), np.float32)
    for i, d in enumerate(labels):
        canvas = np.zeros((_CANVAS, _CANVAS), np.float32)
        font = _FONTS[int(rng.integers(len(_FONTS)))]
        thick = int(rng.integers(4, 9))
        (tw, th), _ = cv2.getTextSize(str(d), font, 2.5, thick)
        _put_text(canvas, str(d), ((_CANVAS - tw) // 2, (_CANVAS + th) // 2), font, 2.5, thick)
        images[i] = to_model_input(canvas)
    return images, labels.astype(np.int64)


KINDS: tuple[str, ...] = ("scribble", "crossed_out", "stray", "box_line", "letter")


def not_digit_marks(
    n: int,
    *,
    rng: np.random.Generator,
    digits: np.ndarray | None = None,
    kinds: tuple[str, ...] = KINDS,
) -> np.ndarray:
    """Generate ``n`` marks that are not digits (the training class ``NOT_A_DIGIT``).

    Parameters
    ----------
    n : int
        Number of marks.
    rng : numpy.random.Generator
        Source of randomness (use separate generators for training and for
        evaluation marks).
    digits : ndarray, shape (m, 28, 28), optional
        Real digits (0..1, MNIST layout) to cross out; printed Hershey-font
        digits are used when omitted.
    kinds : tuple of str
        Which of :data:`KINDS` to draw, chosen uniformly per mark.

    Returns
    -------
    ndarray, float32, shape (n, 28, 28), values 0..1, MNIST layout.
    """
    draw: dict[str, Callable[[np.random.Generator, np.ndarray], None]] = {
        "scribble": _scribble,
        "stray": _stray,
        "box_line": _box_line,
        "letter": _letter,
    }
    unknown = set(kinds) - set(KINDS)
    if unknown:
        raise ValueError(f"unknown mark kinds {sorted(unknown)}")
    out = np.zeros((n, 28, 28), np.float32)
    for i in range(n):
        for _ in range(_TRIES):  # redraw marks that came out as a bare upright stroke (a "1")
            kind = kinds[int(rng.integers(len(kinds)))]
            canvas = np.zeros((_CANVAS, _CANVAS), np.float32)
            if kind == "crossed_out":
                pick = digits is not None and len(digits) > 0
                base = digits[int(rng.integers(len(digits)))] if pick else printed_digits(1, rng=rng)[0][0]
                _crossed_out(rng, canvas, np.asarray(base, np.float32))
            else:
                draw[kind](rng, canvas)
            out[i] = to_model_input(canvas)
            if not _looks_like_one(out[i]):
                break
    return out


def _looks_like_one(cell: np.ndarray) -> bool:
    """True for a tall thin mark: ink bounding box at most 7 px wide, 20 high."""
    cols = np.nonzero(cell.max(axis=0) > 0.3)[0]
    rows = np.nonzero(cell.max(axis=1) > 0.3)[0]
    return cols.size > 0 and rows.size >= 16 and cols[-1] - cols[0] < 7
