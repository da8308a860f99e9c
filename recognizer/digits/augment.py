"""Augmented copies of digit cells: for training, retraining and calibration.

Each copy is distorted in three independent ways and brought back to the
MNIST layout (:func:`recognizer.digits.preprocess.to_model_input`, the same
path reading uses):

* random affine map (rotation, shear, scale per axis, shift; :func:`random_affine`);
* elastic distortion (Simard, Steinkraus & Platt 2003; :func:`elastic_distortion`);
* stroke thickening or thinning (grey dilation or erosion; :func:`stroke_thickness`).

:func:`fresh_copies` makes the copies the base training draws afresh every
epoch (:mod:`recognizer.digits.training`): affine map and elastic distortion
in one resampling, thicker or thinner strokes, and now and then a
low-resolution capture (:func:`low_resolution`: a fax or a 100-200 dpi scan,
down- then up-sampled, sometimes one bit deep).  :func:`augment` makes the
copies fine-tuning mixes in (:mod:`recognizer.digits.retrain`);
:func:`mild_copies` the weak copies scored for the threshold curve
(:mod:`recognizer.digits.calibration`).  OpenCV and numpy only.
"""

from __future__ import annotations

import cv2
import numpy as np

from recognizer.digits.preprocess import to_model_input


def random_affine(cell: np.ndarray, rng: np.random.Generator, *, strength: float = 1.0) -> np.ndarray:
    """Rotate (±12°), shear (±0.3), scale (0.8–1.15 per axis) and shift (±2 px) one cell.

    Parameters
    ----------
    cell : ndarray, shape (28, 28), float32 0..1
    rng : numpy.random.Generator
    strength : float
        Multiplies every range (0.25: ±3°, shear ±0.075, scale 0.95–1.04, shift ±0.5 px).

    Returns
    -------
    ndarray, shape (28, 28), float32 0..1
    """
    angle = np.deg2rad(rng.uniform(-12, 12) * strength)
    shear = rng.uniform(-0.3, 0.3) * strength
    sx, sy = 1.0 + (rng.uniform(0.8, 1.15, size=2) - 1.0) * strength
    rot = np.array([[np.cos(angle), -np.sin(angle)], [np.sin(angle), np.cos(angle)]])
    a = rot @ np.array([[1.0, shear], [0.0, 1.0]]) @ np.diag([sx, sy])
    centre = np.array([13.5, 13.5])
    t = centre - a @ centre + rng.uniform(-2, 2, size=2) * strength
    m = np.hstack([a, t[:, None]])
    return cv2.warpAffine(cell, m, (28, 28), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT)


def elastic_distortion(
    cell: np.ndarray, rng: np.random.Generator, *, alpha: float = 34.0, sigma: float = 4.0
) -> np.ndarray:
    """Elastic distortion (Simard, Steinkraus & Platt 2003).

    A random displacement field (uniform in -1..1 per pixel and axis) is
    smoothed with a Gaussian of width ``sigma`` and scaled by ``alpha``; the
    cell is resampled along it (bilinear).

    Parameters
    ----------
    cell : ndarray, shape (28, 28), float32 0..1
    rng : numpy.random.Generator
    alpha, sigma : float
        Strength and smoothness (pixels); 34 and 4 are the paper's MNIST values.

    Returns
    -------
    ndarray, shape (28, 28), float32 0..1
    """
    h, w = cell.shape
    d = rng.uniform(-1, 1, size=(2, h, w)).astype(np.float32)
    dx = cv2.GaussianBlur(d[0], (0, 0), sigma) * alpha
    dy = cv2.GaussianBlur(d[1], (0, 0), sigma) * alpha
    gy, gx = np.mgrid[0:h, 0:w].astype(np.float32)
    return cv2.remap(cell, gx + dx, gy + dy, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT)


