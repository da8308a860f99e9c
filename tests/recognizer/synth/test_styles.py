"""Tests for the comb styles, colours and Larkhollow designs of the form generator.

Invented forms: geometry checks only (DEVELOPERS.md); the truth rectangles are
checked against the printed pixels they claim to describe.
"""

import itertools

import numpy as np
import pytest
from PIL import Image

from recognizer.synth import forms as fg
from recognizer.synth.colour import INK_RGB, PRINT_RGB

DESIGNS = sorted(fg.DESIGNS)


def _render(layout, dpi=150, seed=0, values=None, **kwargs):
    return fg.render_form(layout, {} if values is None else values, dpi=dpi,
                          rng=np.random.default_rng(seed), **kwargs)


@pytest.mark.parametrize("name", DESIGNS)
def test_every_design_renders_its_boxes_in_reading_order(name):
    layout = fg.DESIGNS[name]()
    values = fg.random_values(layout, rng=np.random.default_rng(3))
    form = _render(layout, dpi=100, seed=3, values=values)
    height, width = form.image.shape
    assert list(form.boxes) == [spec.name for spec in layout.fields]
    assert form.fnames() == fg.fnames(layout)
    assert list(form.truth()) == [f"f{i:02d}" for i in range(1, len(layout.fields) + 1)]
    for spec in layout.fields:
        rects = form.boxes[spec.name]
        assert len(rects) == len(form.cells[spec.name]) == spec.n_boxes
        assert form.styles[spec.name] == spec.comb
        assert form.colours[spec.name] == layout.colour_of(spec)
        for x0, y0, x1, y1 in rects:
            assert 0 <= x0 < x1 <= width and 0 <= y0 < y1 <= height
        lefts = [r[0] for r in rects]
        assert lefts == sorted(lefts)
    assert fg.DESIGN_STYLES[name] in set(form.styles.values())


@pytest.mark.parametrize("name", DESIGNS)
def test_rows_are_unambiguous(name):
    """Any finder grouping rows by half a box height (boxes.py's rule) gets the layout's order:
    fields of one row are level, fields of different rows at least a box height apart."""
    layout = fg.DESIGNS[name]()
    for a, b in itertools.combinations(layout.fields, 2):
        dy = abs((a.y_mm + a.height_mm / 2) - (b.y_mm + b.height_mm / 2))
        assert dy <= 0.25 * min(a.height_mm, b.height_mm) or dy >= max(a.height_mm, b.height_mm)


def test_designs_use_every_style():
    styles = {spec.comb for make in fg.DESIGNS.values() for spec in make().fields}
    assert styles == set(fg.COMB_STYLES)
    assert fg.weigh_ticket().colour == "red"
    assert fg.DESIGN_STYLES == {name: fg.DESIGN_STYLES[name] for name in fg.DESIGNS}


@pytest.mark.parametrize("name", ["orchard_card", "tally_sheet", "weigh_ticket", "bin_register"])
def test_box_walls_lie_just_outside_each_rectangle(name):
    layout = fg.DESIGNS[name]()
    form = _render(layout)
    rules, printed = form.rules, form.printed
    for spec in layout.fields:
        rects = form.boxes[spec.name]
        for x0, y0, x1, y1 in rects:
            c0, r0, c1, r1 = int(x0), int(y0), int(x1), int(y1)
            assert not rules[r0:r1, c0:c1].any()  # the inner rectangle is clean paper
            assert printed[r0:r1, c0:c1].min() == 255
            mid_r, mid_c = (r0 + r1) // 2, (c0 + c1) // 2
            for r, c in ((r0 - 1, mid_c), (r1, mid_c), (mid_r, c0 - 1), (mid_r, c1)):
                assert rules[r, c], (spec.name, r, c)  # just outside: a wall
        if spec.comb == "separate":  # paper between neighbouring boxes
            for (_, y0, a1, y1), (b0, _, _, _) in zip(rects, rects[1:]):
                gap = rules[int(y0):int(y1), int(a1) + 3:int(b0) - 3]
                assert gap.size and not gap.any()


def test_open_combs_have_ticks_and_a_baseline_and_no_top_line():
    layout = fg.crate_return_slip()
    form = _render(layout)
    rules = form.rules
    for spec in layout.fields:
        assert spec.comb == "open"
        tick_heights = []
        for i, (x0, y0, x1, y1) in enumerate(form.boxes[spec.name]):
            c0, r0, c1, r1 = int(x0), int(y0), int(x1), int(y1)
            assert not rules[r0:r1, c0:c1].any()
            mid_c = (c0 + c1) // 2
            assert rules[r1, mid_c] and rules[r1, c0] and rules[r1, c1 - 1]  # the baseline
            assert rules[r1 - 2, c0 - 1] and rules[r1 - 2, c1]  # ticks at both sides
            assert not rules[r0 - 3:r0 + 1, c0:c1].any()  # no top line
            assert not rules[r0 + 1, c0 - 1] and not rules[r0 + 1, c1]  # ticks stay short
            column = rules[r0:r1, c0 - 1]
            tick_heights.append(r1 - r0 - int(np.argmax(column)))
            if i == len(form.boxes[spec.name]) - 1:
                column = rules[r0:r1, c1]
                tick_heights.append(r1 - r0 - int(np.argmax(column)))
        inner = tick_heights[1:-1]
        if inner:  # end ticks are taller than the ticks between the digits
            assert min(tick_heights[0], tick_heights[-1]) > max(inner) + 2
            assert max(inner) == pytest.approx(spec.tick * (r1 - r0), abs=3)


