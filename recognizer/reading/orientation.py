"""Pages scanned upside down, told by how sure the reader is of their digits.

A page fed upside down into a scanner still has its boxes in rows, so the box
finder finds fields on it; but its digits stand on their heads, and the model
reads most of them with much less confidence (a turned 7 is no digit at all;
only 0, 1, 8 and the pair 6/9 survive turning).  Without a template there is
no printed reference to align to, so the reader judges by the digits:

* the page's *sureness* is the mean of the natural log of the confidence of
  its written boxes (:func:`sureness`; 0 when every digit is certain);
* a page at least :data:`MIN_BOXES` written boxes strong and less sure than
  :data:`SUSPECT` is read again turned by 180 degrees, and the turned reading
  is kept when it is surer by at least :data:`MARGIN` (the page then carries
  the note :data:`TURNED`, one of :data:`recognizer.states.PAGE_NOTES`: it flags no field).

Measured on the 13 bundled sample pages (ours: stroke-model handwriting) read
by the shipped model: upright pages -0.001 to -0.054, the same pages turned
-0.098 to -0.277; one sample card turned upside down reads -0.124, and -0.001
once turned back.  The thresholds are set from these figures (common practice
tuned on our pages, no source).  A page whose digits are all 0, 1, 8, 6 and 9
reads about as surely both ways and is left as it is.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

from recognizer.states import TURNED_PAGE

__all__ = ["MIN_BOXES", "SUSPECT", "MARGIN", "TURNED", "sureness", "worth_turning", "turned_is_better"]

MIN_BOXES = 6
SUSPECT = -0.06
MARGIN = 0.05
TURNED = TURNED_PAGE


def sureness(confidences: Iterable[float]) -> float | None:
    """Mean natural log of the confidences of a page's written boxes (None without any)."""
    logs = [math.log(min(1.0, max(float(c), 1e-6))) for c in confidences]
    return sum(logs) / len(logs) if logs else None


def worth_turning(confidences: Iterable[float]) -> bool:
    """Whether a page read with these confidences should be read again turned by 180 degrees."""
    confidences = list(confidences)
    s = sureness(confidences)
    return s is not None and len(confidences) >= MIN_BOXES and s < SUSPECT


def turned_is_better(upright: Iterable[float], turned: Iterable[float]) -> bool:
    """Whether the turned reading (its boxes' confidences) is clearly surer than the upright one."""
    a, b = sureness(upright), sureness(turned)
    return a is not None and b is not None and b >= a + MARGIN
