"""Tests for the generator's captures: colour scans, bitonal G4 TIFF, JPEG, negative, turned, cut off."""

import numpy as np
import pypdfium2 as pdfium
import pytest
from numpy.testing import assert_allclose
from PIL import Image

from recognizer.synth import forms as fg


def _ticket(dpi=200, seed=4, ink="blue", blank=False):
    layout = fg.weigh_ticket()
    values = {} if blank else fg.random_values(layout, rng=np.random.default_rng(seed))
    return fg.render_form(layout, values, dpi=dpi, rng=np.random.default_rng(seed), ink=ink)


def _card(dpi=200, seed=2, colour=None, ink="black"):
    layout = fg.orchard_card()
    if colour:
        layout = fg.recolour(layout, colour, furniture=False)
    values = fg.random_values(layout, rng=np.random.default_rng(seed))
    return fg.render_form(layout, values, dpi=dpi, rng=np.random.default_rng(seed), ink=ink)


def test_scan_distort_keeps_colour_and_moves_boxes_as_in_grey():
    form = _ticket(dpi=100)
    kw = dict(skew_deg=1.5, shift_mm=(2.0, -1.0), scale=1.01, blur=0.5)
    out = fg.scan_distort(form, rng=np.random.default_rng(0), **kw)
    assert out.rgb is not None and out.rgb.shape == form.rgb.shape
    assert np.array_equal(out.image, fg.to_grey(out.rgb))
    assert out.styles == form.styles and out.colours == form.colours and out.ink == "blue"
    assert (out.rgb[0, 0] >= 250).all() and (out.rgb[-1, -1] >= 250).all()  # paper, not red
    grey = fg.scan_distort(fg.render_form(fg.orchard_card(), {}, dpi=100,
                                          rng=np.random.default_rng(0)),
                           rng=np.random.default_rng(0), **kw)
    assert grey.rgb is None
    moved = fg.scan_distort(form, rng=np.random.default_rng(0), skew_deg=1.5,
                            shift_mm=(2.0, -1.0), scale=1.01)
    assert moved.boxes == out.boxes
    noisy = fg.scan_distort(form, rng=np.random.default_rng(0), noise=1.0, lighting=0.3)
    assert noisy.rgb.shape == form.rgb.shape and noisy.rgb.std() > 0


def test_faint_lines_on_a_colour_form_fade_the_colour():
    form = _ticket(dpi=100, blank=True)
    faint = fg.scan_distort(form, rng=np.random.default_rng(0), faint_lines=0.5)
    walls = form.rules & (form.printed_rgb[..., 1] < 140)
    before = np.median(form.rgb[walls], axis=0)
    after = np.median(faint.rgb[walls], axis=0)
    assert_allclose(after, 255 - (255 - before) * 0.5, atol=3)


def test_bitonal_scan_is_one_bit_and_saves_as_group4(tmp_path):
    form = _ticket(dpi=240)
    scan = fg.bitonal_scan(form, rng=np.random.default_rng(1))
    assert scan.dpi == 200 and set(np.unique(scan.image)) <= {0, 255}
    assert scan.image.shape == (round(form.image.shape[0] * 5 / 6), round(form.image.shape[1] * 5 / 6))
    for (a, b) in zip(form.boxes["gross_kg"], scan.boxes["gross_kg"]):
        assert_allclose(b, np.array(a) * 5 / 6, atol=0.5)
    path = tmp_path / "ticket.tif"
    fg.save_scan(scan.image, path, dpi=200, bitonal=True)
    with Image.open(path) as image:
        assert image.mode == "1" and image.info["compression"] == "group4"
        assert_allclose([float(v) for v in image.info["dpi"]], (200, 200), atol=0.05)
        assert np.array_equal(np.asarray(image), scan.image > 127)
    again = fg.bitonal_scan(form, rng=np.random.default_rng(1))
    assert np.array_equal(again.image, scan.image)


@pytest.mark.parametrize("colour", fg.DROPOUT_COLOURS)
def test_bitonal_scan_drops_dropout_print_and_keeps_black(colour):
    form = _card(colour=colour, ink="blue")
    scan = fg.bitonal_scan(form, rng=np.random.default_rng(0))
    dropout_walls = form.rules & (form.printed > 100) & (form.handwriting == 255)
    black_rules = form.rules & (form.printed < 30)
    pen = (form.handwriting < 110) & (form.printed == 255)
    assert dropout_walls.sum() > 1000 and black_rules.sum() > 1000
    assert (scan.image[dropout_walls] == 0).mean() < 0.02  # the boxes vanish
    assert (scan.image[black_rules] == 0).mean() > 0.95    # black print stays
    assert (scan.image[pen] == 0).mean() > 0.9              # and so does the pen
    if colour == "red":  # a scanner set darker breaks red walls up into specks
        dark = fg.bitonal_scan(form, rng=np.random.default_rng(0), threshold=170)
        assert 0.05 < (dark.image[dropout_walls] == 0).mean() < 0.8


def test_bitonal_scan_through_one_colour_drops_that_colour_entirely():
    form = _card(colour="red", ink="blue")
    scan = fg.bitonal_scan(form, rng=np.random.default_rng(0), threshold=160, channel="red")
    walls = form.rules & (form.printed > 100) & (form.handwriting == 255)
    pen = (form.handwriting < 110) & (form.printed == 255)
    assert (scan.image[walls] == 0).mean() == 0
    assert (scan.image[pen] == 0).mean() > 0.9
    with pytest.raises(ValueError):
        fg.bitonal_scan(fg.render_form(fg.orchard_card(), {}, dpi=100,
                                       rng=np.random.default_rng(0)),
                        rng=np.random.default_rng(0), channel="red")


