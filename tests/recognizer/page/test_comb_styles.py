"""Box finding for every comb style without a template: closed, separate, open combs, combs
in table cells, dropout colours; against the generator's truth (invented forms: geometry only)."""

from __future__ import annotations

import numpy as np
import pytest

from recognizer.digits.model import load_model
from recognizer.page.boxes import BoxFinding, find_fields
from recognizer.page.dropout import split_dropout
from recognizer.reading.page import BOXES_NOT_VISIBLE, PageReader
from recognizer.scans.files import iter_pages
from recognizer.synth import forms as fg


def _form(design: str, *, dpi: int, seed: int, colour: bool | None = None) -> fg.RenderedForm:
    layout = fg.DESIGNS[design]()
    rng = np.random.default_rng(seed)
    return fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=dpi, rng=rng, colour=colour)


def _scan(form: fg.RenderedForm, *, seed: int, skew: float = 0.0) -> fg.RenderedForm:
    return fg.scan_distort(form, rng=np.random.default_rng(seed), skew_deg=skew, noise=0.3, blur=0.5)


def _assert_truth(finding: BoxFinding, scan: fg.RenderedForm, *, size: float = 0.2) -> None:
    """Every truth field found, in reading order, with its boxes on the truth rectangles
    (centres within 20 % of a box, sides within ``size`` of the truth); nothing else."""
    assert finding, finding.problem
    truth = scan.truth()
    assert [f.name for f in finding.fields] == list(truth)
    for f in finding.fields:
        name, rects = truth[f.name]
        assert len(f.boxes) == len(rects), name
        xs, ys = finding.to_page(np.array([b.centre[0] for b in f.boxes]),
                                 np.array([b.centre[1] for b in f.boxes]))
        t = np.array(rects)
        tw, th = t[:, 2] - t[:, 0], t[:, 3] - t[:, 1]
        assert np.all(np.abs(xs - (t[:, 0] + t[:, 2]) / 2) < 0.2 * tw), name
        assert np.all(np.abs(ys - (t[:, 1] + t[:, 3]) / 2) < 0.2 * th), name
        assert np.all(np.abs(np.array([b.width for b in f.boxes]) - tw) <= size * tw + 1), name
        assert np.all(np.abs(np.array([b.height for b in f.boxes]) - th) <= size * th + 1), name


# ---------------------------------------------------------------- every style, the same rules

@pytest.mark.parametrize("design", ["orchard_card", "tally_sheet", "crate_return_slip", "bin_register"])
@pytest.mark.parametrize("dpi, seed, skew", [(150, 1, 1.5), (200, 2, -2.0)])
def test_every_comb_style_is_found_in_reading_order(design, dpi, seed, skew):
    scan = _scan(_form(design, dpi=dpi, seed=seed), seed=seed, skew=skew)
    finding = find_fields(scan.image, dpi=dpi)
    _assert_truth(finding, scan)


@pytest.mark.parametrize("design", ["tally_sheet", "crate_return_slip", "bin_register"])
def test_new_styles_get_no_more_doubts_than_closed_boxes(design):
    """Separate boxes, open combs and combs in table cells, cleanly scanned: no field doubted,
    no page warning, as for the closed boxes of the orchard card."""
    for seed in (3, 4):
        form = _form(design, dpi=200, seed=seed)
        scan = fg.scan_distort(form, rng=np.random.default_rng(seed), skew_deg=1.0, noise=0.3)
        finding = find_fields(scan.image, dpi=200)
        assert finding and not finding.warnings
        assert [f.name for f in finding.fields if f.doubts] == []


def test_open_comb_boxes_are_the_cells_between_ticks_up_to_a_closed_box_height():
    scan = _scan(_form("crate_return_slip", dpi=200, seed=5), seed=5)
    finding = find_fields(scan.image, dpi=200)
    _assert_truth(finding, scan, size=0.1)
    # a date DD/MM/YYYY and a time HH:MM: each group between separators is a field of its own
    sizes = {scan.truth()[f.name][0]: len(f.boxes) for f in finding.fields}
    assert [sizes[n] for n in ("return_day", "return_month", "return_year", "return_hour",
                               "return_minute", "deposit", "deposit_cents")] == [2, 2, 4, 2, 2, 3, 2]


