"""The one path from a box's ink to the digit model's input.

Reading (:mod:`recognizer.page.cells`), augmentation for training and
retraining (:mod:`recognizer.digits.augment`), not-a-digit marks
(:mod:`recognizer.digits.marks`) and retraining all call
:func:`to_model_input`, so the model sees every digit prepared the same way.
The model itself removes the slant of each cell (:func:`deskew`) before its
forward pass.

MNIST layout (LeCun, Cortes & Burges): the ink's bounding box scaled to fit
20 x 20 keeping its aspect ratio, placed in 28 x 28 with its centre of mass on
pixel (14, 14) (row, column), white ink on black, 0..1.
"""

from __future__ import annotations

import cv2
import numpy as np

__all__ = ["CELL_SIDE", "to_model_input", "deskew"]

#: Side of the model's input square (MNIST).
CELL_SIDE = 28
_FIT = 20           # the ink's bounding box fits this square
_SIDE = CELL_SIDE
_MAX_SHEAR = 1.0    # largest slant removed by deskew


def to_model_input(ink: np.ndarray) -> np.ndarray:
    """The digit model's input for one box's ink: the MNIST layout.

    Parameters
    ----------
    ink : (h, w) float ndarray
        Ink >= 0 (1 = ink), as :attr:`Cell.ink`.

    Returns
    -------
    numpy.ndarray
        (28, 28) float32 in 0..1, white ink on black: the bounding box of the
        ink (pixels above 5 % of the darkest) scaled so its longer side is 20
        pixels, keeping the aspect ratio, and shifted by whole pixels so the
        centre of mass lies within half a pixel of (row 14, column 14).  All
        zeros when there is no ink.
    """
    ink = np.asarray(ink, np.float32)
    if ink.ndim != 2:
        raise ValueError(f"ink must be 2-D, got shape {ink.shape}")
    out = np.zeros((_SIDE, _SIDE), np.float32)
    peak = float(ink.max()) if ink.size else 0.0
    if peak <= 0:
        return out
    x, y, w, h = cv2.boundingRect((ink > 0.05 * peak).astype(np.uint8))
    glyph = ink[y:y + h, x:x + w] / peak
    np.minimum(glyph, 1.0, out=glyph)
    np.maximum(glyph, 0.0, out=glyph)
    scale = _FIT / max(h, w)
    size = (max(1, int(round(w * scale))), max(1, int(round(h * scale))))
    glyph = cv2.resize(glyph, size, interpolation=cv2.INTER_AREA if scale < 1 else cv2.INTER_LINEAR)
    np.maximum(glyph, 0.0, out=glyph)
    glyph /= max(float(glyph.max()), 1e-6)
    total = float(glyph.sum())
    cy = float((glyph.sum(axis=1) * np.arange(glyph.shape[0])).sum()) / total
    cx = float((glyph.sum(axis=0) * np.arange(glyph.shape[1])).sum()) / total
    top, left = int(round(_SIDE / 2 - cy)), int(round(_SIDE / 2 - cx))
    _paste(out, glyph, top, left)
    return out


def _paste(canvas: np.ndarray, patch: np.ndarray, top: int, left: int) -> None:
    """Write ``patch`` into ``canvas`` with its corner at (top, left), clipped to the canvas."""
    h, w = patch.shape
    r0, c0 = max(top, 0), max(left, 0)
    r1, c1 = min(top + h, canvas.shape[0]), min(left + w, canvas.shape[1])
    if r0 < r1 and c0 < c1:
        canvas[r0:r1, c0:c1] = patch[r0 - top:r1 - top, c0 - left:c1 - left]


def deskew(cells: np.ndarray) -> np.ndarray:
    """Remove the slant of each cell by a moment shear.

    Each row is shifted horizontally by ``s * (y - cy)`` with
    ``s = mu11 / mu02`` (second-order central moments of the ink) so that the
    cross moment ``mu11`` of the result is zero; the centre of mass stays put.
    Rows are resampled with linear interpolation (``cv2.warpAffine``),
    outside pixels are 0.

    Parameters
    ----------
    cells : ndarray, shape (n, 28, 28) or (28, 28)
        Ink intensity in 0..1 (white ink on black).

    Returns
    -------
    ndarray, float32, same shape as ``cells``, values in 0..1.
        Cells without ink come back unchanged.  The shear factor is clamped
        to ``[-1, 1]`` so that a stray line cannot be sheared off the cell.
    """
    a = np.clip(np.asarray(cells, dtype=np.float32), 0.0, 1.0)
    single = a.ndim == 2
    if single:
        a = a[None]
    if a.ndim != 3:
        raise ValueError(f"cells must be (n, h, w) or (h, w), got shape {a.shape}")
    n, h, w = a.shape
    if n == 0:
        return a.copy()
    ys = np.arange(h, dtype=np.float32)
    xs = np.arange(w, dtype=np.float32)
    rows = a.sum(axis=2)  # (n, h)
    cols = a.sum(axis=1)  # (n, w)
    mass = rows.sum(axis=1)
    safe = np.where(mass > 1e-6, mass, 1.0)
    cy = rows @ ys / safe
    cx = cols @ xs / safe
    dy = ys[None, :] - cy[:, None]  # (n, h)
    dx = xs[None, :] - cx[:, None]  # (n, w)
    mu02 = np.einsum("ny,ny->n", rows, dy * dy) / safe
    mu11 = np.einsum("nyx,ny,nx->n", a, dy, dx, optimize=True) / safe
    shear = np.where(mu02 > 1e-2, mu11 / np.where(mu02 > 1e-2, mu02, 1.0), 0.0)
    shear = np.clip(shear, -_MAX_SHEAR, _MAX_SHEAR)
    out = np.empty_like(a)
    flags = cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP
    m = np.zeros((n, 2, 3))
    m[:, 0, 0] = m[:, 1, 1] = 1.0
    m[:, 0, 1] = shear
    m[:, 0, 2] = -shear * cy  # output (x, y) samples the input at (x + s * (y - cy), y)
    for i in range(n):
        cv2.warpAffine(a[i], m[i], (w, h), dst=out[i], flags=flags, borderMode=cv2.BORDER_CONSTANT)
    np.clip(out, 0.0, 1.0, out=out)
    return out[0] if single else out
