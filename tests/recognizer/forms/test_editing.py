"""Editing steps of form templates: rename, retype, delete, move, draw, split, join, sums."""

from __future__ import annotations


import numpy as np
import pytest

from recognizer.page.boxes import Box
from recognizer.forms.template import Reference, SumRule, Template, TemplateError, TemplateField
from recognizer.forms.editing import (
    add_field,
    delete_field,
    join_fields,
    move_field,
    parse_sum,
    rename_field,
    run_boxes,
    set_sums,
    split_field,
    sum_text,
    update_field,
)
from recognizer.forms.template_file import load_template
from tests.support import REPO

CARD = REPO / "sample_forms" / "orchard_card.json"


def _run(x0: int, y0: int, n: int, pitch: int = 71, size: int = 63) -> tuple[Box, ...]:
    return tuple(Box(x0 + i * pitch, y0, x0 + i * pitch + size, y0 + size) for i in range(n))


@pytest.fixture
def card() -> Template:
    ref = Reference(300.0, 1200, 800, 100.0, np.zeros((267, 400), np.uint8))
    fields = (
        TemplateField("kg", _run(100, 100, 4), type="integer"),
        TemplateField("tenths", _run(100 + 4 * 71 + 71, 100, 1), type="integer"),
        TemplateField("a", _run(100, 300, 2), type="integer"),
        TemplateField("b", _run(400, 300, 2), type="integer"),
        TemplateField("total", _run(100, 500, 3), type="integer", required=True),
    )
    return Template("card", 2, ref, fields, (SumRule("total", ("a", "b")),))


def test_rename_follows_in_sums_and_leaves_the_original(card):
    out = rename_field(card, "a", " amberlin ")
    assert [f.name for f in out.fields] == ["kg", "tenths", "amberlin", "b", "total"]
    assert out.sums == (SumRule("total", ("amberlin", "b")),)
    assert card.fields[2].name == "a"


@pytest.mark.parametrize("new, message", [("b", "used twice"), ("2nd", "letters"), ("page", "CSV")])
def test_rename_refuses_bad_names(card, new, message):
    with pytest.raises(TemplateError, match=message):
        rename_field(card, "a", new)


def test_set_type_clears_what_belongs_to_the_old_type(card):
    dated = update_field(card, "kg", type="decimal", decimals=1, minimum=0.5)
    assert (dated.field("kg").type, dated.field("kg").decimals, dated.field("kg").minimum) == ("decimal", 1, 0.5)
    back = update_field(dated, "kg", type="digits")
    assert (back.field("kg").decimals, back.field("kg").minimum) == (0, None)
    with pytest.raises(TemplateError, match="date order"):
        update_field(card, "kg", type="date", date_order="DDMMYYYY")
    with pytest.raises(TemplateError, match="not a number"):
        update_field(card, "a", type="digits")  # still part of the sum


def test_delete_drops_the_sums_it_was_in(card):
    out = delete_field(card, "b")
    assert "b" not in {f.name for f in out.fields} and out.sums == ()
    assert delete_field(card, "kg").sums == card.sums


def test_move_shifts_every_box_and_stays_on_the_page(card):
    out = move_field(card, "a", 7, -4)
    np.testing.assert_array_equal(
        [[b.x0 - 7, b.y0 + 4, b.x1 - 7, b.y1 + 4] for b in out.field("a").boxes],
        [[b.x0, b.y0, b.x1, b.y1] for b in card.field("a").boxes],
    )
    with pytest.raises(TemplateError, match="leave the page"):
        move_field(card, "a", 0, -301)


def test_run_boxes_fill_the_rectangle_with_walls():
    boxes = run_boxes(400, 180, 100, 100, 4, dpi=300)  # corners in any order
    assert len(boxes) == 4
    wall = 0.7 * 300 / 25.4
    assert boxes[0].x0 == round(100 + wall / 2) and boxes[-1].x1 == round(400 - wall / 2)
    pitches = np.diff([b.x0 for b in boxes])
    assert np.ptp(pitches) <= 1 and abs(pitches.mean() - 75) < 1
    assert {(b.y0, b.y1) for b in boxes} == {(round(100 + wall / 2), round(180 - wall / 2))}
    with pytest.raises(TemplateError, match="too small"):
        run_boxes(0, 0, 30, 80, 5, dpi=300)


def test_add_field_with_drawn_boxes(card):
    out = add_field(card, "row", run_boxes(700, 100, 913, 163, 3, dpi=300), type="integer", maximum=120)
    assert out.fields[-1].name == "row" and len(out.fields[-1].boxes) == 3
    with pytest.raises(TemplateError, match="outside"):
        add_field(card, "far", run_boxes(1100, 100, 1300, 160, 2, dpi=300))


def test_split_keeps_what_fits_and_names_the_right_part(card):
    out = split_field(card, "kg", 3)
    assert [(f.name, len(f.boxes)) for f in out.fields[:3]] == [("kg", 3), ("kg_2", 1), ("tenths", 1)]
    assert out.field("kg").type == "integer" and out.field("kg_2").type == "digits"
    assert out.field("kg").boxes + out.field("kg_2").boxes == card.field("kg").boxes
    named = split_field(card, "kg", 1, new_name="rest")
    assert named.field("rest").boxes == card.field("kg").boxes[1:]
    with pytest.raises(TemplateError, match="split after box 1 to 3"):
        split_field(card, "kg", 4)


def test_split_of_a_date_becomes_digits_and_sums_that_no_longer_fit_go():
    t = load_template(CARD)
    out = split_field(t, "picking_date", 2, new_name="month_year")
    assert out.field("picking_date").type == "digits" and out.field("picking_date").required
    split_part = split_field(t, "crates_1", 2)
    assert split_part.field("crates_1").type == "integer" and split_part.sums == t.sums
    assert split_field(t, "total_crates", 1).sums == t.sums  # the left part is still an integer


def test_join_neighbours_in_either_order(card):
    for first, second in (("kg", "tenths"), ("tenths", "kg")):
        out = join_fields(card, first, second)
        joined = out.fields[0]
        assert joined.name == "kg" and joined.type == "integer"  # the left run's name and type
        assert joined.boxes == card.field("kg").boxes + card.field("tenths").boxes
        assert len(out.fields) == len(card.fields) - 1


def test_join_refuses_fields_that_are_not_neighbours(card):
    with pytest.raises(TemplateError, match="side by side"):
        join_fields(card, "kg", "a")  # one above the other
    with pytest.raises(TemplateError, match="two different"):
        join_fields(card, "a", "a")


def test_split_then_join_gives_the_sample_weight_back():
    t = load_template(CARD)
    again = join_fields(split_field(t, "net_weight", 4, new_name="tenths"), "net_weight", "tenths")
    assert again.field("net_weight") == t.field("net_weight")


@pytest.mark.parametrize("text", ["total = a + b", " total=a+b "])
def test_sum_text_round_trip(card, text):
    rule = parse_sum(text)
    assert rule == SumRule("total", ("a", "b")) and parse_sum(sum_text(rule)) == rule


@pytest.mark.parametrize("text", ["total a b", "= a + b", "total = a + ", "total ="])
def test_bad_sums_refused(text):
    with pytest.raises(TemplateError, match="total = part"):
        parse_sum(text)


def test_set_sums_checks_against_the_fields(card):
    assert set_sums(card, [parse_sum("kg = a + b")]).sums == (SumRule("kg", ("a", "b")),)
    with pytest.raises(TemplateError, match="no field 'c'"):
        set_sums(card, [parse_sum("total = a + c")])