def _erase_tick(form: fg.RenderedForm, field: str, index: int) -> None:
    """Take the tick at the left of box ``index`` (``n`` for the right end) off the print."""
    rects = form.boxes[field]
    x = rects[index][0] if index < len(rects) else rects[-1][2]
    y1 = int(round(rects[0][3]))
    h = rects[0][3] - rects[0][1]
    xa = int(round(x)) - 4 if index < len(rects) else int(round(x)) - 1
    form.printed[int(y1 - 0.7 * h):y1, xa:xa + 6] = 255
    form.image = np.minimum(form.printed, form.handwriting)


def test_an_open_comb_with_a_lost_end_tick_keeps_its_box_and_says_so():
    form = _form("crate_return_slip", dpi=200, seed=6)
    _erase_tick(form, "slip_number", 6)  # the tall end tick at the right
    _erase_tick(form, "bin_tag", 3)      # an inner tick: placed at the comb's pitch
    scan = _scan(form, seed=6)
    finding = find_fields(scan.image, dpi=200)
    _assert_truth(finding, scan)
    doubted = {scan.truth()[f.name][0] for f in finding.fields if f.doubts}
    assert doubted == {"slip_number"}


def test_text_rules_and_checkboxes_are_not_open_combs():
    """The slip's furniture and labels without its combs (title, emblem, separators, remarks
    frame, checkboxes, signature lines): nothing is taken for a field."""
    layout = fg.crate_return_slip()
    labels = tuple(fg.Text(s.label, s.x_mm, s.y_mm - 1.3, 2.2) for s in layout.fields if s.label)
    bare = fg.FormLayout(layout.name, layout.page_mm, (), layout.title, layout.furniture + labels)
    form = fg.render_form(bare, {}, dpi=200, rng=np.random.default_rng(7))
    finding = find_fields(_scan(form, seed=7).image, dpi=200)
    assert not finding and finding.fields == []


# ---------------------------------------------------------------- dropout red, colour and G4

@pytest.fixture(scope="module")
def model():
    return load_model()


def test_a_red_weigh_ticket_scanned_in_colour_is_read_through_the_dropout_path(tmp_path, model):
    form = _form("weigh_ticket", dpi=200, seed=8, colour=True)
    scan = _scan(form, seed=8, skew=1.0)
    assert scan.rgb is not None
    fg.save_scan(scan.rgb, tmp_path / "ticket.png", dpi=200)
    page = next(iter_pages([tmp_path / "ticket.png"]))
    layers = split_dropout(page.colour)
    assert layers is not None and layers.colour == "red"
    read = PageReader(model).read(page)
    assert read and not read.warnings  # boxes from the print: no "faint lines"
    truth = scan.truth()
    assert [(f.name, len(f.boxes)) for f in read.fields] == [(k, len(v[1])) for k, v in truth.items()]


def test_a_g4_bitonal_scan_of_the_red_weigh_ticket_says_the_boxes_are_not_visible(tmp_path, model):
    form = _form("weigh_ticket", dpi=300, seed=9)
    fax = fg.bitonal_scan(_scan(form, seed=9), rng=np.random.default_rng(9), dpi=200)
    fg.save_scan(fax.image, tmp_path / "ticket.tif", dpi=200, bitonal=True)
    read = PageReader(model).read(next(iter_pages([tmp_path / "ticket.tif"])))
    assert read.problem == BOXES_NOT_VISIBLE


def test_a_table_row_is_not_taken_for_a_field_on_a_tilted_photo(tmp_path):
    """On a strongly tilted landscape photo of the bin register (a seed of the forms bench),
    each row of the table -- one box-sized cell ("Line") among wide ones -- was fitted as a
    16-box field; the header row survived as a field, and its 16 large "boxes" made the
    register's two-box Block fields look odd-sized, so all nine were dropped. A field must
    have half of its boxes seen in regions of a box or two."""
    layout = fg.DESIGNS["bin_register"]()
    rng = np.random.default_rng(5005)
    form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=300, rng=rng)
    photo = fg.phone_photo(form, rng=np.random.default_rng(15_005))
    path = tmp_path / "register.jpg"
    photo.save(path)
    page = next(iter_pages([path]))
    finding = find_fields(page.image, dpi=page.dpi)
    longest = max(len(rects) for _, rects in form.truth().values())
    assert max(len(f.boxes) for f in finding.fields) <= longest
    pairs = sum(len(rects) == 2 for _, rects in form.truth().values())
    assert sum(len(f.boxes) == 2 for f in finding.fields) >= pairs - 1  # a pen stroke may hide one wall
