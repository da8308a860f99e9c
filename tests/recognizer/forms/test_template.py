"""Template format, typed values and rules."""

import json

import numpy as np
import pytest

from recognizer.page.boxes import Box
from recognizer.forms.template import (
    FORMAT_VERSION, Reference, SumRule, Template, TemplateError, TemplateField, TemplateFileError,
    check_page, load_template, save_template, template_from_json, template_to_json, typed_value,
)
from tests.support import REPO


def boxes(n: int, y: int = 10) -> tuple[Box, ...]:
    return tuple(Box(10 + 30 * i, y, 35 + 30 * i, y + 30) for i in range(n))


def texts(value: str, n: int) -> list[str]:
    """Right-aligned per-box texts; ' ' stands for an empty box inside the value."""
    cells = [""] * (n - len(value)) + list(value)
    return ["" if c == " " else c for c in cells]


def reference() -> Reference:
    image = np.zeros((60, 80), np.uint8)
    image[10:12, 5:70] = 255
    return Reference(300.0, 400, 300, 100.0, image)


def make(*fields: TemplateField, sums=()) -> Template:
    return Template("card", 2, reference(), tuple(fields), tuple(sums))


# ---------------------------------------------------------------- typed values


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


def crates_template() -> Template:
    parts = [TemplateField(f"crates_{i}", boxes(3, 10 + 40 * i), type="integer") for i in (1, 2, 3)]
    total = TemplateField("total_crates", boxes(3, 170), type="integer", required=True)
    return make(*parts, total, sums=[SumRule("total_crates", ("crates_1", "crates_2", "crates_3"))])


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


# ---------------------------------------------------------------- consistency


@pytest.mark.parametrize("kwargs, message", [
    ({"name": "to_check"}, "CSV"),
    ({"name": "2nd"}, "letters"),
    ({"type": "money"}, "unknown type"),
    ({"type": "decimal"}, "decimals"),
    ({"type": "decimal", "decimals": 3}, "need more than 3 boxes"),
    ({"type": "date", "date_order": "DDMMYYYY"}, "needs 8 boxes"),
    ({"type": "date", "date_order": "DDDD"}, "not DD, MM and YYYY"),
    ({"type": "code"}, "check_digit"),
    ({"check_digit": "crc"}, "unknown check digit"),
    ({"lengths": (4,)}, "lengths"),
    ({"minimum": 3}, "min and max go with"),
    ({"type": "integer", "minimum": 9, "maximum": 2}, "above max"),
])
def test_inconsistent_fields_refused(kwargs, message):
    args = {"name": "f", "boxes": boxes(3), **kwargs}
    with pytest.raises(TemplateError, match=message):
        TemplateField(**args)


def test_inconsistent_templates_refused():
    a = TemplateField("a", boxes(3), type="integer")
    with pytest.raises(TemplateError, match="twice"):
        make(a, a)
    with pytest.raises(TemplateError, match="no field 'x'"):
        make(a, sums=[SumRule("a", ("x",))])
    with pytest.raises(TemplateError, match="not a number"):
        make(a, TemplateField("b", boxes(3, 60)), sums=[SumRule("a", ("b",))])
    with pytest.raises(TemplateError, match="outside the reference"):
        make(TemplateField("a", (Box(390, 10, 420, 40),)))


# ---------------------------------------------------------------- file


def sample() -> Template:
    return make(
        TemplateField("grower", boxes(5), required=True, lengths=(5,)),
        TemplateField("day", boxes(8, 50), type="date", date_order="DDMMYYYY", minimum="2026-08-10"),
        TemplateField("weight", boxes(5, 90), type="decimal", decimals=1, maximum=999.9),
        TemplateField("member", boxes(6, 130), type="code", check_digit="mod97-10"),
        *crates_template().fields,
        sums=crates_template().sums,
    )


def test_round_trip(tmp_path):
    t = sample()
    path = tmp_path / "card.json"
    save_template(t, path)
    back = load_template(path)
    assert back == t
    np.testing.assert_array_equal(back.reference.image, t.reference.image)
    data = json.loads(path.read_text(encoding="utf-8"))
    assert data["format_version"] == FORMAT_VERSION and data["version"] == 2
    assert data["fields"][1]["min"] == "2026-08-10"


def test_sample_orchard_template_loads():
    t = load_template(REPO / "sample_forms" / "orchard_card.json")
    assert [f.name for f in t.fields][:2] == ["grower_number", "picking_date"]
    assert t.field("net_weight").decimals == 1 and len(t.field("net_weight").boxes) == 5
    assert t.sums == (SumRule("total_crates", ("crates_1", "crates_2", "crates_3")),)


def broken_copies():
    good = template_to_json(sample())
    newer = dict(good, format_version=FORMAT_VERSION + 1)
    other = dict(good, format="something-else")
    typo = dict(good, fields=[dict(good["fields"][0], requried=True)] + good["fields"][1:])
    bad_box = dict(good, fields=[dict(good["fields"][0], boxes=[[1, 2, 3]])] + good["fields"][1:])
    bad_rule = dict(good, rules=[{"rule": "product", "total": "a", "parts": []}])
    bad_png = dict(good, reference=dict(good["reference"], image_png="aGVsbG8="))
    return [
        (json.dumps(newer), "newer than this program"),
        (json.dumps(other), "not an Inkcount template"),
        (json.dumps(typo), "unknown key"),
        (json.dumps(bad_box), "four whole numbers"),
        (json.dumps(bad_rule), "unknown rule"),
        (json.dumps(bad_png), "not a PNG"),
        (json.dumps(good)[:500], "damaged JSON"),
        ("[1, 2]", "JSON object"),
    ]


@pytest.mark.parametrize("text, message", broken_copies())
def test_bad_files_refused_naming_the_file(tmp_path, text, message):
    path = tmp_path / "bad.json"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(TemplateFileError, match=message) as info:
        load_template(path)
    assert str(path) in str(info.value)


def test_missing_file(tmp_path):
    with pytest.raises(TemplateFileError, match="cannot read"):
        load_template(tmp_path / "none.json")


def test_from_json_is_strict_about_kinds():
    data = template_to_json(sample())
    data["version"] = "2"
    with pytest.raises(TemplateError, match="version"):
        template_from_json(data)
