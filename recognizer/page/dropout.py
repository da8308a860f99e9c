"""Forms printed in a dropout colour: the printed boxes and the pen's ink taken apart by colour.

Many forms print their boxes in a light colour (red, green, blue) so that a
scanner set to drop that colour keeps only the handwriting. On a colour
scan Inkcount does the dropping itself, and keeps both layers: the boxes'
geometry is found on the *printed* layer, and the digits are cut from the
*ink* layer, where the box lines are already gone.

Method, in CIE L*a*b* (OpenCV's 8-bit scale):

1. Paper: the 95th percentile of lightness, and the median colour of the
   pixels within 12 levels of it.
2. Every pixel's darkness (paper lightness minus its own) and chroma (its
   distance from the paper's colour in a*b*).
3. The pen is darker than a dropout print (that is what makes a colour a
   dropout colour): Otsu's threshold on the darkness of the marked pixels
   (25 levels or more below the paper), kept within 70..170, splits the pen
   (darker: black or blue ballpoint and felt-tip, and black printed text)
   from the print. A dropout print is the lighter marked pixels with colour:
   chroma at least 18.
4. The page has a dropout colour when its light coloured pixels make up at
   least 0.3 % of it and their hues agree (one colour: the circular spread
   of the hue under 35 degrees); the colour is named from its mean hue.
5. Printed layer: the printed pixels black on white. Ink layer: the ink
   pixels with their darkness, everything else white.

A light-grey print has no colour to tell it from pencil; it is read as
ordinary printed boxes (the box finder copes with faint lines and warns). A
page scanned in black and white loses a dropout print altogether: no boxes
are found, and the page needs its form template (the reader says so).

Thresholds are common practice tuned on our generated forms, no source.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

__all__ = ["DropoutLayers", "split_dropout"]

_PAPER_BAND = 12.0
_MARKED = 25.0           # levels of L* (0..255) below the paper: something is printed or written
_INK_DARKNESS = (70.0, 170.0)  # bounds of the darkness that separates the pen from the print
_PRINT_CHROMA = 18.0     # a*b* distance from the paper: a coloured print
_MIN_SHARE = 0.003       # of the page: enough printed pixels to be a form's boxes
_MAX_HUE_SPREAD = 35.0   # degrees
_SAME_HUE = 30.0         # degrees from the print's mean hue
_HUE_NAMES = ((0.0, "red"), (60.0, "orange"), (100.0, "yellow"), (150.0, "green"), (220.0, "cyan"),
              (265.0, "blue"), (320.0, "magenta"), (360.0, "red"))


@dataclass
class DropoutLayers:
    """A dropout-colour page taken apart.

    Attributes
    ----------
    printed : (M, N) uint8 ndarray
        The coloured print (boxes, lines, coloured text) black on white.
    ink : (M, N) uint8 ndarray
        The pen's ink with its darkness, everything else white (255).
    colour : str
        The print's colour in words ("red", "green", "blue", ...).
    """

    printed: np.ndarray
    ink: np.ndarray
    colour: str


def split_dropout(rgb: np.ndarray) -> DropoutLayers | None:
    """The printed and ink layers of a page printed in a dropout colour, or None if it has none.

    Parameters
    ----------
    rgb : (M, N, 3) uint8 ndarray
        The page in colour, RGB.
    """
    if rgb.ndim != 3 or rgb.shape[2] != 3:
        raise ValueError(f"rgb must be (M, N, 3), got shape {rgb.shape}")
    lab = cv2.cvtColor(np.ascontiguousarray(rgb), cv2.COLOR_RGB2LAB).astype(np.float32)
    lightness, a, b = lab[..., 0], lab[..., 1] - 128.0, lab[..., 2] - 128.0
    paper_l = float(np.percentile(lightness[::4, ::4], 95))
    near = lightness[::4, ::4] >= paper_l - _PAPER_BAND
    a0, b0 = float(np.median(a[::4, ::4][near])), float(np.median(b[::4, ::4][near]))
    darkness = paper_l - lightness
    chroma = np.hypot(a - a0, b - b0)
    marked = darkness[::2, ::2][darkness[::2, ::2] > _MARKED]
    if marked.size < 100:
        return None
    split, _ = cv2.threshold(np.clip(marked, 0, 255).astype(np.uint8).reshape(1, -1), 0, 255,
                             cv2.THRESH_BINARY + cv2.THRESH_OTSU)
    ink = darkness >= float(np.clip(split, *_INK_DARKNESS))
    coloured = (chroma >= _PRINT_CHROMA) & (darkness > _MARKED)
    printed = coloured & ~ink
    if float(printed.mean()) < _MIN_SHARE:
        return None
    spread, mean_hue = _circular_spread(np.degrees(np.arctan2(b[printed] - b0, a[printed] - a0)))
    if spread > _MAX_HUE_SPREAD:
        return None
    # A print darker than the split, of the print's own hue, is still print (a deep red under a
    # blue pen); a pen of the print's hue is told apart by darkness alone.
    hue = np.degrees(np.arctan2(b - b0, a - a0))
    same_hue = np.abs((hue - mean_hue + 180.0) % 360.0 - 180.0) <= _SAME_HUE
    deep_print = coloured & same_hue & (darkness < _INK_DARKNESS[1])
    ink &= ~deep_print
    printed |= deep_print
    printed_layer = np.where(printed, 0, 255).astype(np.uint8)
    ink_layer = np.where(ink, np.clip(255.0 - darkness * (255.0 / max(paper_l, 1.0)), 0, 255), 255.0)
    return DropoutLayers(printed_layer, ink_layer.astype(np.uint8), _hue_name(mean_hue))


def _circular_spread(degrees: np.ndarray) -> tuple[float, float]:
    """(circular standard deviation, circular mean) of angles in degrees."""
    rad = np.radians(degrees)
    c, s = float(np.mean(np.cos(rad))), float(np.mean(np.sin(rad)))
    r = min(1.0, max(np.hypot(c, s), 1e-12))
    return float(np.degrees(np.sqrt(-2.0 * np.log(r)))), float(np.degrees(np.arctan2(s, c)) % 360.0)


def _hue_name(hue: float) -> str:
    """A colour word for an a*b* hue angle (0 = red, 90 = yellow, 180 = green, 270 = blue)."""
    return min(_HUE_NAMES, key=lambda t: min(abs(hue - t[0]), 360 - abs(hue - t[0])))[1]
