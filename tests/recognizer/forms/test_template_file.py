"""The template file format: round trip, the sample template, and files refused with a reason."""

import json

import numpy as np
import pytest

from recognizer.forms.template import SumRule, Template, TemplateError, TemplateField
from recognizer.forms.template_file import (
    FORMAT_VERSION,
    TemplateFileError,
    load_template,
    save_template,
    template_from_json,
    template_to_json,
)
from tests.recognizer.forms.small_templates import boxes, crates_template, make
from tests.support import REPO


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
