"""How review states look: a colour-blind-safe palette, a mark that does not rely on
colour, and the plain words a clerk reads.

The hues are chosen from the Okabe & Ito colour-universal-design set (Okabe &
Ito, "Color Universal Design", 2008), which stays distinguishable for the
common kinds of colour blindness. Every state also has its own mark and line
style, so nothing depends on colour alone.

Why a field is flagged is put in words by :func:`recognizer.states.reasons_in_words`
(one list of reasons and words for the library and the window).
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QColor
from PySide6.QtWidgets import QLabel

from recognizer import CAUTION
from recognizer.review import CONFIRMED, CORRECTED, READ, TO_CHECK, UNREADABLE

__all__ = ["STATE_COLOURS", "STATE_MARKS", "STATE_WORDS", "STATE_LINES", "CAUTION", "SHORT_CAUTION",
           "CAUTION_STYLE", "colour", "caution_label"]

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
SHORT_CAUTION = "Automatic reading makes mistakes: check what is flagged before using the figures."
#: The caution's box: dark text on light amber, with an amber border.
CAUTION_STYLE = "QLabel { background: #FFF4D6; color: #4A3B00; border: 1px solid #E69F00; padding: 6px; }"


def colour(state: str) -> QColor:
    return STATE_COLOURS.get(state, STATE_COLOURS[READ])


def caution_label() -> QLabel:
    """The full caution (:data:`CAUTION`) in its amber box, named "Caution" for screen readers."""
    label = QLabel("⚠ " + CAUTION)
    label.setWordWrap(True)
    label.setAccessibleName("Caution")
    label.setStyleSheet(CAUTION_STYLE)
    return label