def test_separators_stand_between_groups():
    layout = fg.crate_return_slip()
    form = _render(layout)
    ink = (form.printed < 128) & ~form.rules
    box_px = 6.0 / 25.4 * 150
    for left, right in (("return_day", "return_month"), ("return_month", "return_year"),
                        ("return_hour", "return_minute"), ("deposit", "deposit_cents")):
        _, y0, a1, y1 = form.boxes[left][-1]
        b0 = form.boxes[right][0][0]
        assert b0 - a1 == pytest.approx(box_px, abs=3)  # one box width between the groups
        gap = ink[int(y0):int(y1) + 2, int(a1) + 2:int(b0) - 2]
        assert gap.sum() > 3, (left, right)  # a printed '/', ':' or '.'
    assert fg.fnames(layout)["return_month"] == "f04"


def test_table_fields_sit_in_table_cells():
    layout = fg.bin_register()
    form = _render(layout)
    table_fields = [s for s in layout.fields if s.comb == "table"]
    assert len(table_fields) == 40
    for spec in table_fields:
        x0, y0, x1, y1 = form.boxes[spec.name][0]
        c = int(x0) + 2
        above = form.rules[:int(y0) - 1, c][::-1]  # walking up from the comb's top wall
        first_rule = int(np.argmax(above[3:])) + 3  # past the comb's own wall: the table's rule
        assert 3 < first_rule < 0.6 * (y1 - y0)
    with pytest.raises(ValueError, match="table cell"):
        fg.FormLayout("bad", (100.0, 100.0), (fg.FieldSpec("x", "", 2, 10, 10, style="table"),))


def test_field_spec_checks_its_style_and_colour():
    with pytest.raises(ValueError):
        fg.FieldSpec("a", "", 3, 0, 0, style="zigzag")
    with pytest.raises(ValueError):
        fg.FieldSpec("a", "", 3, 0, 0, gap_mm=1.0, style="closed")
    with pytest.raises(ValueError):
        fg.FieldSpec("a", "", 3, 0, 0, gap_mm=1.0, style="open")
    with pytest.raises(ValueError):
        fg.FieldSpec("a", "", 3, 0, 0, style="separate")
    with pytest.raises(ValueError):
        fg.FieldSpec("a", "", 3, 0, 0, colour="purple")
    with pytest.raises(ValueError):
        fg.recolour(fg.orchard_card(), "purple")
    assert fg.FieldSpec("a", "", 3, 0, 0).comb == "closed"
    assert fg.FieldSpec("a", "", 3, 0, 0, gap_mm=1.0).comb == "separate"


def _hue_ok(colour, rgb):
    r, g, b = (float(v) for v in rgb)
    return {
        "red": r > g + 60 and abs(g - b) < 20,
        "green": g > r + 40 and g > b + 30,
        "blue": b > r + 60 and b > g + 30,
        "grey": max(r, g, b) - min(r, g, b) < 8 and 160 < r < 210,
        "black": max(r, g, b) < 40,
    }[colour]


@pytest.mark.parametrize("colour,ink", [("red", "blue"), ("green", "black"), ("blue", "blue"),
                                        ("grey", "black"), ("black", "blue")])
def test_colour_layers_are_in_the_right_hue(colour, ink):
    layout = fg.recolour(fg.orchard_card(), colour)
    values = fg.random_values(layout, rng=np.random.default_rng(5))
    form = _render(layout, dpi=150, seed=5, values=values, ink=ink)
    assert form.rgb.shape == form.image.shape + (3,) and form.ink == ink
    assert set(form.colours.values()) == {colour}
    walls = form.rules & (form.handwriting == 255)  # box walls and rules with no pen on them
    assert _hue_ok(colour, np.median(form.rgb[walls], axis=0))
    assert np.abs(np.median(form.rgb[walls], axis=0) - PRINT_RGB[colour]).max() <= 3
    pen = (form.handwriting < 100) & (form.printed == 255)  # the darkest pen strokes
    assert pen.sum() > 200
    pen_rgb = np.median(form.rgb[pen], axis=0)
    if ink == "blue":
        assert pen_rgb[2] > pen_rgb[0] + 60 and pen_rgb[2] > pen_rgb[1] + 50
    else:
        assert pen_rgb.max() < 90 and np.ptp(pen_rgb) < 15
    assert np.all(form.handwriting_rgb.reshape(-1, 3).min(axis=0) >= np.array(INK_RGB[ink]) - 1)
    # the grey page is the colour page as Pillow (and so the scan reader) turns it grey
    assert np.array_equal(form.image, np.asarray(Image.fromarray(form.rgb).convert("L")))
    assert np.array_equal(form.printed, fg.to_grey(form.printed_rgb))


