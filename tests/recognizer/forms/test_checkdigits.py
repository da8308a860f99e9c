"""Check-digit systems against published test vectors."""

import pytest

from recognizer.forms import checkdigits as cd

# Luhn: "79927398713", the worked example of the Luhn algorithm in ISO/IEC 7812-1
# annex B as reproduced in the Wikipedia article "Luhn algorithm"; 4111111111111111
# is a widely published payment test card number (from memory).
LUHN_VALID = ["79927398713", "4111111111111111"]
# ISO 7064 MOD 11-2: ORCID identifiers use it; 0000-0002-1825-0097 and
# 0000-0002-1694-233X are the examples in ORCID's description of its identifier
# structure (the second from memory); "07940" is the example of python-stdnum's
# iso7064.mod_11_2 documentation (from memory).
MOD11_2_VALID = ["0000000218250097", "000000021694233X", "07940"]
# ISO 7064 MOD 97-10: the IBAN GB82 WEST 1234 5698 7654 32 (example of ISO 13616 /
# the Wikipedia article "International Bank Account Number"), moved and with its
# letters turned into numbers (A=10 ... Z=35) as ISO 13616 prescribes:
# WEST12345698765432GB82 -> 32 14 28 29 12345698765432 16 11 82.
IBAN_DIGITS = "3214282912345698765432161182"
# python-stdnum's iso7064.mod_97_10 documentation: check digits 90 for
# 99991234567890121414 (from memory).
MOD97_EXAMPLE = ("99991234567890121414", "90")


@pytest.mark.parametrize("code", LUHN_VALID)
def test_luhn_vectors(code):
    assert cd.luhn_valid(code)
    assert cd.luhn_check_digit(code[:-1]) == code[-1]


@pytest.mark.parametrize("code", MOD11_2_VALID)
def test_mod11_2_vectors(code):
    assert cd.mod11_2_valid(code)
    assert cd.mod11_2_check_char(code[:-1]) == code[-1]


def test_mod97_10_vectors():
    assert cd.mod97_10_valid(IBAN_DIGITS)
    assert cd.mod97_10_check_digits(IBAN_DIGITS[:-2]) == IBAN_DIGITS[-2:]
    payload, check = MOD97_EXAMPLE
    assert cd.mod97_10_check_digits(payload) == check
    assert cd.mod97_10_valid(payload + check)


@pytest.mark.parametrize("system, code", [("luhn", c) for c in LUHN_VALID]
                         + [("mod11-2", c) for c in MOD11_2_VALID] + [("mod97-10", IBAN_DIGITS)])
def test_every_single_digit_change_is_caught(system, code):
    # all three systems detect every single substitution error (their defining property)
    assert cd.is_valid(code, system)
    for i, c in enumerate(code):
        if not c.isdigit():
            continue
        for d in "0123456789":
            if d != c:
                assert not cd.is_valid(code[:i] + d + code[i + 1:], system), (code, i, d)


@pytest.mark.parametrize("system, code", [("luhn", "79927398713"), ("mod11-2", "0000000218250097"),
                                          ("mod97-10", IBAN_DIGITS)])
def test_adjacent_swaps_are_caught(system, code):
    # MOD 11-2 and MOD 97-10 catch every transposition of neighbours; Luhn all but 09/90
    for i in range(len(code) - 1):
        a, b = code[i], code[i + 1]
        if a == b or {a, b} == {"0", "9"} and system == "luhn":
            continue
        swapped = code[:i] + b + a + code[i + 2:]
        assert not cd.is_valid(swapped, system), (code, i)


@pytest.mark.parametrize("bad", ["", "12a4", "１２３"])
def test_refuses_non_digits(bad):
    with pytest.raises(ValueError):
        cd.luhn_check_digit(bad)
    with pytest.raises(ValueError):
        cd.mod97_10_valid(bad)


def test_unknown_system():
    with pytest.raises(ValueError, match="unknown check-digit system"):
        cd.is_valid("123", "mod10")
