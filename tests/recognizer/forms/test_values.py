"""Typed values and rules of template fields."""

import pytest

from recognizer.forms.template import TemplateField
from recognizer.forms.values import check_page, typed_value
from tests.recognizer.forms.small_templates import boxes, crates_template


def texts(value: str, n: int) -> list[str]:
    """Right-aligned per-box texts; ' ' stands for an empty box inside the value."""
    cells = [""] * (n - len(value)) + list(value)
    return ["" if c == " " else c for c in cells]


@pytest.mark.parametrize("spec, written, text, number", [
    (TemplateField("g", boxes(5)), "00412", "00412", None),
    (TemplateField("b", boxes(2), type="integer"), "07", "7", 7),
    (TemplateField("b", boxes(3), type="integer"), "42", "42", 42),
    (TemplateField("w", boxes(5), type="decimal", decimals=1), "1875", "187.5", 187.5),
    (TemplateField("w", boxes(5), type="decimal", decimals=2), "5", None, None),
    (TemplateField("w", boxes(4), type="decimal", decimals=2), "07", "0.07", 0.07),
    (TemplateField("d", boxes(8), type="date", date_order="DDMMYYYY"), "13092026", "2026-09-13", None),
    (TemplateField("d", boxes(8), type="date", date_order="YYYYMMDD"), "20260913", "2026-09-13", None),
    (TemplateField("d", boxes(8), type="date", date_order="MMDDYYYY"), "09132026", "2026-09-13", None),
    (TemplateField("d", boxes(6), type="date", date_order="DDMMYY"), "130926", "2026-09-13", None),
    (TemplateField("c", boxes(11), type="code", check_digit="luhn"), "79927398713", "79927398713", None),
])
def test_typed_values(spec, written, text, number):
    v = typed_value(spec, texts(written, len(spec.boxes)))
    if text is None:  # the decimals are not all written
        assert [p.split(":")[0] for p in v.problems] == ["decimals"]
        return
    assert v.text == text and v.problems == []
    if number is not None:
        assert v.number == pytest.approx(number)


def test_blank_and_unreadable():
    spec = TemplateField("n", boxes(3), type="integer", required=True, minimum=5)
    assert typed_value(spec, ["", "", ""]).problems == ["required: the field is blank"]
    assert typed_value(TemplateField("n", boxes(3)), ["", "", ""]).problems == []
    v = typed_value(spec, ["", "?", "1"])
    assert (v.text, v.number, v.problems) == ("?1", None, [])


def rule_names(v) -> list[str]:
    return [p.split(":")[0] for p in v.problems]


# Each rule: a value that breaks it and one that keeps it.
RULE_CASES = [
    ("required", TemplateField("a", boxes(3), required=True), "", "1"),
    ("length", TemplateField("a", boxes(5), lengths=(5,)), "412", "00412"),
    ("length", TemplateField("a", boxes(5), lengths=(2, 4)), "123", "1234"),
    ("min", TemplateField("a", boxes(2), type="integer", minimum=1, maximum=24), "00", "01"),
    ("max", TemplateField("a", boxes(2), type="integer", minimum=1, maximum=24), "25", "24"),
    ("min", TemplateField("a", boxes(4), type="decimal", decimals=1, minimum=0.5), "4", "5"),
    ("max", TemplateField("a", boxes(8), type="date", date_order="DDMMYYYY", maximum="2026-10-31"),
     "01112026", "31102026"),
    ("min", TemplateField("a", boxes(8), type="date", date_order="DDMMYYYY", minimum="2026-08-10"),
     "09082026", "10082026"),
    ("date", TemplateField("a", boxes(8), type="date", date_order="DDMMYYYY"), "31022026", "28022026"),
    ("date", TemplateField("a", boxes(8), type="date", date_order="DDMMYYYY"), "29022026", "29022028"),
    ("date", TemplateField("a", boxes(8), type="date", date_order="DDMMYYYY"), "1312026", "13012026"),
    ("date", TemplateField("a", boxes(8), type="date", date_order="YYYYMMDD"), "20261301", "20261231"),
    ("check digit", TemplateField("a", boxes(11), type="code", check_digit="luhn"),
     "79927398710", "79927398713"),
    ("check digit", TemplateField("a", boxes(16), type="code", check_digit="mod11-2"),
     "0000000218250096", "0000000218250097"),
    ("check digit", TemplateField("a", boxes(6), type="code", check_digit="mod97-10"), "123456", "123482"),
    ("check digit", TemplateField("a", boxes(5), check_digit="luhn"), "00415", "00414"),
    ("decimals", TemplateField("a", boxes(5), type="decimal", decimals=2), "123 ", "1230"),
]


@pytest.mark.parametrize("rule, spec, broken, kept", RULE_CASES)
def test_each_rule_flags_and_passes(rule, spec, broken, kept):
    n = len(spec.boxes)
    assert rule in rule_names(typed_value(spec, texts(broken, n)))
    assert typed_value(spec, texts(kept, n)).problems == []


@pytest.mark.parametrize("c1, c2, c3, total, ok", [
    ("35", "19", "38", "92", True),
    ("0", "", "1", "1", True),      # blank parts count as 0
    ("", "33", "", "33", True),
    ("35", "19", "38", "93", False),
    ("35", "19", "38", "29", False),  # two digits swapped
    ("", "", "7", "", False),          # total missing: required and sum
])
def test_crates_sum(c1, c2, c3, total, ok):
    t = crates_template()
    values = check_page(t, {"crates_1": texts(c1, 3), "crates_2": texts(c2, 3),
                            "crates_3": texts(c3, 3), "total_crates": texts(total, 3)})
    flagged = {name for name, v in values.items() if "sum" in rule_names(v)}
    assert flagged == (set() if ok else {"crates_1", "crates_2", "crates_3", "total_crates"})


def test_sum_skips_unreadable_parts():
    t = crates_template()
    values = check_page(t, {"crates_1": ["", "?", "5"], "crates_2": texts("", 3),
                            "crates_3": texts("", 3), "total_crates": texts("9", 3)})
    assert all("sum" not in rule_names(v) for v in values.values())
