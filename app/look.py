"""How review states look: a colour-blind-safe palette, a mark that does not rely on
colour, and the plain words a clerk reads.

The hues are chosen from the Okabe & Ito colour-universal-design set (Okabe &
Ito, "Color Universal Design", 2008), which stays distinguishable for the
common kinds of colour blindness. Every state also has its own mark and line
style, so nothing depends on colour alone.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QColor

from recognizer.cli.main import CAUTION
from recognizer.review.actions import CONFIRMED, CORRECTED, READ, TO_CHECK, UNREADABLE

__all__ = ["STATE_COLOURS", "STATE_MARKS", "STATE_WORDS", "STATE_LINES", "REASON_WORDS", "CAUTION",
           "SHORT_CAUTION", "colour", "reasons_in_words"]

STATE_COLOURS = {
    TO_CHECK: QColor("#D55E00"),     # vermillion
    CORRECTED: QColor("#0072B2"),    # blue
    CONFIRMED: QColor("#009E73"),    # bluish green
    UNREADABLE: QColor("#CC79A7"),   # reddish purple
    READ: QColor("#7F7F7F"),         # grey: accepted automatically
}
STATE_MARKS = {TO_CHECK: "?", CORRECTED: "✎", CONFIRMED: "✓", UNREADABLE: "✗", READ: "·"}
STATE_WORDS = {
    TO_CHECK: "to check",
    CORRECTED: "corrected",
    CONFIRMED: "confirmed",
    UNREADABLE: "unreadable",
    READ: "read, not flagged",
}
#: Outline style per state: flagged fields get a thick dashed line.
STATE_LINES = {
    TO_CHECK: (Qt.PenStyle.DashLine, 4),
    CORRECTED: (Qt.PenStyle.SolidLine, 3),
    CONFIRMED: (Qt.PenStyle.SolidLine, 3),
    UNREADABLE: (Qt.PenStyle.DotLine, 4),
    READ: (Qt.PenStyle.SolidLine, 1),
}
#: The review queue's reasons in the words the window uses.
REASON_WORDS = {
    "low confidence": "a digit the reader is unsure of",
    "not a digit": "a mark that may not be a digit",
    "gap": "an empty box between digits",
    "page warnings": "the page was hard to line up",
    "layout differs": "this page's boxes differ from the other pages",
}
SHORT_CAUTION = "Automatic reading makes mistakes: check what is flagged before using the figures."


def colour(state: str) -> QColor:
    return STATE_COLOURS.get(state, STATE_COLOURS[READ])


def reasons_in_words(why: tuple[str, ...]) -> str:
    """The reasons a field is flagged, in words; a broken template rule shows as the rule says it."""
    return "; ".join(f"a rule is broken — {w[5:]}" if w.startswith("rule ") else REASON_WORDS.get(w, w)
                     for w in why)
