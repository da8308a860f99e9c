"""How many wrong values can be left among the fields nobody checked: the statistics of a spot check.

A spot check (:mod:`recognizer.review.audit`) has a person look at ``n``
fields drawn at random among those the reader accepted without a person and
finds ``k`` of them wrong. Read as ``n`` independent draws with an unknown
share ``p`` of wrong values, the one-sided upper confidence bound on ``p`` is
the exact binomial (Clopper–Pearson) bound (Clopper & Pearson 1934,
Biometrika 26:404–413): the ``p`` at which seeing ``k`` or fewer errors in
``n`` has probability ``1 - confidence``, which is the ``confidence``
quantile of a Beta(k + 1, n - k) distribution. With no error found it is
``1 - (1 - confidence) ** (1 / n)``, close to ``3 / n`` at 95 % (the "rule of
three", Hanley & Lippman-Hand 1983, JAMA 249:1743–1745). With ``k = n`` (or no
field audited) nothing is shown: the bound is 1.

The bound treats the drawn fields as draws with replacement from a very large
pool; drawn without replacement from a finite batch it is a little too high
(on the safe side). scipy is imported inside the functions that need it, so
the window starts without it.
"""

from __future__ import annotations

import math

__all__ = [
    "CONFIDENCE", "CONFIDENCE_WORDS", "clopper_pearson_upper", "zero_error_bound", "fields_needed", "parse_share",
    "percent", "share_words",
]

#: Confidence of the bounds stated (one-sided).
CONFIDENCE = 0.95
#: The same in words.
CONFIDENCE_WORDS = f"{CONFIDENCE * 100:g} %"


def clopper_pearson_upper(errors: int, audited: int, confidence: float = CONFIDENCE) -> float:
    """One-sided upper ``confidence`` bound on the share of wrong values, ``errors`` found in ``audited``.

    ``scipy.stats.beta.ppf(confidence, errors + 1, audited - errors)``; 1.0
    when ``errors == audited`` (including nothing audited).
    """
    if audited < 0 or not 0 <= errors <= audited:
        raise ValueError(f"need 0 <= errors <= audited, got {errors} errors in {audited}")
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must lie between 0 and 1, got {confidence}")
    if errors == audited:
        return 1.0
    from scipy.stats import beta  # (lazily: the window starts without scipy)

    return float(beta.ppf(confidence, errors + 1, audited - errors))


def zero_error_bound(audited: int, confidence: float = CONFIDENCE) -> float:
    """The bound with no error found in ``audited`` fields: ``1 - (1 - confidence) ** (1 / audited)``."""
    if audited <= 0:
        return 1.0
    return 1.0 - (1.0 - confidence) ** (1.0 / audited)


def fields_needed(target: float, errors: int = 0, confidence: float = CONFIDENCE) -> int:
    """The fewest fields to audit so that finding ``errors`` wrong ones still bounds the share at ``target``.

    The smallest ``n`` with :func:`clopper_pearson_upper` ``(errors, n) <= target``;
    with no error, the smallest ``n`` with ``1 - (1 - confidence) ** (1 / n) <= target``
    (2,995 for 0.1 % at 95 %).
    """
    if not 0 < target < 1:
        raise ValueError(f"the target share must lie between 0 and 1, got {target}")
    if errors < 0:
        raise ValueError("errors must be 0 or more")
    if errors == 0:
        n = max(1, math.ceil(math.log(1.0 - confidence) / math.log1p(-target)))
        while n > 1 and zero_error_bound(n - 1, confidence) <= target:  # (rounding of the logarithms)
            n -= 1
        while zero_error_bound(n, confidence) > target:
            n += 1
        return n
    low, high = errors, errors + 1  # the bound falls as n grows: bracket, then halve
    while clopper_pearson_upper(errors, high, confidence) > target:
        low, high = high, high * 2
    while high - low > 1:
        mid = (low + high) // 2
        if clopper_pearson_upper(errors, mid, confidence) <= target:
            high = mid
        else:
            low = mid
    return high


def parse_share(text: str) -> float:
    """``"0.1%"`` or ``"0.001"`` as a share (0.001); ValueError unless strictly between 0 and 1."""
    raw = text.strip()
    try:
        share = float(raw[:-1].strip()) / 100.0 if raw.endswith("%") else float(raw)
    except ValueError:
        raise ValueError(f"expected a share such as 0.1% or 0.001, got {text!r}") from None
    if not 0 < share < 1:
        raise ValueError(f"the share must lie between 0 and 1 (0 % and 100 %), got {text!r}")
    return share


def percent(share: float) -> str:
    """A bound in words for a report, three significant digits rounded up (a bound is never understated):
    ``0.09131`` -> ``"9.14 %"``, ``0.00123`` -> ``"0.123 %"``."""
    value = 100.0 * share
    if value <= 0:
        return "0 %"
    digits = max(0, 2 - math.floor(math.log10(value)))
    scale = 10.0**digits
    return f"{math.ceil(value * scale - 1e-9) / scale:.{digits}f} %"


def share_words(share: float) -> str:
    """A share someone asked for, as they would write it: ``0.001`` -> ``"0.1 %"``."""
    return f"{round(100.0 * share, 10):g} %"