def test_dropout_print_is_lighter_than_any_pen():
    for colour in fg.DROPOUT_COLOURS:
        grey = fg.to_grey(np.array([[PRINT_RGB[colour]]], np.uint8))[0, 0]
        assert 140 <= grey <= 200
    for ink in fg.INKS:
        assert fg.to_grey(np.array([[INK_RGB[ink]]], np.uint8))[0, 0] < 70


def test_recolour_fields_only_keeps_the_rest_black():
    layout = fg.recolour(fg.orchard_card(), "red", furniture=False)
    assert layout.colour == "black" and all(spec.colour == "red" for spec in layout.fields)
    form = _render(layout)
    px = 150 / 25.4
    assert form.rgb[int(13.8 * px), int(16 * px)].max() < 30  # the emblem's disc is still black
    ticket = _render(fg.weigh_ticket())
    assert set(ticket.colours.values()) == {"red"}
    assert ticket.rgb[int(4 * px), int(6 * px)].max() < 30  # a black corner mark


def test_same_seed_writes_the_same_digits_in_any_print_colour():
    card = fg.orchard_card()
    values = fg.random_values(card, rng=np.random.default_rng(2))
    black = _render(card, seed=2, values=values)
    red = _render(fg.recolour(card, "red"), seed=2, values=values)
    forced = _render(card, seed=2, values=values, colour=True)
    assert black.rgb is None and red.rgb is not None
    # the same strokes; in colour the grey pen layer is the grey of the black pen's RGB
    assert np.array_equal(black.handwriting < 255, red.handwriting < 255)
    assert np.abs(black.handwriting.astype(int) - red.handwriting).max() <= 25
    assert black.boxes == red.boxes
    assert np.array_equal(black.rules, red.rules)
    # black print in colour: the same page but for the pen, whose black is a little lighter
    changed = forced.image != black.image
    assert not (changed & (black.handwriting == 255)).any()
    assert np.abs(forced.image.astype(int) - black.image).max() <= 25
    with pytest.raises(ValueError):
        _render(fg.recolour(card, "red"), colour=False)
    with pytest.raises(ValueError):
        _render(card, ink="green")


def test_black_forms_stay_as_they_were():
    """No colour anywhere: the grey page is the pixelwise minimum of its layers, as before colours."""
    card = fg.orchard_card()
    values = fg.random_values(card, rng=np.random.default_rng(1))
    form = fg.render_form(card, values, dpi=200, rng=np.random.default_rng(1))
    again = fg.render_form(card, values, dpi=200, rng=np.random.default_rng(1))
    assert form.rgb is None and form.printed_rgb is None
    assert np.array_equal(form.image, np.minimum(form.printed, form.handwriting))
    assert np.array_equal(form.image, again.image)
    assert set(form.styles.values()) == {"closed"}


@pytest.mark.parametrize("name", DESIGNS)
def test_renders_are_reproducible_from_the_seed(name):
    layout = fg.DESIGNS[name]()
    a = fg.random_values(layout, rng=np.random.default_rng(9))
    b = fg.random_values(layout, rng=np.random.default_rng(9))
    assert a == b
    first = _render(layout, dpi=75, seed=9, values=a, ink="blue")
    second = _render(layout, dpi=75, seed=9, values=b, ink="blue")
    assert np.array_equal(first.rgb, second.rgb) and first.boxes == second.boxes


@pytest.mark.parametrize("seed", range(20))
def test_values_of_each_kind(seed):
    slip = fg.crate_return_slip()
    values = fg.random_values(slip, rng=np.random.default_rng(seed))
    assert set(values) == {spec.name for spec in slip.fields}
    for spec in slip.fields:
        assert len(values[spec.name]) <= spec.n_boxes
        assert values[spec.name] == "" or values[spec.name].isdigit()
    assert 1 <= int(values["return_day"]) <= 31 and 8 <= int(values["return_month"]) <= 10
    assert values["return_year"] == "2026"
    assert 6 <= int(values["return_hour"]) <= 19 and 0 <= int(values["return_minute"]) <= 59
    assert len(values["return_day"]) == len(values["return_minute"]) == 2
    assert values["crates_returned"] == "" or not values["crates_returned"].startswith("0")
    tally = fg.random_values(fg.tally_sheet(), rng=np.random.default_rng(seed))
    assert len(tally["tally_date"]) == 8 and tally["tally_date"][4:] == "2026"


def test_grouped_fields_builds_runs_with_separators():
    fields, marks = fg.grouped_fields(("h", "m", "s"), (2, 2, 2), 10, 20, separator=":",
                                      label="Time", style="closed")
    assert [f.x_mm for f in fields] == [10, 28, 46]
    assert [f.label for f in fields] == ["Time", "", ""]
    assert [m.text for m in marks] == [":", ":"] and [m.x_mm for m in marks] == [25, 43]
    with pytest.raises(ValueError):
        fg.grouped_fields(("a",), (2, 2), 0, 0)