def stroke_thickness(cell: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Thicken (grey dilation) or thin (grey erosion) the strokes with a small kernel.

    Returns
    -------
    ndarray, shape (28, 28), float32 0..1 -- the input unchanged if erosion would wipe it out.
    """
    kernel = np.ones((2, 2) if rng.random() < 0.7 else (3, 3), np.uint8)
    if rng.random() < 0.5:
        return cv2.dilate(cell, kernel)
    thin = cv2.erode(cell, np.ones((2, 2), np.uint8))
    return thin if thin.sum() > 0.4 * cell.sum() else cell


def augment(cells: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One augmented copy of each cell, brought back to the MNIST layout.

    Each copy gets a random affine map, an elastic distortion with probability
    0.7 and a stroke-thickness change with probability 0.3.

    Parameters
    ----------
    cells : ndarray, shape (n, 28, 28), float 0..1
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, float32, shape (n, 28, 28), values 0..1
    """
    out = np.empty((len(cells), 28, 28), np.float32)
    for i, cell in enumerate(np.asarray(cells, np.float32)):
        x = random_affine(cell, rng)
        if rng.random() < 0.7:
            x = elastic_distortion(x, rng, alpha=rng.uniform(20, 36), sigma=rng.uniform(3.5, 5.0))
        if rng.random() < 0.3:
            x = stroke_thickness(x, rng)
        out[i] = to_model_input(x) if x.max() > 0 else cell
    return out


def mild_copies(cells: np.ndarray, rng: np.random.Generator, *, strength: float = 0.25) -> np.ndarray:
    """One mildly distorted copy of each cell, for calibration (not training).

    A random affine map scaled by ``strength`` and, with probability 0.5, an
    elastic distortion of strength ``34 * strength`` (sigma 4.5), brought back
    to the MNIST layout.  At 0.25 the copies are about as hard as the real
    digits (measured: 98.1 % accuracy on copies of validation digits read
    97.7 %), so they add evidence without shifting the error rate much.

    Parameters
    ----------
    cells : ndarray, shape (n, 28, 28), float 0..1
    rng : numpy.random.Generator
    strength : float

    Returns
    -------
    ndarray, float32, shape (n, 28, 28), values 0..1
    """
    out = np.empty((len(cells), 28, 28), np.float32)
    for i, cell in enumerate(np.asarray(cells, np.float32)):
        x = random_affine(cell, rng, strength=strength)
        if rng.random() < 0.5:
            x = elastic_distortion(x, rng, alpha=34.0 * strength, sigma=4.5)
        out[i] = to_model_input(x) if x.max() > 0 else cell
    return out


_GRID_Y, _GRID_X = np.mgrid[0:28, 0:28].astype(np.float32)


def _gaussian_matrices(sigmas: np.ndarray, side: int = 28) -> np.ndarray:
    """(n, side, side) matrices ``K`` with ``K @ f`` a Gaussian smoothing of the columns of ``f``.

    Kernel truncated at 4 sigma and normalised; outside the cell counts as 0.
    """
    offsets = np.arange(side, dtype=np.float32)[None, :] - np.arange(side, dtype=np.float32)[:, None]
    k = np.exp(-0.5 * (offsets[None] / sigmas[:, None, None].astype(np.float32)) ** 2)
    k[:, np.abs(offsets) > 4 * sigmas.max()] = 0.0
    norm = np.sqrt(2 * np.pi) * sigmas[:, None, None].astype(np.float32)
    return k / norm


def distortion_maps(
    n: int, rng: np.random.Generator, *, strength: float = 1.0, elastic: float = 0.7
) -> tuple[np.ndarray, np.ndarray]:
    """Sampling maps of ``n`` random distortions: affine map then elastic distortion, composed.

    Per cell: rotation ±12°, shear ±0.3, scale 0.8-1.15 per axis and shift
    ±2 px (the ranges of :func:`random_affine`, times ``strength``), then with
    probability ``elastic`` an elastic distortion (Simard, Steinkraus & Platt
    2003; alpha 20-36 times ``strength``, sigma 3.5-5).  Composed into one map,
    so a cell is interpolated once (``cv2.remap``).

    Returns
    -------
    map_x, map_y : ndarray, float32, shape (n, 28, 28)
        Where each output pixel samples the input (column, row).
    """
    angle = np.deg2rad(rng.uniform(-12, 12, n) * strength)
    shear = rng.uniform(-0.3, 0.3, n) * strength
    scale = 1.0 + (rng.uniform(0.8, 1.15, (n, 2)) - 1.0) * strength
    shift = rng.uniform(-2, 2, (n, 2)) * strength
    c, s = np.cos(angle), np.sin(angle)
    a = np.empty((n, 2, 2))
    a[:, 0, 0], a[:, 0, 1] = c * scale[:, 0], (c * shear - s) * scale[:, 1]
    a[:, 1, 0], a[:, 1, 1] = s * scale[:, 0], (s * shear + c) * scale[:, 1]
    centre = np.array([13.5, 13.5])
    t = centre - a @ centre + shift
    inv = np.linalg.inv(a)
    t_inv = -np.einsum("nij,nj->ni", inv, t)
    x = np.broadcast_to(_GRID_X, (n, 28, 28))
    y = np.broadcast_to(_GRID_Y, (n, 28, 28))
    bent = rng.random(n) < elastic
    alpha = rng.uniform(20, 36, n) * strength
    sigma = rng.uniform(3.5, 5.0, n)
    field = rng.uniform(-1, 1, size=(n, 2, 28, 28)).astype(np.float32)
    if bent.any():
        k = _gaussian_matrices(sigma[bent])[:, None]
        smooth = k @ field[bent] @ np.swapaxes(k, -1, -2) * alpha[bent, None, None, None].astype(np.float32)
        x, y = x.copy(), y.copy()
        x[bent] += smooth[:, 0]
        y[bent] += smooth[:, 1]
    f = inv.astype(np.float32)
    tf = t_inv.astype(np.float32)
    map_x = f[:, 0, 0, None, None] * x + f[:, 0, 1, None, None] * y + tf[:, 0, None, None]
    map_y = f[:, 1, 0, None, None] * x + f[:, 1, 1, None, None] * y + tf[:, 1, None, None]
    return map_x.astype(np.float32), map_y.astype(np.float32)


def stroke_width(cell: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """A thicker (felt-tip) or thinner (ballpoint) pen for one cell in the MNIST layout.

    Thicker: grey dilation with a 2 x 2 or 3 x 3 kernel (the 20-pixel glyph's
    strokes gain 1-2 pixels).  Thinner: the cell drawn at twice the size,
    eroded there by a 3 x 3 kernel (half a pixel at the cell's scale) and
    brought back, unless that would wipe out more than 60 % of the ink.

    Returns
    -------
    ndarray, shape (28, 28), float32 0..1
    """
    if rng.random() < 0.55:
        return cv2.dilate(cell, np.ones((2, 2) if rng.random() < 0.65 else (3, 3), np.uint8))
    big = cv2.resize(cell, (56, 56), interpolation=cv2.INTER_LINEAR)
    thin = cv2.resize(cv2.erode(big, np.ones((3, 3), np.uint8)), (28, 28), interpolation=cv2.INTER_AREA)
    return thin if thin.sum() > 0.4 * cell.sum() else cell


def low_resolution(cell: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """A low-resolution capture of one cell (fax, 100-200 dpi scan), in the MNIST layout.

    The glyph (ink bounding box) is brought down to 6-14 pixels high
    (area sampling; half as many rows again in a third of the cases, as a
    standard-mode fax does), made one bit deep (threshold 0.3-0.6) in a third
    of the cases, blurred lightly in half, and brought back up (bilinear) to
    the model input.  Nothing here was chosen by looking at a held-out set.

    Parameters
    ----------
    cell : ndarray, shape (28, 28), float32 0..1
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, shape (28, 28), float32 0..1 -- the input unchanged when it has no ink.
    """
    ys, xs = np.nonzero(cell > 0.05)
    if ys.size == 0:
        return cell
    glyph = np.pad(cell[ys.min():ys.max() + 1, xs.min():xs.max() + 1], 1)
    h, w = glyph.shape
    rows = rng.uniform(6.0, 14.0)
    cols = max(2, int(round(rows * w / h)))
    if rng.random() < 1 / 3:
        rows /= 2.0 if rng.random() < 0.5 else 1.5
    small = cv2.resize(glyph, (cols, max(3, int(round(rows)))), interpolation=cv2.INTER_AREA)
    if rng.random() < 1 / 3:
        small = (small > rng.uniform(0.3, 0.6) * small.max()).astype(np.float32)
    big = cv2.resize(small, (2 * w, 2 * h), interpolation=cv2.INTER_LINEAR)
    if rng.random() < 0.5:
        big = cv2.GaussianBlur(big, (0, 0), rng.uniform(0.5, 1.5))
    return to_model_input(big) if big.max() > 0 else cell


def fresh_copies(
    cells: np.ndarray,
    rng: np.random.Generator,
    *,
    strength: float = 1.0,
    elastic: float = 0.7,
    stroke: float = 0.3,
    low_res: float = 0.0,
    keep: float = 0.0,
) -> np.ndarray:
    """One freshly distorted copy of each cell, in the MNIST layout: the base training's epoch data.

    Each cell is kept as it is with probability ``keep``; otherwise it is
    resampled along a random distortion (:func:`distortion_maps`: affine map,
    elastic distortion with probability ``elastic``), gets a pen change
    (:func:`stroke_width`) with probability ``stroke`` and is brought back to
    the MNIST layout (:func:`recognizer.digits.preprocess.to_model_input`);
    with probability ``low_res`` it then becomes a low-resolution capture
    (:func:`low_resolution`).

    Parameters
    ----------
    cells : ndarray, shape (n, 28, 28), float 0..1
    rng : numpy.random.Generator
    strength, elastic, stroke, low_res, keep : float
        See above.

    Returns
    -------
    ndarray, float32, shape (n, 28, 28), values 0..1
    """
    cells = np.asarray(cells, np.float32)
    n = len(cells)
    out = np.empty((n, 28, 28), np.float32)
    if n == 0:
        return out
    kept = rng.random(n) < keep
    pen = rng.random(n) < stroke
    coarse = rng.random(n) < low_res
    map_x, map_y = distortion_maps(n, rng, strength=strength, elastic=elastic)
    for i, cell in enumerate(cells):
        x = cell
        if not kept[i]:
            x = cv2.remap(cell, map_x[i], map_y[i], cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT)
            if pen[i]:
                x = stroke_width(x, rng)
            x = to_model_input(x) if x.max() > 0 else cell
        if coarse[i]:
            x = low_resolution(x, rng)
        out[i] = x
    return out
