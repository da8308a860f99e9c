"""Our stroke-model handwriting, re-exported for the forms, tests and benchmarks.

The model lives in :mod:`recognizer.digits.handwriting` since training uses it
(the library may not import :mod:`recognizer.synth`).
"""

from recognizer.digits.handwriting import (
    STRAY_MARK_KINDS,
    Allograph,
    Stroke,
    Writer,
    draw_stray_mark,
    fit_glyph,
)

__all__ = ["STRAY_MARK_KINDS", "Allograph", "Stroke", "Writer", "draw_stray_mark", "fit_glyph"]
