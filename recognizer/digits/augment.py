"""Augmented copies of digit cells: for training, retraining and calibration.

Each copy is distorted in three independent ways and brought back to the
MNIST layout (:func:`recognizer.digits.preprocess.to_model_input`, the same
path reading uses):

* random affine map (rotation, shear, scale per axis, shift; :func:`random_affine`);
* elastic distortion (Simard, Steinkraus & Platt 2003; :func:`elastic_distortion`);
* stroke thickening or thinning (grey dilation or erosion; :func:`stroke_thickness`).

:func:`augment` makes the training-strength copies used by
:mod:`recognizer.digits.training` and :mod:`recognizer.digits.retrain`;
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
