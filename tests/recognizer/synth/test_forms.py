"""Tests for the demo form generator: layouts, rendering, scan distortions, saving."""

import datetime as dt

import cv2
import numpy as np
import pypdfium2 as pdfium
import pytest
from numpy.testing import assert_allclose
from PIL import Image

from recognizer.synth import forms as fg
from recognizer.synth.handwriting import Writer

CARD = fg.orchard_card()


def _blank(layout=CARD, dpi=200):
    return fg.render_form(layout, {}, dpi=dpi, rng=np.random.default_rng(0))


def _centre(box):
    x0, y0, x1, y1 = box
    return np.array([(x0 + x1) / 2, (y0 + y1) / 2])


@pytest.mark.parametrize("dpi", [150, 300, 600])
def test_image_size_follows_page_and_dpi(dpi):
    form = fg.render_form(CARD, fg.random_values(CARD, rng=np.random.default_rng(dpi)), dpi=dpi,
                          rng=np.random.default_rng(dpi))
    width_mm, height_mm = CARD.page_mm
    assert form.image.shape == (round(height_mm / 25.4 * dpi), round(width_mm / 25.4 * dpi))
    assert form.image.dtype == np.uint8 and form.dpi == dpi
    spec = CARD.field("picking_date")
    x0, y0, x1, y1 = form.boxes["picking_date"][0]
    line = 0.3 / 25.4 * dpi
    assert x1 - x0 == pytest.approx(spec.box_mm / 25.4 * dpi - line, abs=1.5)
    assert y1 - y0 == pytest.approx(spec.height_mm / 25.4 * dpi - line, abs=1.5)


@pytest.mark.parametrize("layout", [fg.orchard_card(), fg.bench_page()], ids=lambda l: l.name)
def test_boxes_counts_and_bounds(layout):
    form = fg.render_form(layout, fg.random_values(layout, rng=np.random.default_rng(1)),
                          dpi=150, rng=np.random.default_rng(1))
    height, width = form.image.shape
    assert list(form.boxes) == [f.name for f in layout.fields]
    for spec in layout.fields:
        boxes = form.boxes[spec.name]
        assert len(boxes) == len(form.cells[spec.name]) == spec.n_boxes
        for x0, y0, x1, y1 in boxes:
            assert 0 <= x0 < x1 <= width and 0 <= y0 < y1 <= height
        lefts = [b[0] for b in boxes]
        assert lefts == sorted(lefts)


def test_bench_page_has_about_60_boxes():
    assert 55 <= sum(f.n_boxes for f in fg.bench_page().fields) <= 70


def test_box_walls_are_drawn_where_the_boxes_say():
    form = _blank()
    for rects in form.boxes.values():
        for x0, y0, x1, y1 in rects:
            c0, r0, c1, r1 = int(x0), int(y0), int(x1), int(y1)
            inner = form.image[r0:r1, c0:c1]
            assert inner.min() == 255  # the inner rectangle is clean paper
            mid_r, mid_c = (r0 + r1) // 2, (c0 + c1) // 2
            for r, c in ((r0 - 1, mid_c), (r1, mid_c), (mid_r, c0 - 1), (mid_r, c1)):
                assert form.image[r, c] == 0  # just outside: a wall


def test_cells_are_right_aligned_and_ink_lands_in_written_boxes():
    values = {"grower_number": "412", "row_number": "7", "crates_1": ""}
    form = fg.render_form(CARD, values, dpi=200, writer=Writer(), rng=np.random.default_rng(3))
    assert form.cells["grower_number"] == ["", "", "4", "1", "2"]
    assert form.cells["row_number"] == ["", "", "7"]
    assert form.cells["crates_1"] == ["", "", ""]
    assert form.values["picking_date"] == ""
    for name, rects in form.boxes.items():
        for (x0, y0, x1, y1), char in zip(rects, form.cells[name]):
            inner = form.handwriting[int(y0) + 2:int(y1) - 2, int(x0) + 2:int(x1) - 2]
            assert (inner < 128).any() == bool(char), (name, char)


def test_digit_source_is_used_and_scaled_to_the_box():
    calls = []

    def square(digit, rng):
        calls.append(digit)
        return np.full((10, 10), 255, np.uint8)

    form = fg.render_form(CARD, {"net_weight_kg": "389"}, dpi=300, digit_source=square,
                          rng=np.random.default_rng(0))
    assert calls == [3, 8, 9]
    box_h = form.boxes["net_weight_kg"][1][3] - form.boxes["net_weight_kg"][1][1]
    ink = form.handwriting < 128
    rows = np.nonzero(ink.any(axis=1))[0]
    assert 0.55 * box_h <= np.ptp(rows) + 1 <= 1.1 * box_h