@pytest.mark.parametrize("suffix", [".png", ".jpg", ".tif", ".bmp"])
def test_save_scan_writes_colour(tmp_path, suffix):
    form = _ticket(dpi=100)
    path = tmp_path / f"ticket{suffix}"
    fg.save_scan(form.rgb, path, dpi=100, quality=85)
    with Image.open(path) as image:
        assert image.mode == "RGB" and image.size == form.image.shape[::-1]
        back = np.asarray(image)
    tolerance = 4.0 if suffix == ".jpg" else 0.0
    assert np.abs(back.astype(float) - form.rgb).mean() <= tolerance
    with Image.open(path) as image:  # a reader turns it grey as the generator does
        grey = np.asarray(image.convert("L"))
    assert np.abs(grey.astype(float) - form.image).mean() <= tolerance


def test_save_scan_colour_pdf_and_one_bit_png(tmp_path):
    form = _ticket(dpi=100)
    fg.save_scan([form.rgb, form.image], tmp_path / "two.pdf", dpi=100)
    pdf = pdfium.PdfDocument(tmp_path / "two.pdf")
    try:
        assert len(pdf) == 2
        back = np.asarray(pdf[0].render(scale=100 / 72).to_pil().convert("RGB"))
        h, w = min(back.shape[0], form.rgb.shape[0]), min(back.shape[1], form.rgb.shape[1])
        assert np.abs(back[:h, :w].astype(float) - form.rgb[:h, :w]).mean() < 6
    finally:
        pdf.close()
    fg.save_scan(form.image, tmp_path / "bits.png", dpi=100, bitonal=True)
    with Image.open(tmp_path / "bits.png") as image:
        assert image.mode == "1"
    fg.save_scan(form.image > 127, tmp_path / "bits.tif", dpi=100)
    with Image.open(tmp_path / "bits.tif") as image:
        assert image.mode == "1" and image.info["compression"] == "group4"
    fg.save_scan([form.image, form.image], tmp_path / "fax.tif", dpi=100, bitonal=True)
    with Image.open(tmp_path / "fax.tif") as image:
        assert image.n_frames == 2 and image.mode == "1"
    with pytest.raises(ValueError):
        fg.save_scan([form.image > 127, form.image], tmp_path / "mixed.tif", dpi=100)
    with pytest.raises(ValueError):
        fg.save_scan(form.image, tmp_path / "bits.jpg", dpi=100, bitonal=True)
    with pytest.raises(ValueError):
        fg.save_scan(form.rgb, tmp_path / "bits.tif", dpi=100, bitonal=True)


@pytest.mark.parametrize("quality", [30, 90])
def test_as_jpeg_is_what_the_reader_sees(tmp_path, quality):
    form = _ticket(dpi=100)
    jpeg = fg.as_jpeg(form, quality=quality)
    assert jpeg.rgb.shape == form.rgb.shape and jpeg.boxes == form.boxes
    error = np.abs(jpeg.rgb.astype(float) - form.rgb).mean()
    assert 0 < error < (8 if quality == 30 else 3)
    fg.save_scan(form.rgb, tmp_path / "t.jpg", dpi=100, quality=quality)
    with Image.open(tmp_path / "t.jpg") as image:
        assert np.array_equal(np.asarray(image.convert("L")), jpeg.image)


def test_inverted_page_is_white_on_black():
    form = _ticket(dpi=100)
    neg = fg.inverted(form)
    assert np.array_equal(neg.image, 255 - form.image) and np.array_equal(neg.rgb, 255 - form.rgb)
    assert neg.boxes == form.boxes and neg.values == form.values


@pytest.mark.parametrize("quarter_turns", [1, 2, 3])
def test_turned_pages_carry_their_boxes(quarter_turns):
    form = fg.render_form(fg.tally_sheet(), fg.random_values(fg.tally_sheet(),
                                                             rng=np.random.default_rng(1)),
                          dpi=100, rng=np.random.default_rng(1))
    out = fg.turned(form, quarter_turns)
    assert out.image.shape == (form.image.shape if quarter_turns == 2 else form.image.shape[::-1])
    assert list(out.boxes) == list(form.boxes)
    for name in ("tally_date", "crates_4", "total_crates"):
        for before, after in zip(form.boxes[name], out.boxes[name]):
            b = [int(round(v)) for v in before]
            a = [int(round(v)) for v in after]
            cell = form.image[b[1]:b[3], b[0]:b[2]]
            assert np.array_equal(np.rot90(cell, quarter_turns), out.image[a[1]:a[3], a[0]:a[2]])
    back = fg.turned(out, 4 - quarter_turns)
    for name, rects in form.boxes.items():
        assert_allclose(back.boxes[name], rects)
    upside = fg.upside_down(form)
    assert upside.boxes["tally_date"][0][0] > upside.boxes["tally_date"][-1][0]  # first digit right


def test_cut_off_page_keeps_the_truth_of_what_is_left():
    form = fg.render_form(fg.orchard_card(), {}, dpi=100, rng=np.random.default_rng(0))
    height, width = form.image.shape
    right = fg.cut_off(form, side="right", fraction=0.5)
    assert right.image.shape == (height, width - round(0.5 * width))
    inside = fg.fields_inside(right)
    assert "grower_number" in inside and "picking_date" not in inside
    top = fg.cut_off(form, side="top", fraction=0.25)
    cut = round(0.25 * height)
    assert np.array_equal(top.image, form.image[cut:])
    for name in fg.fields_inside(top):
        for a, b in zip(form.boxes[name], top.boxes[name]):
            assert_allclose(b, (a[0], a[1] - cut, a[2], a[3] - cut))
    assert "grower_number" not in fg.fields_inside(top)
    assert fg.fields_inside(form) == list(form.boxes)
    with pytest.raises(ValueError):
        fg.cut_off(form, side="middle")
