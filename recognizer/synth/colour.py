"""Colours of printed forms and of pens, and how coloured layers make a page.

A printed colour or an ink acts as a filter on white paper: a layer's
*coverage* ``a`` (0 = none, 1 = full, from a grey drawing where 0 = full
ink) turns a paper pixel into ``255 - a * (255 - c)`` per channel, and layers
on top of each other multiply (subtractive mixing, as ink on paper).  Grey
images are made from colour ones as Pillow's ``convert("L")`` makes them
(ITU-R 601-2 luma, the same integer rounding), so a colour page saved and
read back by :mod:`recognizer.scans` gives the same grey as
:attr:`RenderedForm.image`.

The RGB values are our own choices for light dropout inks (they read at 150
to 185 grey levels, lighter than any pen) and for ballpoint pens.
"""

from __future__ import annotations

import numpy as np

PRINT_RGB: dict[str, tuple[int, int, int]] = {
    "black": (0, 0, 0),
    "red": (236, 120, 120),    # light "dropout" red
    "green": (120, 200, 140),
    "blue": (130, 170, 235),   # light blue, far lighter than a blue pen
    "grey": (185, 185, 185),   # light grey
}
"""RGB of every print colour of :data:`recognizer.synth.layouts.PRINT_COLOURS`."""

INK_RGB: dict[str, tuple[int, int, int]] = {
    "black": (22, 22, 28),
    "blue": (30, 50, 150),     # a blue ballpoint
}
"""RGB of the pens the handwriting is written with, at full pressure."""

INKS = tuple(INK_RGB)


def to_grey(rgb: np.ndarray) -> np.ndarray:
    """(M, N, 3) uint8 RGB -> (M, N) uint8 grey, exactly as Pillow's ``convert("L")``."""
    rgb = np.asarray(rgb)
    if rgb.ndim != 3 or rgb.shape[2] != 3 or rgb.dtype != np.uint8:
        raise ValueError(f"expected an (M, N, 3) uint8 RGB image, got {rgb.shape} {rgb.dtype}")
    luma = (rgb[..., 0].astype(np.uint32) * 19595 + rgb[..., 1].astype(np.uint32) * 38470
            + rgb[..., 2].astype(np.uint32) * 7471 + 0x8000) >> 16
    return luma.astype(np.uint8)


def tint(layer: np.ndarray, rgb: tuple[int, int, int]) -> np.ndarray:
    """A grey drawing (0 = full ink, 255 = none) printed in colour ``rgb``: (M, N, 3) uint8."""
    coverage = (255.0 - layer.astype(np.float32)) / 255.0
    colour = 255.0 - np.asarray(rgb, np.float32)
    out = 255.0 - coverage[..., None] * colour
    return np.clip(out + 0.5, 0, 255).astype(np.uint8)


def multiply(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Two colour (or grey) layers on top of each other: ``a * b / 255``, rounded."""
    out = a.astype(np.uint16) * b.astype(np.uint16)
    return ((out + 127) // 255).astype(np.uint8)