def test_stray_marks_leave_cells_empty():
    form = fg.render_form(CARD, {}, dpi=200, rng=np.random.default_rng(0), stray_marks=1.0)
    assert all(c == "" for cells in form.cells.values() for c in cells)
    marked = 0
    for rects in form.boxes.values():
        for x0, y0, x1, y1 in rects:
            inner = form.handwriting[int(y0):int(y1), int(x0):int(x1)]
            assert (inner < 128).mean() < 0.03
            marked += (inner < 235).any()
    assert marked > 0.8 * sum(f.n_boxes for f in CARD.fields)


def test_rejects_values_that_do_not_fit():
    with pytest.raises(ValueError):
        fg.render_form(CARD, {"block_number": "123"}, rng=np.random.default_rng(0))
    with pytest.raises(ValueError):
        fg.render_form(CARD, {"block_number": "1a"}, rng=np.random.default_rng(0))
    with pytest.raises(ValueError):
        fg.render_form(CARD, {"grower_nmuber": "00412"}, rng=np.random.default_rng(0))


@pytest.mark.parametrize("seed", range(40))
def test_orchard_values_are_consistent(seed):
    values = fg.random_values(CARD, rng=np.random.default_rng(seed))
    assert set(values) == {f.name for f in CARD.fields}
    for spec in CARD.fields:
        assert len(values[spec.name]) <= spec.n_boxes
        assert values[spec.name] == "" or values[spec.name].isdigit()
    assert len(values["grower_number"]) == 5
    day = dt.datetime.strptime(values["picking_date"], "%d%m%Y").date()
    assert dt.date(2026, 8, 1) <= day <= dt.date(2026, 10, 31)
    crates = [int(values[f"crates_{i}"] or 0) for i in (1, 2, 3)]
    assert int(values["total_crates"]) == sum(crates) > 0
    kg = int(values["net_weight_kg"]) + int(values["net_weight_tenths"]) / 10
    assert 16.5 <= kg / sum(crates) <= 19.5 + 0.1 / sum(crates)


def test_fields_follow_reading_order_and_fnames():
    names = fg.fnames(CARD)
    assert list(names.values()) == [f"f{i:02d}" for i in range(1, len(CARD.fields) + 1)]
    assert names["grower_number"] == "f01" and names["picking_date"] == "f02"
    for a, b in zip(CARD.fields, CARD.fields[1:]):
        same_row = abs((a.y_mm + a.height_mm / 2) - (b.y_mm + b.height_mm / 2)) <= a.height_mm / 2
        assert (same_row and a.x_mm < b.x_mm) or (not same_row and a.y_mm < b.y_mm)
    swapped = (CARD.fields[1], CARD.fields[0]) + CARD.fields[2:]
    with pytest.raises(ValueError):
        fg.FormLayout("bad", CARD.page_mm, swapped)


def _paper_centroid(image, point):
    """Centroid (continuous px) of the connected paper region containing ``point``."""
    paper = (image > 128).astype(np.uint8)
    _, labels = cv2.connectedComponents(paper, connectivity=4)
    label = labels[int(point[1]), int(point[0])]
    ys, xs = np.nonzero(labels == label)
    return np.array([xs.mean() + 0.5, ys.mean() + 0.5])


@pytest.mark.parametrize("skew_deg", [-2.5, 1.0, 3.0])
def test_rotation_moves_boxes_where_the_rotation_says(skew_deg):
    form = _blank()
    height, width = form.image.shape
    shift_mm = (2.0, -1.5)
    out = fg.scan_distort(form, rng=np.random.default_rng(0), skew_deg=skew_deg,
                          shift_mm=shift_mm)
    theta = np.radians(skew_deg)  # counter-clockwise as seen on the image (y points down)
    rotation = np.array([[np.cos(theta), np.sin(theta)], [-np.sin(theta), np.cos(theta)]])
    page_centre = np.array([width / 2, height / 2])
    shift_px = np.array(shift_mm) / 25.4 * form.dpi
    for name in ("grower_number", "net_weight_tenths", "crates_3"):
        for before, after in zip(form.boxes[name], out.boxes[name]):
            expected = page_centre + rotation @ (_centre(before) - page_centre) + shift_px
            assert_allclose(_centre(after), expected, atol=1.0)
            assert_allclose(_paper_centroid(out.image, expected), expected, atol=1.5)


