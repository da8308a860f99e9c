"""Check-digit systems for codes written in digit boxes.

Three published systems, each with a function that computes the check
character(s) of a payload and one that tests a whole code (payload followed
by its check character(s)):

* **Luhn** (ISO/IEC 7812-1, annex B): one check digit; every second digit
  from the right is doubled (digits of the product added), the sum made a
  multiple of ten.
* **ISO 7064 MOD 11-2** (ISO/IEC 7064, pure system): one check character,
  ``0``-``9`` or ``X`` for ten.
* **ISO 7064 MOD 97-10** (ISO/IEC 7064, pure system): two check digits; the
  whole code taken as a number is 1 modulo 97 (the system IBANs use after
  their letters are turned into digits).

All functions take digit strings (``"0"``-``"9"``; a MOD 11-2 code may end in
``X``) and refuse anything else with a :class:`ValueError`, since a field
read off a page holds only digits or ``?`` marks and a caller should test
for those first.
"""

from __future__ import annotations

__all__ = [
    "CHECK_SYSTEMS",
    "is_valid",
    "luhn_check_digit",
    "luhn_valid",
    "mod11_2_check_char",
    "mod11_2_valid",
    "mod97_10_check_digits",
    "mod97_10_valid",
]


def _digits(text: str, what: str) -> list[int]:
    if not text or not (text.isascii() and text.isdigit()):
        raise ValueError(f"{what} must be a non-empty string of digits, got {text!r}")
    return [int(c) for c in text]


def luhn_check_digit(payload: str) -> str:
    """The Luhn check digit for the digit string ``payload``.

    >>> luhn_check_digit("7992739871")
    '3'
    """
    total = 0
    # the check digit will sit at position 0 from the right, so the payload's
    # last digit (position 1) is doubled
    for i, d in enumerate(reversed(_digits(payload, "payload"))):
        if i % 2 == 0:
            d *= 2
            d -= 9 if d > 9 else 0
        total += d
    return str((10 - total % 10) % 10)


def luhn_valid(code: str) -> bool:
    """Whether ``code`` (payload + Luhn check digit, at least 2 digits) is valid."""
    _digits(code, "code")
    return len(code) >= 2 and luhn_check_digit(code[:-1]) == code[-1]


def mod11_2_check_char(payload: str) -> str:
    """The ISO 7064 MOD 11-2 check character (``0``-``9`` or ``X``) for ``payload``.

    >>> mod11_2_check_char("000000021825009")
    '7'
    """
    p = 0
    for d in _digits(payload, "payload"):
        p = (p + d) * 2 % 11
    c = (12 - p) % 11
    return "X" if c == 10 else str(c)


def mod11_2_valid(code: str) -> bool:
    """Whether ``code`` (payload + MOD 11-2 check character) is valid."""
    if len(code) < 2:
        _digits(code, "code")
        return False
    last = code[-1].upper()
    if last != "X":
        _digits(last, "code")
    return mod11_2_check_char(code[:-1]) == last


def mod97_10_check_digits(payload: str) -> str:
    """The two ISO 7064 MOD 97-10 check digits for ``payload``.

    >>> mod97_10_check_digits("32142829123456987654321611")
    '82'
    """
    n = int("".join(map(str, _digits(payload, "payload"))))
    return f"{98 - n * 100 % 97:02d}"


def mod97_10_valid(code: str) -> bool:
    """Whether ``code`` (payload + two MOD 97-10 check digits) is valid."""
    digits = _digits(code, "code")
    return len(digits) >= 3 and int(code) % 97 == 1


#: Check-digit systems by the name a template uses, with the number of check characters.
CHECK_SYSTEMS: dict[str, tuple[str, int]] = {
    "luhn": ("Luhn", 1),
    "mod11-2": ("ISO 7064 MOD 11-2", 1),
    "mod97-10": ("ISO 7064 MOD 97-10", 2),
}

_VALIDATORS = {"luhn": luhn_valid, "mod11-2": mod11_2_valid, "mod97-10": mod97_10_valid}


def is_valid(code: str, system: str) -> bool:
    """Whether ``code`` passes the check of ``system`` (a key of :data:`CHECK_SYSTEMS`)."""
    if system not in _VALIDATORS:
        raise ValueError(f"unknown check-digit system {system!r}; known: {', '.join(_VALIDATORS)}")
    return _VALIDATORS[system](code)
