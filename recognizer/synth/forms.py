"""Demo and test forms: one place for the public names of the form generator.

A :class:`FormLayout` describes a printed form in millimetres: its digit
fields (rows of boxes) in reading order and the other printed furniture
(text, a notes rectangle, signature lines, a table, a logo, checkboxes) that
a box finder must not take for digit boxes.  :func:`render_form` prints the
form at a given resolution and writes digits into the boxes, recording where
every box's inner rectangle lies; :func:`scan_distort` imitates a scanner
(placement, blur, uneven light, noise, faded or broken lines) and moves the
recorded rectangles along; :func:`save_scan` writes the usual scan formats.

Pixel coordinates are continuous: pixel (row r, column c) covers
``[c, c + 1) x [r, r + 1)``, so its centre is ``(c + 0.5, r + 0.5)``.
"""

from recognizer.synth.capture import save_scan, scan_distort
from recognizer.synth.layouts import (
    LINE_MM,
    MM_PER_INCH,
    ORCHARD_VARIETIES,
    DigitSource,
    FieldSpec,
    FormLayout,
    Line,
    Logo,
    Rect,
    Table,
    Text,
    bench_page,
    fnames,
    orchard_card,
    random_values,
)
from recognizer.synth.render import RenderedForm, mm_to_px, render_form

__all__ = [
    "LINE_MM", "MM_PER_INCH", "ORCHARD_VARIETIES", "DigitSource", "FieldSpec", "FormLayout", "Line", "Logo",
    "Rect", "Table", "Text", "bench_page", "fnames", "orchard_card", "random_values", "RenderedForm",
    "mm_to_px", "render_form", "save_scan", "scan_distort",
]