def test_scale_grows_boxes_about_the_centre():
    form = _blank()
    out = fg.scan_distort(form, rng=np.random.default_rng(0), scale=1.03)
    before, after = form.boxes["picking_date"][3], out.boxes["picking_date"][3]
    assert (after[2] - after[0]) == pytest.approx(1.03 * (before[2] - before[0]), abs=0.01)
    assert_allclose(_paper_centroid(out.image, _centre(after)), _centre(after), atol=1.5)


def test_faint_and_broken_lines():
    form = _blank()
    rng = np.random.default_rng(0)
    faint = fg.scan_distort(form, rng=rng, faint_lines=0.6)
    assert_allclose(np.median(faint.image[form.rules]), 255 * 0.6, atol=3)
    assert np.median(faint.image[~form.rules & (form.printed < 128)]) < 30  # text stays dark
    broken = fg.scan_distort(form, rng=rng, broken_lines=0.2)
    lost = (broken.image[form.rules] == 255).mean()
    assert 0.08 < lost < 0.35
    with pytest.raises(ValueError):
        fg.scan_distort(broken, rng=rng, faint_lines=0.5)


def test_noise_blur_lighting():
    form = _blank()
    rng = np.random.default_rng(0)
    noisy = fg.scan_distort(form, rng=rng, noise=1.0)
    x0, y0, x1, y1 = (int(v) for v in form.boxes["grower_number"][0])
    patch = noisy.image[y0 + 3:y1 - 3, x0 + 3:x1 - 3].astype(float)
    assert 5 < patch[patch > 100].std() < 15
    blurred = fg.scan_distort(form, rng=rng, blur=2.0)
    assert ((blurred.image > 20) & (blurred.image < 235)).sum() > 2 * (
        (form.image > 20) & (form.image < 235)).sum()
    lit = fg.scan_distort(form, rng=rng, lighting=0.4)
    paper = lit.image[form.image == 255]
    assert paper.max() >= 250 and paper.min() <= 255 * 0.65
    for out in (noisy, blurred, lit):
        assert out.image.shape == form.image.shape and out.image.dtype == np.uint8
        assert out.values == form.values and out.cells == form.cells
        assert out.printed is None


@pytest.mark.parametrize("suffix", [".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp"])
def test_save_scan_raster_formats_read_back(tmp_path, suffix):
    page = _blank(dpi=150).image
    path = tmp_path / f"card{suffix}"
    fg.save_scan(page, path, dpi=150)
    with Image.open(path) as image:
        assert image.size == (page.shape[1], page.shape[0])
        assert image.mode == "L"
        assert_allclose([float(v) for v in image.info["dpi"]], (150, 150), atol=0.05)
        back = np.asarray(image)
    tolerance = 4.0 if suffix in (".jpg", ".jpeg") else 0.0
    assert np.abs(back.astype(float) - page).mean() <= tolerance


def test_save_scan_multipage_tiff(tmp_path):
    pages = [_blank(dpi=150).image, np.full((300, 200), 255, np.uint8)]
    fg.save_scan(pages, tmp_path / "two.tif", dpi=150)
    with Image.open(tmp_path / "two.tif") as image:
        assert image.n_frames == 2
        image.seek(1)
        assert image.size == (200, 300)


def test_save_scan_pdf_pages_keep_their_size(tmp_path):
    pages = [_blank(dpi=200).image, _blank(fg.bench_page(), dpi=100).image]
    fg.save_scan(pages, tmp_path / "cards.pdf", dpi=200)
    pdf = pdfium.PdfDocument(tmp_path / "cards.pdf")
    try:
        assert len(pdf) == 2
        for page, pixels in zip(pdf, pages):
            width_pt, height_pt = page.get_size()
            assert width_pt == pytest.approx(pixels.shape[1] / 200 * 72, abs=0.5)
            assert height_pt == pytest.approx(pixels.shape[0] / 200 * 72, abs=0.5)
        back = np.asarray(pdf[0].render(scale=200 / 72, grayscale=True).to_pil().convert("L"))
        assert abs(back.shape[0] - pages[0].shape[0]) <= 1
        assert abs(back.shape[1] - pages[0].shape[1]) <= 1
        h, w = min(back.shape[0], pages[0].shape[0]), min(back.shape[1], pages[0].shape[1])
        assert np.abs(back[:h, :w].astype(float) - pages[0][:h, :w]).mean() < 6
    finally:
        pdf.close()


def test_save_scan_refuses_bad_requests(tmp_path):
    page = np.full((10, 10), 255, np.uint8)
    with pytest.raises(ValueError):
        fg.save_scan(page, tmp_path / "card.gif", dpi=150)
    with pytest.raises(ValueError):
        fg.save_scan([page, page], tmp_path / "card.png", dpi=150)
