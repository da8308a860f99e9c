"""Demo and test forms: one place for the public names of the form generator.

A :class:`FormLayout` describes a printed form in millimetres: its digit
fields (rows of boxes, each in a comb style: closed or separate boxes, open
combs, boxes in table cells) in reading order and the other printed furniture
(text, a notes rectangle, signature lines, a table, a logo, checkboxes) that
a box finder must not take for digit boxes, all in black or a dropout colour.
:func:`render_form` prints the form at a given resolution and writes digits
into the boxes with a black or blue pen, recording where every box's inner
rectangle lies (grey, and RGB when colours are involved); :func:`scan_distort`
imitates a scanner (placement, blur, uneven light, noise, faded or broken
lines) and moves the recorded rectangles along; :func:`bitonal_scan`,
:func:`as_jpeg`, :func:`inverted`, :func:`turned`, :func:`cut_off` and
:func:`phone_photo` are the other captures; :func:`save_scan` writes the usual
scan formats.

The designs: :func:`orchard_card` (closed boxes), :func:`tally_sheet`
(separate boxes), :func:`crate_return_slip` (open combs with separators),
:func:`weigh_ticket` (closed boxes in dropout red), :func:`bin_register`
(boxes in table cells) and :func:`bench_page`; :func:`recolour` prints any of
them in another colour.

Pixel coordinates are continuous: pixel (row r, column c) covers
``[c, c + 1) x [r, r + 1)``, so its centre is ``(c + 0.5, r + 0.5)``.
"""

from recognizer.synth.capture import (
    as_jpeg,
    bitonal_scan,
    cut_off,
    fields_inside,
    inverted,
    save_scan,
    scan_distort,
    turned,
    upside_down,
)
from recognizer.synth.colour import INK_RGB, INKS, PRINT_RGB, to_grey
from recognizer.synth.designs import (
    DESIGN_STYLES,
    DESIGNS,
    bin_register,
    crate_return_slip,
    grouped_fields,
    tally_sheet,
    weigh_ticket,
)
from recognizer.synth.layouts import (
    COMB_STYLES,
    DROPOUT_COLOURS,
    LINE_MM,
    MM_PER_INCH,
    ORCHARD_VARIETIES,
    PRINT_COLOURS,
    VALUE_KINDS,
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
    recolour,
)
from recognizer.synth.photo import (
    BACKGROUNDS,
    PHONE_FILE_DPI,
    Photo,
    camera_homography,
    phone_photo,
    photo_without_page,
)
from recognizer.synth.render import RenderedForm, mm_to_px, render_form

__all__ = [
    "LINE_MM", "MM_PER_INCH", "ORCHARD_VARIETIES", "DigitSource", "FieldSpec", "FormLayout", "Line", "Logo",
    "Rect", "Table", "Text", "bench_page", "fnames", "orchard_card", "random_values", "RenderedForm",
    "mm_to_px", "render_form", "save_scan", "scan_distort",
    # comb styles, colours and more designs
    "COMB_STYLES", "DROPOUT_COLOURS", "PRINT_COLOURS", "VALUE_KINDS", "recolour", "INKS", "INK_RGB",
    "PRINT_RGB", "to_grey", "DESIGNS", "DESIGN_STYLES", "bin_register", "crate_return_slip",
    "grouped_fields", "tally_sheet", "weigh_ticket",
    # captures
    "as_jpeg", "bitonal_scan", "cut_off", "fields_inside", "inverted", "turned", "upside_down",
    "BACKGROUNDS", "PHONE_FILE_DPI", "Photo", "camera_homography", "phone_photo", "photo_without_page",
]
